"""Sweeps (`dochar run -m ...`): one parent MLflow run and one ranked table at the end.

Hydra calls this callback around a multirun. Jobs may run in this process (basic launcher), in
worker processes (joblib) or on other machines (submitit, SLURM), so everything a job needs from
the sweep goes through files in the sweep folder, and everything the table needs comes back the
same way: each job leaves ``run/`` (a finished or skipped run) or ``failure.json`` (its reason)
in its job folder.

A failing job never stops the others: `guard_job` turns its error into ``failure.json`` (and a
FAILED run in the tracking store) and returns NaN, which the Optuna sweeper records as a failed
trial. The sweep ends with its table listing the failures, the parent run closed as FAILED and
`exit_code()` telling the command line that some jobs failed.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import logging
import math
import os
import shutil
import sys
import time
import traceback
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import mlflow
import pandas as pd
from filelock import FileLock, Timeout
from hydra.core.hydra_config import HydraConfig
from hydra.experimental.callback import Callback
from hydra.types import RunMode
from omegaconf import DictConfig, OmegaConf
from rich.table import Table

from dochar.data.files import (atomic_folder, make_folder, partial_path,
                               write_text_atomic)
from dochar.metrics.evaluate import headline_names
from dochar.runs.aggregate import aggregate_runs
from dochar.runs.bundle import RunBundle
from dochar.runs.console import aggregate_table, console, print_comparison
from dochar.runs.killed_runs import SWEEP_HASH_TAG, WRITTEN_BY_TAG, end_killed_runs, writer
from dochar.tasks import VALIDATION_SCORE
from dochar.runs.tracking import (CONFIG_HASH_TAG, SWEEP_HASH_ENV, SWEEP_ID_ENV,
                                  SWEEP_PARENT_ENV, config_hash, ensure_experiment,
                                  finished_run, log_failed_run, mask_passwords, resolve_uri,
                                  sqlite_path, store_writes, ui_hint)

RUN_FOLDER = "run"
FAILURE_FILE = "failure.json"
SKIPPED_FILE = "skipped.json"
CONTEXT_FILE = "sweep_context.json"
OPTUNA_RESULTS = "optimization_results.yaml"
SOME_JOBS_FAILED = 3   # exit code of a sweep that ended with failed jobs (documented in docs/team-setup.md)
REPEAT_KEYS = ("seed", "split.fold")  # overrides that repeat a system rather than change it
AGGREGATED = (*headline_names(), "cost/train_seconds")
_OUTCOME = {"failed": 0}


def exit_code() -> int:
    """0, or SOME_JOBS_FAILED when the last sweep of this process had failed jobs."""
    return SOME_JOBS_FAILED if _OUTCOME["failed"] else 0


def in_sweep() -> bool:
    return HydraConfig.initialized() and HydraConfig.get().mode == RunMode.MULTIRUN


def validation_score(bundle: RunBundle) -> float:
    """What sweepers optimise: the task's validation score, never a test score."""
    return float(bundle.cost.get(VALIDATION_SCORE, math.nan))


def guard_job(task: Callable[[DictConfig], Any]) -> Callable[[DictConfig], Any]:
    """In a sweep, a job's error becomes its failure record and a NaN result, not a stop."""

    def job(cfg: DictConfig) -> Any:
        if not in_sweep():
            return task(cfg)
        started = time.time()
        try:
            return task(cfg)
        except Exception as error:  # noqa: BLE001 - every failure is recorded, none stops a sweep
            record_failure(cfg, error, started)
            return math.nan

    job.__name__, job.__module__ = task.__name__, task.__module__
    return job


def record_failure(cfg: DictConfig, error: BaseException, started: float | None = None) -> None:
    """The failure's record in the job folder and, as a FAILED run from ``started`` (when the
    job began) to now, in the store."""
    hydra_cfg = HydraConfig.get()
    overrides = " ".join(hydra_cfg.overrides.task)
    reason = mask_passwords(f"{type(error).__name__}: {error}")
    failure = {"job": hydra_cfg.job.num, "overrides": mask_passwords(overrides),
               "reason": reason,
               "traceback": mask_passwords("".join(traceback.format_exception(error))[-4000:])}
    folder = make_folder(hydra_cfg.runtime.output_dir)
    write_text_atomic(folder / FAILURE_FILE, json.dumps(failure, indent=2))
    print(f"job {hydra_cfg.job.num} failed ({mask_passwords(overrides)}): {reason}",
          file=sys.stderr)
    if cfg.tracking.enabled:
        try:
            log_failed_run(resolve_uri(cfg.tracking.uri), str(cfg.tracking.experiment),
                           f"failed: {overrides}", reason, {"kind": "failed_job"}, started)
        except Exception as store_error:  # noqa: BLE001 - the store may be what failed
            print(f"job {hydra_cfg.job.num}: could not log the failure: {store_error}",
                  file=sys.stderr)


def end_killed_jobs(cfg: DictConfig) -> list[str]:
    """Before a run starts: its config's runs a killed process left RUNNING end as KILLED."""
    if not cfg.tracking.enabled:
        return []
    uri = resolve_uri(cfg.tracking.uri)
    wanted = config_hash(OmegaConf.to_container(cfg, resolve=True))
    with store_writes(uri):
        return end_killed_runs(mlflow.MlflowClient(tracking_uri=uri),
                               str(cfg.tracking.experiment), CONFIG_HASH_TAG, wanted)


@contextlib.contextmanager
def job_claim(cfg: DictConfig) -> Iterator[None]:
    """In a sweep on an SQLite store, one process at a time runs a given config.

    Two sweeps started at once, or a sweep queued again while a job of its killed start still
    runs, would each find a job unfinished, run it (sharing its checkpoint file) and log it
    FINISHED twice. The job holds a file lock named by its config hash beside the store from its
    look for a finished run to the end of its logging; a second process waits, then finds the
    run FINISHED and skips it. The system releases the lock when its holder ends, even by
    SIGKILL, so a killed job never blocks the next. A tracking server is not covered: its jobs
    may run on machines that share no folder."""
    path = sqlite_path(resolve_uri(cfg.tracking.uri)) if cfg.tracking.enabled else None
    if path is None or not in_sweep():
        yield
        return
    wanted = config_hash(OmegaConf.to_container(cfg, resolve=True))
    claims = make_folder(path.parent / f"{path.name}.claims")
    lock = FileLock(claims / f"{wanted}.lock")
    try:
        lock.acquire(timeout=0)
    except Timeout:
        print(f"job {HydraConfig.get().job.num} waits: another process runs the same config "
              f"(config hash {wanted}) on this store; once it ends, this job is skipped if "
              f"it finished", flush=True)
        lock.acquire()     # no time limit: the lock ends with its holder's process
    try:
        yield
    finally:
        lock.release()


def lost_job_message(error: BaseException) -> str | None:
    """One line for a job whose process ended without a result (submitit: killed by a signal,
    the out-of-memory killer or a cluster past its grace time), or None for other errors."""
    if type(error).__module__.split(".")[0] != "submitit" or \
            type(error).__name__ not in {"UncompletedJobError", "FailedJobError"}:
        return None
    first = str(error).strip().splitlines()[0] if str(error).strip() else type(error).__name__
    return (f"a job of the sweep ended without a result, its process killed ({first}); the "
            "sweep stopped waiting, its other jobs may still be running. Run the same command "
            "again: finished jobs are skipped, a killed GNN resumes from its checkpoint")


def skip_if_finished(cfg: DictConfig, data_fingerprint: Callable[[], str]) -> float | None:
    """In a sweep, a config already finished on the same data is not run again: its run is
    fetched into the job folder (for the table) and its validation score returned."""
    if not (in_sweep() and cfg.tracking.enabled and cfg.tracking.get("skip_finished", True)):
        return None
    uri, experiment = resolve_uri(cfg.tracking.uri), str(cfg.tracking.experiment)
    wanted = config_hash(OmegaConf.to_container(cfg, resolve=True))
    run = finished_run(uri, experiment, wanted, data_fingerprint)
    if run is None:
        return None
    folder = Path(HydraConfig.get().runtime.output_dir) / RUN_FOLDER
    client = mlflow.MlflowClient(tracking_uri=uri)
    with atomic_folder(folder) as staging:    # whole or absent, like a run folder written here
        for item in client.list_artifacts(run.info.run_id):
            if not item.is_dir:   # the run's files, without the fitted model
                client.download_artifacts(run.info.run_id, item.path, str(staging))
    write_text_atomic(folder.parent / SKIPPED_FILE, json.dumps({"run_id": run.info.run_id,
                                                                "config_hash": wanted}))
    overrides = mask_passwords(" ".join(HydraConfig.get().overrides.task))
    print(f"skipped job {HydraConfig.get().job.num} ({overrides}): already finished as run "
          f"{run.info.run_id[:12]} (same config hash {wanted} and data); "
          f"tracking.skip_finished=false runs it again")
    return float(run.data.metrics.get(f"cost/{VALIDATION_SCORE}", math.nan))


def sweep_bundles(sweep_dir: Path) -> list[RunBundle]:
    return [RunBundle.load(summary.parent)
            for summary in sorted(sweep_dir.glob(f"*/{RUN_FOLDER}/summary.json"))]


def unfinished_jobs(sweep_dir: Path) -> list[str]:
    """Job folders with neither a run nor a failure: a job whose process was killed."""
    return sorted((d.name for d in sweep_dir.iterdir() if d.is_dir() and d.name.isdigit()
                   and not (d / RUN_FOLDER / "summary.json").exists()
                   and not (d / FAILURE_FILE).exists()), key=int)


def clear_job_outcome(folder: Path) -> None:
    """A job starting again forgets what an earlier, interrupted start of it left."""
    for name in (FAILURE_FILE, SKIPPED_FILE):
        (folder / name).unlink(missing_ok=True)
    if (folder / RUN_FOLDER).exists():     # renamed away first: gone whole, never half
        old = partial_path(folder / RUN_FOLDER)
        os.replace(folder / RUN_FOLDER, old)
        shutil.rmtree(old, ignore_errors=True)


def sweep_hash(overrides: list[str]) -> str:
    """The sweep's command (its overrides, in any order): a rerun of it has the same hash."""
    return hashlib.sha256(json.dumps(sorted(overrides)).encode()).hexdigest()[:20]


def sweep_failures(sweep_dir: Path) -> list[dict]:
    return sorted((json.loads(path.read_text()) for path in sweep_dir.glob(f"*/{FAILURE_FILE}")),
                  key=lambda failure: failure["job"])


def system_of(bundle: RunBundle) -> str:
    """The run's overrides without seed and fold: runs sharing it are repeats of one system."""
    words = bundle.command.split()[2:]
    kept = [w for w in words if w.split("=", 1)[0].lstrip("+~") not in REPEAT_KEYS]
    return " ".join(kept) or bundle.name


def sweep_frame(bundles: list[RunBundle], skipped: set[str] | None = None,
                failures: list[dict] | None = None,
                unfinished: list[str] | None = None) -> pd.DataFrame:
    skipped = skipped or set()
    rows = [{"run": b.name, "system": system_of(b), "run_id": b.run_id,
             "status": "skipped (done before)" if b.run_id in skipped else "finished",
             **b.tags, **b.metrics, **{f"cost/{k}": v for k, v in b.cost.items()}}
            for b in bundles]
    rows += [{"run": f"job {f['job']}", "system": f["overrides"], "status": "failed",
              "reason": f["reason"]} for f in failures or []]
    rows += [{"run": f"job {job}", "status": "unfinished",
              "reason": "its process ended before the job did"} for job in unfinished or []]
    frame = pd.DataFrame(rows)
    score = bundles[0].headline if bundles else None
    if score not in frame:
        return frame
    return frame.sort_values(score, ascending=False, na_position="last")


def repeats_summary(frame: pd.DataFrame) -> pd.DataFrame | None:
    """Mean ± std per system when the sweep repeated systems over seeds or folds."""
    frame = frame[frame["status"] != "failed"]
    if frame.empty or frame["system"].duplicated().sum() == 0:
        return None
    metrics = [m for m in AGGREGATED if m in frame.columns]
    summary = aggregate_runs(frame, ["system"], metrics)
    return summary.sort_values(f"{metrics[0]}_mean", ascending=False)


def failure_table(failures: list[dict]) -> Table:
    table = Table(title=f"{len(failures)} failed job(s)", title_justify="left",
                  title_style="bold red")
    for column in ("job", "overrides", "reason"):
        table.add_column(column)
    for failure in failures:
        table.add_row(str(failure["job"]), failure["overrides"], failure["reason"])
    return table


def _mask_files(folder: Path, pattern: str) -> None:
    """Hydra's own records of the config (overrides may carry a tracking URI) get masked too."""
    for path in folder.glob(pattern):
        text = path.read_text()
        if (cleaned := mask_passwords(text)) != text:
            write_text_atomic(path, cleaned)


class MaskPasswords(logging.Filter):
    def filter(self, record: logging.LogRecord) -> bool:
        message = record.getMessage()
        if (cleaned := mask_passwords(message)) != message:
            record.msg, record.args = cleaned, ()
        return True


def mask_logs() -> None:
    for handler in logging.getLogger().handlers:
        if not any(isinstance(f, MaskPasswords) for f in handler.filters):
            handler.addFilter(MaskPasswords())


class SweepTable(Callback):
    def __init__(self) -> None:
        self.parent_run_id: str | None = None

    def on_run_start(self, config: DictConfig, **kwargs: Any) -> None:
        mask_logs()
        _OUTCOME["failed"] = 0

    def on_run_end(self, config: DictConfig, **kwargs: Any) -> None:
        _mask_files(Path(config.hydra.runtime.output_dir) / ".hydra", "*.yaml")

    def on_multirun_start(self, config: DictConfig, **kwargs: Any) -> None:
        mask_logs()
        _OUTCOME["failed"] = 0
        sweep_dir = make_folder(config.hydra.sweep.dir)
        self.parent_run_id = None
        hashed = sweep_hash(list(config.hydra.overrides.task))
        if config.tracking.enabled:
            uri = resolve_uri(config.tracking.uri)
            experiment_id = ensure_experiment(uri, str(config.tracking.experiment))
            with store_writes(uri):
                client = mlflow.MlflowClient(tracking_uri=uri)
                end_killed_runs(client, str(config.tracking.experiment), SWEEP_HASH_TAG, hashed)
                run = client.create_run(
                    experiment_id, run_name=f"sweep {sweep_dir.name}",
                    tags={"sweep_id": sweep_dir.name, "kind": "sweep", SWEEP_HASH_TAG: hashed,
                          WRITTEN_BY_TAG: writer()})
            self.parent_run_id = run.info.run_id
        context = {"sweep_id": sweep_dir.name, "parent_run_id": self.parent_run_id,
                   "sweep_hash": hashed}
        write_text_atomic(sweep_dir / CONTEXT_FILE, json.dumps(context))

    def on_job_start(self, config: DictConfig, **kwargs: Any) -> None:
        """Runs in the job's own process: join the sweep through its context file."""
        mask_logs()
        context_path = Path(config.hydra.sweep.dir) / CONTEXT_FILE
        if config.hydra.mode == RunMode.MULTIRUN and context_path.exists():
            context = json.loads(context_path.read_text())
            os.environ[SWEEP_ID_ENV] = context["sweep_id"]
            os.environ[SWEEP_HASH_ENV] = context.get("sweep_hash", "")
            clear_job_outcome(Path(config.hydra.runtime.output_dir))
            if context["parent_run_id"]:
                os.environ[SWEEP_PARENT_ENV] = context["parent_run_id"]
        _mask_files(Path(config.hydra.runtime.output_dir) / ".hydra", "*.yaml")

    def on_multirun_end(self, config: DictConfig, **kwargs: Any) -> None:
        sweep_dir = Path(config.hydra.sweep.dir)
        _mask_files(sweep_dir, "multirun.yaml")
        bundles, failures = sweep_bundles(sweep_dir), sweep_failures(sweep_dir)
        unfinished = unfinished_jobs(sweep_dir)
        skipped = {json.loads(p.read_text())["run_id"] for p in sweep_dir.glob(f"*/{SKIPPED_FILE}")}
        _OUTCOME["failed"] = len(failures)
        if bundles:
            print_comparison(bundles)
        else:
            console.print(f"[red]no finished runs under {sweep_dir}[/red]")
        if skipped:
            console.print(f"{len(skipped)} job(s) skipped: already finished with the same config "
                          "and data (tracking.skip_finished=false runs them again)")
        if failures:
            console.print(failure_table(failures))
        if unfinished:
            console.print(f"[red]{len(unfinished)} job(s) unfinished (their process ended "
                          f"first): {', '.join(unfinished)}[/red]")
        frame = sweep_frame(bundles, skipped, failures, unfinished)
        if not frame.empty:
            write_text_atomic(sweep_dir / "sweep_table.csv", frame.to_csv(index=False))
            console.print(f"sweep table: {sweep_dir / 'sweep_table.csv'}")
            repeats = repeats_summary(frame)
            if repeats is not None:
                console.print(aggregate_table(repeats))
                write_text_atomic(sweep_dir / "sweep_repeats.csv", repeats.to_csv(index=False))
        if self.parent_run_id is not None:
            self._close_parent(resolve_uri(config.tracking.uri), str(config.tracking.experiment),
                              sweep_dir, failures, skipped)
        os.environ.pop(SWEEP_PARENT_ENV, None)
        os.environ.pop(SWEEP_ID_ENV, None)
        os.environ.pop(SWEEP_HASH_ENV, None)

    def _close_parent(self, uri: str, experiment: str, sweep_dir: Path, failures: list,
                      skipped: set) -> None:
        with store_writes(uri):
            client = mlflow.MlflowClient(tracking_uri=uri)
            run_id = self.parent_run_id
            for name in ("sweep_table.csv", "sweep_repeats.csv", OPTUNA_RESULTS):
                if (sweep_dir / name).exists():
                    client.log_artifact(run_id, str(sweep_dir / name))
            client.set_tag(run_id, "jobs_failed", str(len(failures)))
            client.set_tag(run_id, "jobs_skipped", str(len(skipped)))
            client.set_terminated(run_id, status="FAILED" if failures else "FINISHED")
        console.print(ui_hint(uri, experiment), soft_wrap=True)
