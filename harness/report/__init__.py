"""Tables, plots and the report, regenerated from a results store alone."""
