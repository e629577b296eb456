"""The experiment's saved view of MLflow's UI grows with the runs logged into it.

Stored as MLflow 3's UI reads saved views (experiment tag ``mlflow.sharedViewState.<id>``, an
envelope ``{name, createdAt, updatedAt, state}`` whose ``state`` is JSON text; read from the UI's
code and mlflow/mlflow pull requests 24359/24360), on a real SQLite store.
"""

from __future__ import annotations

import json

from mlflow import MlflowClient

from dochar.runs.score_view import add_run_to_view


def test_a_later_run_adds_its_sides_before_the_dataset_and_keeps_the_view_s_birth(tmp_path):
    client = MlflowClient(tracking_uri=f"sqlite:///{tmp_path / 'mlflow.db'}")
    experiment_id = client.create_experiment("views")
    add_run_to_view(client, experiment_id, "macro_f1", {"macro_f1": 0.8})
    first = json.loads(client.get_experiment(experiment_id).tags[
        "mlflow.sharedViewState.dochar-scores"])
    add_run_to_view(client, experiment_id, "macro_f1",
                    {"macro_f1": 0.9, "unseen/macro_f1": 0.7, "seen/macro_f1": 0.95})
    second = json.loads(client.get_experiment(experiment_id).tags[
        "mlflow.sharedViewState.dochar-scores"])
    assert second["createdAt"] == first["createdAt"] <= second["updatedAt"]
    state = json.loads(second["state"])
    # worked out by hand: the headline, then the sides the second run brought, the training
    # time after every score, and the dataset last; ranked by the headline, best first
    expected = ["metrics.`macro_f1`", "metrics.`unseen/macro_f1`", "metrics.`seen/macro_f1`",
                "metrics.`cost/train_seconds`", "attributes.`Dataset`"]
    assert state["columnOrder"] == expected
    assert state["selectedColumns"] == expected
    assert (state["orderByKey"], state["orderByAsc"]) == ("metrics.`macro_f1`", False)
