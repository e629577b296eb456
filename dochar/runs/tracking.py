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
from mlflow.tracking import MlflowClient

from dochar.runs.bundle import RunBundle

DEFAULT_STORE = "mlflow.db"
DEFAULT_ARTIFACTS = "mlartifacts"
SWEEP_PARENT_ENV = "DOCHAR_SWEEP_PARENT"
SWEEP_ID_ENV = "DOCHAR_SWEEP_ID"
MODEL_DIR = "model"             # the run folder's saved model (a dochar unit), logged as is
MLFLOW_MODEL = "word_labeller"  # the same unit wrapped as an MLflow model (pyfunc flavour)


def resolve_uri(configured: str | None = None) -> str:
    if configured:
        return str(configured)
    if os.environ.get("MLFLOW_TRACKING_URI"):
        return os.environ["MLFLOW_TRACKING_URI"]
    return f"sqlite:///{Path(DEFAULT_STORE).resolve()}"


def ensure_experiment(uri: str, name: str) -> str:
    """Create the experiment on first use, with artifacts beside a local SQLite store."""
    client = MlflowClient(tracking_uri=uri)
    experiment = client.get_experiment_by_name(name)
    if experiment is not None:
        return experiment.experiment_id
    location = None
    if uri.startswith("sqlite:///"):
        location = (Path(uri.removeprefix("sqlite:///")).parent / DEFAULT_ARTIFACTS).resolve()
        location = location.as_uri()
    return client.create_experiment(name, artifact_location=location)


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
    """Log params, metrics, tags, the bundle folder (artifacts) and its saved model (an MLflow
    model); return the run id."""
    experiment_id = ensure_experiment(uri, experiment)
    mlflow.set_tracking_uri(uri)
    bundle.tags.update({**(extra_tags or {}), "git_commit": git_commit()})
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
        bundle.save(folder)
        mlflow.log_artifacts(str(folder))
        if (folder / MODEL_DIR).is_dir():
            log_model(folder / MODEL_DIR)
    return bundle.run_id


def pip_requirements() -> list[str]:
    """dochar's own install requirements (no extras): what loading the MLflow model needs."""
    from importlib import metadata

    try:
        requires = metadata.requires("dochar") or []
        version = metadata.version("dochar")
    except metadata.PackageNotFoundError:
        return []
    return [f"dochar=={version}", *(r for r in requires if "extra ==" not in r)]


def log_model(unit: Path) -> None:
    """Log a saved dochar unit as the run's MLflow model ``word_labeller`` (pyfunc flavour).

    The unit is then stored twice (in the run folder's artifacts, which ``dochar predict`` and
    the gate read like any run folder, and inside the MLflow model, which MLflow's loaders and
    serving read). No environment is created: the requirements are written down, not installed.
    """
    from dochar.runs import pyfunc_model

    os.environ.setdefault("MLFLOW_ENABLE_ARTIFACTS_PROGRESS_BAR", "false")
    mlflow.pyfunc.log_model(name=MLFLOW_MODEL, python_model=pyfunc_model.__file__,
                            artifacts={pyfunc_model.UNIT_ARTIFACT: str(unit)},
                            pip_requirements=pip_requirements())
