"""Runs: the config check before a run, the run bundle, tracking in MLflow, sweeps and their
tables, comparisons of runs."""
