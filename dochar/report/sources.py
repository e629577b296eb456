"""Runs for the report read back from an MLflow tracking store.

A run folder (see :mod:`dochar.runs.bundle`) is logged as the run's artifacts, so reading a run is
downloading its artifacts and loading them like a folder on disk.
"""

from __future__ import annotations

import tempfile
from collections.abc import Sequence
from pathlib import Path

from dochar.report.summaries import ReportInputError
from dochar.runs.bundle import RunBundle

SUMMARY = "summary.json"
FINISHED = "FINISHED"


def _has_summary(client, run_id: str) -> bool:
    return any(item.path == SUMMARY for item in client.list_artifacts(run_id))


def _experiment_runs(client, experiment_id: str) -> list:
    runs, token = [], None
    while True:
        page = client.search_runs([experiment_id],
                                  filter_string=f"attributes.status = '{FINISHED}'",
                                  max_results=1000, page_token=token)
        runs.extend(page)
        token = page.token
        if not token:
            return sorted(runs, key=lambda r: (r.info.start_time, r.info.run_id))


def _named_runs(client, experiment_id: str, experiment: str, run_ids: Sequence[str]) -> list:
    from mlflow.exceptions import MlflowException

    runs = []
    for run_id in run_ids:
        try:
            run = client.get_run(run_id)
        except MlflowException as error:
            raise ReportInputError(f"run {run_id}: not found in the tracking store ({error})") \
                from error
        if run.info.experiment_id != experiment_id:
            raise ReportInputError(f"run {run_id} belongs to another experiment than "
                                   f"'{experiment}'")
        if run.info.status != FINISHED:
            raise ReportInputError(f"run {run_id} has status {run.info.status}, not {FINISHED}")
        if not _has_summary(client, run_id):
            raise ReportInputError(f"run {run_id} has no {SUMMARY} artifact (not a dochar run)")
        runs.append(run)
    return runs


def load_bundles_from_mlflow(tracking_uri: str, experiment: str,
                             run_ids: Sequence[str] | None = None) -> list[RunBundle]:
    """The experiment's finished runs that logged a run folder, oldest first.

    With ``run_ids`` exactly those runs, in that order; a named run that is missing, unfinished
    or has no run folder is an error. Without it, runs lacking a ``summary.json`` artifact (runs
    logged by other tools) are passed over.
    """
    import mlflow
    from mlflow import MlflowClient

    client = MlflowClient(tracking_uri=tracking_uri)
    found = client.get_experiment_by_name(experiment)
    if found is None:
        known = sorted(e.name for e in client.search_experiments())
        raise ReportInputError(f"{tracking_uri}: no experiment named '{experiment}'; "
                               f"known experiments: {known}")
    if run_ids is None:
        runs = [r for r in _experiment_runs(client, found.experiment_id)
                if _has_summary(client, r.info.run_id)]
    else:
        runs = _named_runs(client, found.experiment_id, experiment, run_ids)
    bundles = []
    with tempfile.TemporaryDirectory(prefix="dochar-runs-") as scratch:
        for run in runs:
            run_id = run.info.run_id
            folder = mlflow.artifacts.download_artifacts(
                run_id=run_id, tracking_uri=tracking_uri, dst_path=str(Path(scratch) / run_id))
            bundle = RunBundle.load(folder)
            bundle.run_id = run_id
            bundles.append(bundle)
    return bundles
