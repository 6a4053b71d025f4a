"""Pure computations on the results frame and on score matrices: statistics, the verdict,
speedup and Amdahl's law, agreement between two results folders, the recommendation of
``woodlot choose``. Nothing here writes a file or formats text for a reader."""
