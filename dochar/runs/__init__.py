"""Runs: the run bundle, tracking in MLflow, sweeps and their tables, comparisons of runs."""
