"""Running the `dochar` command in a fresh process, as a user would, and reading its store."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import mlflow
import pandas as pd

from tests.helpers import REPO

# A tiny, fast run: 16 certificates, a 10-tree forest or a 2-epoch GNN, few resamples.
TINY = ["data.documents=16", "train.progress=false", "evaluation.bootstrap_resamples=50",
        "features=geometry_text"]
TINY_FOREST = [*TINY, "model=random_forest"]
TINY_GNN = [*TINY, "model=relational", "model.hidden_dim=16", "model.depth=1",
            "train.max_epochs=2", "train.patience=2"]


def dochar(cwd: Path, *args: str, expect: int | None = 0,
           timeout: float = 900) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    result = subprocess.run([sys.executable, "-m", "dochar.cli", *args], cwd=cwd, env=env,
                            capture_output=True, text=True, timeout=timeout)
    if expect is not None:
        assert result.returncode == expect, (f"exit {result.returncode}\n" +
                                             result.stdout[-4000:] + result.stderr[-4000:])
    return result


def runs_frame(uri: str, experiment: str) -> pd.DataFrame:
    """Every run of an experiment, any status: run_id, status, metrics.*, params.*, tags.*."""
    client = mlflow.MlflowClient(tracking_uri=uri)
    found = client.get_experiment_by_name(experiment)
    assert found is not None, f"no experiment {experiment!r} at {uri}"
    rows = []
    for run in client.search_runs([found.experiment_id], max_results=1000):
        rows.append({"run_id": run.info.run_id, "status": run.info.status,
                     **{f"metrics.{k}": v for k, v in run.data.metrics.items()},
                     **{f"params.{k}": v for k, v in run.data.params.items()},
                     **{f"tags.{k}": v for k, v in run.data.tags.items()}})
    return pd.DataFrame(rows)


def job_runs(frame: pd.DataFrame) -> pd.DataFrame:
    """The sweep's job runs (not the parent, not failures)."""
    kind = frame.get("tags.kind", pd.Series([None] * len(frame), index=frame.index))
    return frame[kind.isna()]
