"""The experiment's runs table in MLflow's UI, opened on the scores a reader compares.

MLflow's UI keeps no per-experiment default for the runs table: each browser remembers its own
columns, and a fresh browser shows MLflow's own choice (source, models, dataset), no score. What
the UI does keep on the server is a *saved view* (MLflow 3.x, mlflow/mlflow pull requests 24359
and 24360): an experiment tag ``mlflow.sharedViewState.<id>`` whose value is the JSON envelope
``{"name", "createdAt", "updatedAt", "state"}`` (times in ms), ``state`` being the view itself
as JSON text: ``selectedColumns`` and ``columnOrder`` (keys like ``metrics.`macro_f1```),
``orderByKey`` and ``orderByAsc``; fields left out keep the UI's defaults. The UI lists saved views in the runs
tab's views menu and opens one from ``#/experiments/<id>/runs?viewStateShareKey=<id>``.

dochar keeps one such view per experiment (:data:`VIEW_ID`): every logged run adds its headline
score, the score on seen and unseen layouts when it has them, and its training time; rows are
sorted by the first headline score, best first. The address dochar prints opens this view.
"""

from __future__ import annotations

import json
import time
from collections.abc import Mapping, Sequence
from typing import Any

from mlflow.tracking import MlflowClient

VIEW_TAG_PREFIX = "mlflow.sharedViewState."   # MLflow UI's saved views (experiment tags)
VIEW_ID = "dochar-scores"
VIEW_NAME = "dochar: headline scores"
SHARE_KEY = "viewStateShareKey"                # the UI's query parameter naming a saved view
OTHER_COLUMNS = ("attributes.`Dataset`",)
TRAINING_TIME = "cost/train_seconds"


def column(metric: str) -> str:
    """The UI's key of a metric column (its canonical sort key: type, dot, back-quoted name)."""
    return f"metrics.`{metric}`"


def run_columns(headline: str, metrics: Mapping[str, float]) -> list[str]:
    """The columns one run asks for: its headline score, unseen and seen sides when logged,
    and its training time."""
    wanted = [headline, f"unseen/{headline}", f"seen/{headline}"]
    names = [name for name in wanted if name == headline or name in metrics]
    return [column(name) for name in [*names, TRAINING_TIME]]


def view_state(columns: Sequence[str], order_by: str) -> dict[str, Any]:
    """Scores first in the order they came, then the training time, then the dataset
    (``columnOrder``: the UI otherwise sorts metric columns by name, after the dataset)."""
    def place(key: str) -> int:
        return 2 if key in OTHER_COLUMNS else 1 if key == column(TRAINING_TIME) else 0

    shown = sorted(dict.fromkeys([*columns, *OTHER_COLUMNS]), key=place)   # a stable sort
    return {"selectedColumns": shown, "columnOrder": shown, "orderByKey": order_by,
            "orderByAsc": False}


def stored_view(client: MlflowClient, experiment_id: str) -> dict[str, Any] | None:
    """The experiment's dochar view as stored (envelope with ``state`` decoded), or None."""
    value = client.get_experiment(experiment_id).tags.get(VIEW_TAG_PREFIX + VIEW_ID)
    if value is None:
        return None
    try:
        envelope = json.loads(value)
        return {**envelope, "state": json.loads(envelope["state"])}
    except (ValueError, KeyError, TypeError):   # edited by hand into something else: rewritten
        return None


def add_run_to_view(client: MlflowClient, experiment_id: str, headline: str,
                    metrics: Mapping[str, float]) -> dict[str, Any]:
    """Add one run's columns to the experiment's view (created on first use) and store it.

    Columns already in the view keep their place, so a view a user reordered in the UI and
    saved again under the same id keeps their order; the sort stays on the first headline.
    Call with the store's write lock held.
    """
    now = int(time.time() * 1000)
    found = stored_view(client, experiment_id)
    state = found["state"] if found else {}
    columns = [*state.get("columnOrder", []), *state.get("selectedColumns", []),
               *run_columns(headline, metrics)]
    order_by = state.get("orderByKey") or column(headline)
    state = {**state, **view_state(columns, order_by)}
    envelope = {"name": VIEW_NAME, "createdAt": found["createdAt"] if found else now,
                "updatedAt": now, "state": json.dumps(state)}
    client.set_experiment_tag(experiment_id, VIEW_TAG_PREFIX + VIEW_ID, json.dumps(envelope))
    return state


def view_address(runs_address: str) -> str:
    """The runs view's address opened on dochar's saved view."""
    return f"{runs_address}?{SHARE_KEY}={VIEW_ID}"
