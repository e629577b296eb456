"""MLflow logging: one run per experiment job, by default into an embedded SQLite store.

No server is needed: ``sqlite:///mlflow.db`` in the working directory holds runs and params, and
artifacts go to ``mlartifacts/`` beside it. ``MLFLOW_TRACKING_URI`` or ``tracking.uri`` point
elsewhere (a server, another file).
"""

from __future__ import annotations

import os
import subprocess
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import mlflow
import mlflow.data
from mlflow.tracking import MlflowClient

from dochar.runs.bundle import RunBundle

DEFAULT_STORE = "mlflow.db"
DEFAULT_ARTIFACTS = "mlartifacts"
SWEEP_PARENT_ENV = "DOCHAR_SWEEP_PARENT"
SWEEP_ID_ENV = "DOCHAR_SWEEP_ID"
EXPERIMENT_KIND_TAG = "mlflow.experimentKind"
MODEL_DEVELOPMENT = "custom_model_development"
LOCAL_UI = "http://127.0.0.1:5000"
LIBRARIES = ("dochar", "torch", "torch-geometric", "scikit-learn", "numpy", "pandas", "mlflow")


def resolve_uri(configured: str | None = None) -> str:
    if configured:
        return str(configured)
    if os.environ.get("MLFLOW_TRACKING_URI"):
        return os.environ["MLFLOW_TRACKING_URI"]
    return f"sqlite:///{Path(DEFAULT_STORE).resolve()}"


def ensure_experiment(uri: str, name: str) -> str:
    """Create the experiment on first use, with artifacts beside a local SQLite store.

    MLflow 3's UI opens an experiment by its kind; marking dochar's as model development makes
    it open on the runs view (an unmarked one opens on traces, empty for dochar).
    """
    client = MlflowClient(tracking_uri=uri)
    experiment = client.get_experiment_by_name(name)
    if experiment is None:
        location = None
        if uri.startswith("sqlite:///"):
            location = (Path(uri.removeprefix("sqlite:///")).parent / DEFAULT_ARTIFACTS).resolve()
            location = location.as_uri()
        experiment_id = client.create_experiment(name, artifact_location=location)
    else:
        experiment_id = experiment.experiment_id
    if (experiment is None or experiment.tags.get(EXPERIMENT_KIND_TAG) != MODEL_DEVELOPMENT):
        client.set_experiment_tag(experiment_id, EXPERIMENT_KIND_TAG, MODEL_DEVELOPMENT)
    return experiment_id


def runs_view(uri: str, experiment_id: str, ui: str = LOCAL_UI) -> str:
    """The address of the experiment's runs view: on the server itself, or on `mlflow ui`
    started over a local store at ``ui``."""
    base = uri.rstrip("/") if uri.startswith(("http://", "https://")) else ui
    return f"{base}/#/experiments/{experiment_id}/runs"


def ui_hint(uri: str, experiment: str) -> str:
    """What to run and open to see the experiment's runs, printed after every run and sweep."""
    address = runs_view(uri, ensure_experiment(uri, experiment))
    if uri.startswith(("http://", "https://")):
        return f"runs of '{experiment}': {address}"
    return (f"runs of '{experiment}': start `mlflow ui --backend-store-uri {uri} --port "
            f"{LOCAL_UI.rsplit(':', 1)[1]}`, then open {address}")


def library_versions() -> dict[str, str]:
    """Versions of the libraries behind a run's numbers, as tags ``version/<distribution>``."""
    from importlib.metadata import PackageNotFoundError, version

    found = {}
    for name in LIBRARIES:
        try:
            found[f"version/{name}"] = version(name)
        except PackageNotFoundError:
            continue
    return found


def log_dataset(bundle: RunBundle) -> None:
    """The run's documents as an MLflow dataset input: runs on the same data group together."""
    documents = bundle.tables.get("documents")
    if documents is None:
        return
    dataset = mlflow.data.from_pandas(documents.reset_index(), name=bundle.tags.get("dataset"),
                                      source=bundle.tags.get("data_source") or None,
                                      digest=bundle.tags.get("data_fingerprint"))
    counts = documents["part"].value_counts()
    mlflow.log_input(dataset, context="/".join(f"{part} {counts.get(part, 0)}"
                                               for part in ("train", "val", "test")))


def flatten(config: Mapping[str, Any], prefix: str = "") -> dict[str, str]:
    flat: dict[str, str] = {}
    for key, value in config.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping) and value:
            flat.update(flatten(value, f"{name}."))
        else:
            flat[name] = str(value)[:6000]
    return flat


def git_commit() -> str:
    try:
        return subprocess.run(["git", "rev-parse", "HEAD"], capture_output=True, text=True,
                              check=True, cwd=Path(__file__).parent).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "unknown"


def log_run(bundle: RunBundle, folder: Path, *, uri: str, experiment: str,
            extra_tags: Mapping[str, str] | None = None) -> str:
    """Log params, metrics, tags and the bundle folder (artifacts); return the run id."""
    experiment_id = ensure_experiment(uri, experiment)
    mlflow.set_tracking_uri(uri)
    bundle.tags.update({**(extra_tags or {}), "git_commit": git_commit(), **library_versions()})
    if os.environ.get(SWEEP_ID_ENV):
        bundle.tags["sweep_id"] = os.environ[SWEEP_ID_ENV]
    tags = dict(bundle.tags)
    if os.environ.get(SWEEP_PARENT_ENV):
        tags["mlflow.parentRunId"] = os.environ[SWEEP_PARENT_ENV]
    with mlflow.start_run(experiment_id=experiment_id, run_name=bundle.name, tags=tags) as run:
        mlflow.log_params(flatten(bundle.config))
        mlflow.log_metrics({k: v for k, v in {**bundle.metrics, **{f"cost/{k}": v for k, v in
                                                                  bundle.cost.items()}}.items()})
        bundle.run_id = run.info.run_id
        log_dataset(bundle)
        bundle.save(folder)
        mlflow.log_artifacts(str(folder))
    return bundle.run_id
