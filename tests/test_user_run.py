"""A user's own run through the `dochar` command, as a newcomer meets it: what the console shows
(no library chatter, no progress bars in a log, the run folder at the end), where MLflow files
the run (an experiment of its own, not the demo's) and the times it records.

One run of a small forest in a fresh folder, its output captured as a log would capture it (not
a terminal); the store is read back with MLflow's own client.
"""

from __future__ import annotations

import os
import re
import time

import pytest
from mlflow import MlflowClient

from tests.helpers.cli import TINY_FOREST, dochar

DEMO_EXPERIMENT = "dochar-demo"   # the Makefile's DEMO_EXPERIMENT


@pytest.fixture(scope="module")
def user_run(tmp_path_factory) -> dict:
    folder = tmp_path_factory.mktemp("user")
    environment = os.environ.pop("MLFLOW_TRACKING_URI", None)
    try:
        before = time.time()
        done = dochar(folder, "run", *[o for o in TINY_FOREST if o != "train.progress=false"])
        after = time.time()
    finally:
        if environment is not None:
            os.environ["MLFLOW_TRACKING_URI"] = environment
    client = MlflowClient(tracking_uri=f"sqlite:///{folder / 'mlflow.db'}")
    return {"folder": folder, "stdout": done.stdout, "stderr": done.stderr, "before": before,
            "after": after, "client": client}


def test_the_run_lands_in_an_experiment_of_its_own(user_run):
    client = user_run["client"]
    names = {e.name for e in client.search_experiments()} - {"Default"}
    assert names and DEMO_EXPERIMENT not in names
    (name,) = names
    assert f"runs of '{name}'" in user_run["stdout"]


def test_the_console_ends_with_the_run_folder(user_run):
    (folder,) = (user_run["folder"] / "outputs" / "runs").glob("*/run")
    last = user_run["stdout"].strip().splitlines()[-1]
    assert last == f"run folder: {folder.resolve()}"
    assert (folder / "summary.json").exists()


def test_no_library_warnings_and_no_progress_bars_off_a_terminal(user_run):
    stderr = user_run["stderr"]
    # Python's warning lines ("<file>:<line>: UserWarning: ...") and MLflow's log lines
    assert not re.search(r"\w+Warning:", stderr), stderr[-2000:]
    assert "mlflow" not in stderr.lower() and "alembic" not in stderr.lower(), stderr[-2000:]
    # tqdm redraws its bar with carriage returns and "it/s" rates
    assert "\r" not in stderr and "it/s" not in stderr, stderr[-2000:]


def test_mlflow_times_enclose_the_work_of_the_run(user_run):
    client = user_run["client"]
    (experiment,) = [e for e in client.search_experiments() if e.name != "Default"]
    (run,) = client.search_runs([experiment.experiment_id])
    start, end = run.info.start_time / 1000, run.info.end_time / 1000
    (folder,) = (user_run["folder"] / "outputs" / "runs").glob("*/run")
    # the figures are drawn after training and before logging (dochar.report.run_folder)
    figures = os.path.getmtime(folder / "confusion_counts.png")
    train_seconds = run.data.metrics["cost/train_seconds"]
    slack = 0.002   # MLflow keeps whole milliseconds
    assert user_run["before"] - slack <= start
    assert start + train_seconds <= figures + slack   # the training lies inside the run
    assert figures <= end + slack <= user_run["after"] + 2 * slack


def test_mlflow_duration_is_the_run_s_own(user_run):
    """What MLflow's runs table shows as Duration (end - start) holds the training and no more
    than the process took (the duration the UI showed was the logging's 1.6 s for 184 s of
    training before the start time was passed)."""
    client = user_run["client"]
    (experiment,) = [e for e in client.search_experiments() if e.name != "Default"]
    (run,) = client.search_runs([experiment.experiment_id])
    duration = (run.info.end_time - run.info.start_time) / 1000
    train_seconds = run.data.metrics["cost/train_seconds"]
    assert train_seconds <= duration <= user_run["after"] - user_run["before"]


def test_the_runs_view_opens_on_the_headline_scores(user_run):
    """The experiment holds a saved view of MLflow's UI (tag mlflow.sharedViewState.<id>, an
    envelope whose state names the columns; format read from MLflow 3's UI code and its pull
    requests 24359/24360) showing word macro-F1 (the word-labels task's headline, README) and the
    training time, best first; the printed address opens it."""
    import json

    client = user_run["client"]
    (experiment,) = [e for e in client.search_experiments() if e.name != "Default"]
    views = {key: value for key, value in experiment.tags.items()
             if key.startswith("mlflow.sharedViewState.")}
    assert len(views) == 1
    (key, value), = views.items()
    envelope = json.loads(value)
    assert isinstance(envelope["name"], str) and isinstance(envelope["createdAt"], int)
    state = json.loads(envelope["state"])
    assert state["orderByKey"] == "metrics.`macro_f1`" and state["orderByAsc"] is False
    metric_columns = [c for c in state["selectedColumns"] if c.startswith("metrics.")]
    assert metric_columns[0] == "metrics.`macro_f1`" == state["columnOrder"][0]
    assert "metrics.`cost/train_seconds`" in metric_columns
    (run,) = client.search_runs([experiment.experiment_id])
    # every score column the view shows is filled for the run (no empty column)
    assert all(c[len("metrics.`"):-1] in run.data.metrics for c in metric_columns)
    share_key = key.removeprefix("mlflow.sharedViewState.")
    assert f"/runs?viewStateShareKey={share_key}" in user_run["stdout"]
