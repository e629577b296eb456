"""MLflow logging: one run per experiment job, by default into an embedded SQLite store.

No server is needed: ``sqlite:///mlflow.db`` in the working directory holds runs and params, and
artifacts go to ``mlartifacts/`` beside it. ``MLFLOW_TRACKING_URI`` or ``tracking.uri`` point
elsewhere (a shared server from ``dochar tracking-server``, another file).

Parallel sweeps on SQLite: SQLite lets one writer in at a time and MLflow's store gives up with
"database is locked" when several job processes write at once, so every write to a SQLite store
from dochar goes through one file lock beside the database (``mlflow.db.lock``). A server needs
no lock: it serialises its own database writes.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import logging
import math
import os
import re
import subprocess
import time
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import mlflow
import mlflow.data
from filelock import FileLock
from mlflow.tracking import MlflowClient

from dochar.runs.bundle import RunBundle
from dochar.runs.killed_runs import SWEEP_HASH_TAG, WRITTEN_BY_TAG, end_as_killed, writer
from dochar.runs.score_view import add_run_to_view, stored_view, view_address

# MLflow's and its migration tool's notes on every run ("Updating database tables", SQLite
# context): nothing a user can act on, so only their warnings and errors are shown.
for _name in ("mlflow", "alembic"):
    logging.getLogger(_name).setLevel(logging.WARNING)
# Warnings raised while MLflow logs a finished run (dataset source guessing, integer columns in
# an inferred schema, type hints of the model wrapper) concern how dochar calls MLflow, not the
# user's run: nothing the user can act on, so they are kept out of the console.
@contextlib.contextmanager
def quiet_library() -> Iterator[None]:
    """Library warnings silenced for one block of MLflow logging calls.

    Filters alone do not hold: some MLflow calls set their own ("once") inside; so the warnings
    of these kinds that get through are dropped where they would be shown.
    """
    with warnings.catch_warnings():   # restores the filters and showwarning afterwards
        warnings.simplefilter("ignore", UserWarning)
        warnings.simplefilter("ignore", FutureWarning)
        shown = warnings.showwarning

        def show(message, category, *args, **kwargs):
            if not issubclass(category, (UserWarning, FutureWarning)):
                shown(message, category, *args, **kwargs)

        warnings.showwarning = show
        yield


DEFAULT_STORE = "mlflow.db"
DEFAULT_ARTIFACTS = "mlartifacts"
SWEEP_PARENT_ENV = "DOCHAR_SWEEP_PARENT"
SWEEP_ID_ENV = "DOCHAR_SWEEP_ID"
SWEEP_HASH_ENV = "DOCHAR_SWEEP_HASH"
EXPERIMENT_KIND_TAG = "mlflow.experimentKind"
MODEL_DEVELOPMENT = "custom_model_development"
LOCAL_UI = "http://127.0.0.1:5000"
LIBRARIES = ("dochar", "torch", "torch-geometric", "scikit-learn", "numpy", "pandas", "mlflow")
CONFIG_HASH_TAG = "config_hash"
FINGERPRINT_TAG = "data_fingerprint"
MASK = "***"
SQLITE_LOCK_SECONDS = 600.0
DATASET_ATTEMPTS = 4    # jobs logging one dataset at once: see log_dataset
# Keys that change how a run is shown or logged, not what it computes: left out of the hash.
UNHASHED = ("tracking", "run_name", "hydra", "train.progress", "train.checkpoint_dir")

# RFC 3986 section 3.2.1: authority = [userinfo "@"] host, userinfo = user ":" password, neither
# holding "/?#[]@" unencoded. Only the password is replaced: user and host stay readable.
_PASSWORD = re.compile(r"(?P<head>[A-Za-z][A-Za-z0-9+.\-]*://[^:/?#\[\]@\s]*:)"
                       r"(?P<password>[^/?#\[\]@\s]*)@")


def mask_passwords(text: str) -> str:
    """``postgresql://ana:s3cret@db/x`` -> ``postgresql://ana:***@db/x``: the one masking rule
    for everything dochar prints, logs or writes."""
    return _PASSWORD.sub(lambda m: f"{m['head']}{MASK}@", text)


def masked(value: Any) -> Any:
    """The same value with every URI password inside it (strings, lists, mappings) masked."""
    if isinstance(value, str):
        return mask_passwords(value)
    if isinstance(value, Mapping):
        return {key: masked(item) for key, item in value.items()}
    if isinstance(value, (list, tuple)):
        return type(value)(masked(item) for item in value)
    return value
MODEL_DIR = "model"             # the run folder's saved model (a dochar unit), logged as is
MLFLOW_MODEL = "word_labeller"  # the same unit wrapped as an MLflow model (pyfunc flavour)


def resolve_uri(configured: str | None = None) -> str:
    if configured:
        return str(configured)
    if os.environ.get("MLFLOW_TRACKING_URI"):
        return os.environ["MLFLOW_TRACKING_URI"]
    return f"sqlite:///{Path(DEFAULT_STORE).resolve()}"


def sqlite_path(uri: str) -> Path | None:
    return Path(uri.removeprefix("sqlite:///")) if uri.startswith("sqlite:///") else None


@contextlib.contextmanager
def store_writes(uri: str) -> Iterator[None]:
    """Hold the store's write lock (SQLite only; a no-op for servers and other databases)."""
    path = sqlite_path(uri)
    if path is None:
        yield
        return
    path.parent.mkdir(parents=True, exist_ok=True)
    with FileLock(f"{path}.lock", timeout=SQLITE_LOCK_SECONDS):
        yield


def ensure_experiment(uri: str, name: str) -> str:
    """Create the experiment on first use, with artifacts beside a local SQLite store.

    MLflow 3's UI opens an experiment by its kind; marking dochar's as model development makes
    it open on the runs view (an unmarked one opens on traces, empty for dochar).
    """
    with store_writes(uri):
        client = MlflowClient(tracking_uri=uri)
        experiment = client.get_experiment_by_name(name)
        if experiment is None:
            location = None
            if (path := sqlite_path(uri)) is not None:
                location = (path.parent / DEFAULT_ARTIFACTS).resolve().as_uri()
            experiment_id = client.create_experiment(name, artifact_location=location)
        else:
            experiment_id = experiment.experiment_id
        if experiment is None or experiment.tags.get(EXPERIMENT_KIND_TAG) != MODEL_DEVELOPMENT:
            client.set_experiment_tag(experiment_id, EXPERIMENT_KIND_TAG, MODEL_DEVELOPMENT)
        return experiment_id


def runs_view(uri: str, experiment_id: str, ui: str = LOCAL_UI) -> str:
    """The address of the experiment's runs view: on the server itself, or on `mlflow ui`
    started over a local store at ``ui``."""
    base = uri.rstrip("/") if uri.startswith(("http://", "https://")) else ui
    return f"{base}/#/experiments/{experiment_id}/runs"


def ui_hint(uri: str, experiment: str) -> str:
    """What to run and open to see the experiment's runs, printed after every run and sweep:
    the runs view opened on the headline scores once a run has stored that view."""
    experiment_id = ensure_experiment(uri, experiment)
    address = runs_view(uri, experiment_id)
    if stored_view(MlflowClient(tracking_uri=uri), experiment_id) is not None:
        address = view_address(address)
    if uri.startswith(("http://", "https://")):
        return f"runs of '{experiment}': {address}"
    return (f"runs of '{experiment}': start `mlflow ui --backend-store-uri {uri} --port "
            f"{LOCAL_UI.rsplit(':', 1)[1]}`, then open {address}")


def library_versions(libraries: Sequence[str] = LIBRARIES) -> dict[str, str]:
    """Installed versions of the libraries behind a run's numbers (distribution names)."""
    from importlib.metadata import PackageNotFoundError, version

    found = {}
    for name in libraries:
        try:
            found[name] = version(name)
        except PackageNotFoundError:
            found[name] = "absent"
    return found


CURVE_METRICS = {"train_loss": "train/loss", "val_macro_f1": "val/macro_f1",
                 "val_link_f1": "val/link_f1", "learning_rate": "train/learning_rate"}


def log_curve(run_id: str, curve: Any) -> None:
    """Per-epoch training loss, validation macro-F1 and learning rate, with ``step=epoch``; the
    epoch whose weights were kept is the metric ``cost/best_epoch``."""
    from mlflow.entities import Metric

    if curve is None or curve.empty:
        return
    now = int(time.time() * 1000)
    metrics = [Metric(name, float(value), now, int(epoch))
               for column, name in CURVE_METRICS.items() if column in curve
               for epoch, value in curve[column].items() if math.isfinite(float(value))]
    for start in range(0, len(metrics), 1000):   # MLflow takes at most 1000 metrics a batch
        MlflowClient().log_batch(run_id, metrics=metrics[start:start + 1000])


def log_dataset(bundle: RunBundle) -> None:
    """The run's documents as an MLflow dataset input: runs on the same data group together."""
    documents = bundle.tables.get("documents")
    if documents is None:
        return
    dataset = mlflow.data.from_pandas(documents.reset_index(), name=bundle.tags.get("dataset"),
                                      source=bundle.tags.get("data_source") or None,
                                      digest=bundle.tags.get("data_fingerprint"))
    counts = documents["part"].value_counts()
    context = "/".join(f"{part} {counts.get(part, 0)}" for part in ("train", "val", "test"))
    for attempt in range(DATASET_ATTEMPTS):
        try:
            mlflow.log_input(dataset, context=context)
            return
        except mlflow.exceptions.MlflowException:
            # The store's get-or-create of the dataset row is check-then-insert: when jobs of
            # a sweep log the same documents at once, all but one insert are refused by the
            # unique key. Asked again, the store finds the row the winner wrote.
            if attempt == DATASET_ATTEMPTS - 1:
                raise
            time.sleep(0.2 * (attempt + 1))


def flatten(config: Mapping[str, Any], prefix: str = "") -> dict[str, Any]:
    """Dotted keys -> values of a nested config (an empty mapping stays one value)."""
    flat: dict[str, Any] = {}
    for key, value in config.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping) and value:
            flat.update(flatten(value, f"{name}."))
        else:
            flat[name] = value
    return flat


def params(config: Mapping[str, Any]) -> dict[str, str]:
    """The run config as MLflow params: dotted keys, values as text (MLflow's length limit)."""
    return {key: str(value)[:6000] for key, value in flatten(config).items()}


def computed_config(config: Mapping[str, Any]) -> dict[str, Any]:
    """The flattened config without the keys in UNHASHED: what decides a run's numbers."""
    return {key: value for key, value in flatten(config).items()
            if not any(key == k or key.startswith(f"{k}.") for k in UNHASHED)}


def config_hash(config: Mapping[str, Any]) -> str:
    """Hash of the computed config: equal hashes, same computation."""
    return hashlib.sha256(json.dumps(computed_config(config), sort_keys=True,
                                     default=str).encode()).hexdigest()[:20]


def git_commit() -> str:
    try:
        return subprocess.run(["git", "rev-parse", "HEAD"], capture_output=True, text=True,
                              check=True, cwd=Path(__file__).parent).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "unknown"


def seal(bundle: RunBundle) -> RunBundle:
    """Tag the run with its config hash, then mask passwords in its config, command and tags:
    done once, before the run folder is written, so no file or store ever sees a password."""
    bundle.tags.setdefault(CONFIG_HASH_TAG, config_hash(bundle.config))
    tuning = bundle.config.get("tuning") or {}
    if tuning.get("budget") is not None:
        bundle.tags["tuning_budget"] = str(tuning["budget"])
        bundle.tags["tuning_score"] = str(tuning.get("score", ""))
    bundle.config = masked(bundle.config)
    bundle.command = mask_passwords(bundle.command)
    bundle.tags = masked(bundle.tags)
    return bundle


def log_run(bundle: RunBundle, folder: Path, *, uri: str, experiment: str,
            extra_tags: Mapping[str, str] | None = None, started: float | None = None) -> str:
    """Log params, metrics, tags, the bundle folder (artifacts) and its saved model (an MLflow
    model); return the run id.

    The run is logged once its work is done, so ``started`` (seconds since the epoch, taken
    when the work began) is its MLflow start time and the end of logging its end time: the
    duration MLflow shows is the run's own, not the few seconds logging took.
    """
    seal(bundle)
    experiment_id = ensure_experiment(uri, experiment)
    with _tracking_uri(uri), quiet_library():
        return _log(bundle, folder, uri, experiment_id, extra_tags, started)


@contextlib.contextmanager
def _tracking_uri(uri: str) -> Iterator[None]:
    """MLflow's fluent API for one block; its `set_tracking_uri` also writes
    MLFLOW_TRACKING_URI into the environment, which later subprocesses would inherit."""
    before = os.environ.get("MLFLOW_TRACKING_URI")
    mlflow.set_tracking_uri(uri)
    try:
        yield
    finally:
        mlflow.set_tracking_uri(before)


def _log(bundle: RunBundle, folder: Path, uri: str, experiment_id: str,
         extra_tags: Mapping[str, str] | None, started: float | None) -> str:
    bundle.tags.update({**masked(dict(extra_tags or {})), "git_commit": git_commit(),
                        **{f"version/{name}": v for name, v in library_versions().items()}})
    bundle.tags.update(sweep_tags())
    tags = {**bundle.tags, WRITTEN_BY_TAG: writer()}
    if os.environ.get(SWEEP_PARENT_ENV):
        tags["mlflow.parentRunId"] = os.environ[SWEEP_PARENT_ENV]
    with store_writes(uri):
        client = MlflowClient(tracking_uri=uri)
        created = client.create_run(experiment_id, run_name=bundle.name, tags=tags,
                                    start_time=None if started is None else int(started * 1000))
        add_run_to_view(client, experiment_id, bundle.headline, bundle.metrics)
    try:
        with store_writes(uri), mlflow.start_run(run_id=created.info.run_id) as run:
            mlflow.log_params(params(bundle.config))
            mlflow.log_metrics({k: v for k, v in {**bundle.metrics, **{
                f"cost/{k}": v for k, v in bundle.cost.items()}}.items()})
            bundle.run_id = run.info.run_id
            log_dataset(bundle)
            log_curve(run.info.run_id, bundle.tables.get("training_curve"))
            bundle.save(folder)
            mlflow.log_artifacts(str(folder))
            if (folder / MODEL_DIR).is_dir():
                log_model(folder / MODEL_DIR)
    except (KeyboardInterrupt, SystemExit):
        # Ctrl-C, or a pre-emption signal whose handler exits (submitit's re-queue): MLflow
        # has just ended the run FAILED, which it did not; it was stopped, like a killed run.
        with store_writes(uri):
            end_as_killed(MlflowClient(tracking_uri=uri), created.info.run_id)
        raise
    return bundle.run_id


def sweep_tags() -> dict[str, str]:
    """The sweep a job belongs to (its folder's name and the hash of its command)."""
    return {tag: os.environ[env] for tag, env in (("sweep_id", SWEEP_ID_ENV),
                                                  (SWEEP_HASH_TAG, SWEEP_HASH_ENV))
            if os.environ.get(env)}


def log_failed_run(uri: str, experiment: str, name: str, reason: str,
                   tags: Mapping[str, str], started: float | None = None) -> str:
    """A run with status FAILED and the reason as a tag, so a shared store shows what broke;
    ``started`` (seconds since the epoch) is when the failed job began, its MLflow start."""
    experiment_id = ensure_experiment(uri, experiment)
    all_tags = {**tags, "failure": mask_passwords(reason)[:5000], **sweep_tags()}
    if os.environ.get(SWEEP_PARENT_ENV):
        all_tags["mlflow.parentRunId"] = os.environ[SWEEP_PARENT_ENV]
    with store_writes(uri):
        client = MlflowClient(tracking_uri=uri)
        run = client.create_run(experiment_id, run_name=name, tags=masked(all_tags),
                                start_time=None if started is None else int(started * 1000))
        client.set_terminated(run.info.run_id, status="FAILED")
    return run.info.run_id


def finished_run(uri: str, experiment: str, hash_value: str,
                 data_fingerprint: Callable[[], str]) -> Any | None:
    """A FINISHED run of the experiment with this config hash and data fingerprint, or None.

    The fingerprint is asked for only when some run has the hash (it may mean loading the data).
    """
    with store_writes(uri):
        client = MlflowClient(tracking_uri=uri)
        found = client.get_experiment_by_name(experiment)
        if found is None:
            return None
        runs = client.search_runs([found.experiment_id],
                                  filter_string=(f"tags.{CONFIG_HASH_TAG} = '{hash_value}' and "
                                                 "attributes.status = 'FINISHED'"),
                                  max_results=50)
    if not runs:
        return None
    fingerprint = data_fingerprint()
    return next((run for run in runs if run.data.tags.get(FINGERPRINT_TAG) == fingerprint), None)


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
