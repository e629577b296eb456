"""MLflow shows a run's true duration: it starts when the job's work starts and ends when the
work (logging included) ends, though dochar logs each run only once it is finished.

Read back from the store with MLflow's own client and set against clocks outside dochar: the
test's own watch around the command, and the file times of the run folder it wrote.
"""

from __future__ import annotations

import os
import time

from mlflow import MlflowClient

from tests.helpers.cli import TINY_FOREST, dochar


def test_run_start_and_end_enclose_its_work(tmp_path, monkeypatch):
    monkeypatch.delenv("MLFLOW_TRACKING_URI", raising=False)
    before = time.time()
    dochar(tmp_path, "run", *TINY_FOREST, "tracking.experiment=times")
    after = time.time()
    client = MlflowClient(tracking_uri=f"sqlite:///{tmp_path / 'mlflow.db'}")
    (run,) = client.search_runs([client.get_experiment_by_name("times").experiment_id])
    start, end = run.info.start_time / 1000, run.info.end_time / 1000
    (folder,) = (tmp_path / "outputs" / "runs").glob("*/run")
    # the figures are drawn after training and before logging (dochar.report.run_folder)
    figures = os.path.getmtime(folder / "confusion_counts.png")
    train_seconds = run.data.metrics["cost/train_seconds"]
    slack = 0.002   # MLflow keeps whole milliseconds
    assert before - slack <= start
    assert start + train_seconds <= figures + slack   # training lies inside the run
    assert figures <= end + slack <= after + 2 * slack
    # the duration MLflow shows covers the training it reports
    assert end - start >= train_seconds
