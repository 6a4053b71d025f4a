"""Running units of work: a cell's fit, predict, score and measurements; a speedup point
timed alone; and the executors that run many of them (local processes, a Dask cluster)."""
