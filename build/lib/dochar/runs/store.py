"""Reading finished runs back: from the MLflow store (any experiment) or from a run folder.

A run folder (:mod:`dochar.runs.bundle`) is logged as the run's artifacts, so reading a run is
downloading its artifacts and loading them like a folder on disk. Runs are named by their id, by
the first characters of it (the tables print 12), or by the path of their folder; filters
(experiment, sweep, tags) go into the store's own search, before anything is downloaded.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Mapping, Sequence
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from dochar.errors import DocharError
from dochar.runs.bundle import RunBundle

SUMMARY = "summary.json"
FINISHED = "FINISHED"
SHORT_ID = 12


class RunLookupError(DocharError):
    """A run, experiment or sweep that the store or the disk does not hold."""


def _quote(value: str) -> str:
    return "'" + str(value).replace("'", "\\'") + "'"


def _filter(*, status: str | None = FINISHED, sweep: str | None = None,
            tags: Mapping[str, str] | None = None) -> str:
    parts = [f"attributes.status = {_quote(status)}"] if status else []
    if sweep:
        parts.append(f"tags.sweep_id = {_quote(sweep)}")
    parts += [f"tags.`{key}` = {_quote(value)}" for key, value in (tags or {}).items()]
    return " and ".join(parts)


def run_folder(path: str | Path) -> Path | None:
    """The run folder at ``path`` (or the ``run/`` inside a job's output folder), if any."""
    path = Path(path)
    for candidate in (path, path / "run"):
        if (candidate / SUMMARY).is_file():
            return candidate
    return None


class RunStore:
    """One tracking store, read through MLflow's client."""

    def __init__(self, uri: str) -> None:
        os.environ.setdefault("MLFLOW_ENABLE_ARTIFACTS_PROGRESS_BAR", "false")
        from mlflow import MlflowClient

        self.uri = uri
        self.client = MlflowClient(tracking_uri=uri)

    def experiment_ids(self, experiment: str | None = None) -> list[str]:
        """All experiments' ids, or the named one's; an unknown name lists the known ones."""
        if experiment is None:
            return [e.experiment_id for e in self.client.search_experiments()]
        found = self.client.get_experiment_by_name(experiment)
        if found is None:
            known = sorted(e.name for e in self.client.search_experiments())
            raise RunLookupError(f"{self.uri}: no experiment named '{experiment}'; known "
                                 f"experiments: {known}")
        return [found.experiment_id]

    def search(self, experiment: str | None = None, *, sweep: str | None = None,
               tags: Mapping[str, str] | None = None, status: str | None = FINISHED) -> list:
        """Runs matching the filters, oldest first (no artifacts read)."""
        ids = self.experiment_ids(experiment)
        if not ids:
            return []
        runs, token = [], None
        while True:
            page = self.client.search_runs(ids, filter_string=_filter(status=status, sweep=sweep,
                                                                       tags=tags),
                                           max_results=1000, page_token=token)
            runs.extend(page)
            token = page.token
            if not token:
                return sorted(runs, key=lambda r: (r.info.start_time, r.info.run_id))

    def latest_sweep(self, experiment: str | None = None) -> str:
        sweeps = [r.data.tags["sweep_id"] for r in self.search(experiment)
                  if r.data.tags.get("sweep_id")]
        if not sweeps:
            where = f"experiment '{experiment}'" if experiment else self.uri
            raise RunLookupError(f"no sweep runs in {where}")
        return sweeps[-1]

    def is_dochar_run(self, run_id: str) -> bool:
        return any(item.path == SUMMARY for item in self.client.list_artifacts(run_id))

    def resolve_id(self, reference: str) -> str:
        """A full run id, from the id or its first characters, searched over every experiment."""
        from mlflow.exceptions import MlflowException

        if len(reference) == 32:
            try:
                return self.client.get_run(reference).info.run_id
            except MlflowException as error:
                raise RunLookupError(f"run {reference}: not found in {self.uri}") from error
        if len(reference) < 6:
            raise RunLookupError(f"run {reference!r}: give at least 6 characters of the run id")
        matches = [r.info.run_id for r in self.search(status=None)
                   if r.info.run_id.startswith(reference)]
        if len(matches) != 1:
            raise RunLookupError(f"run {reference!r} matches {len(matches)} runs in {self.uri}"
                                 + ("; give more of the run id" if matches else ""))
        return matches[0]

    def load(self, run_ids: Sequence[str]) -> list[RunBundle]:
        """The named finished dochar runs, in that order, their artifacts downloaded."""
        import mlflow

        bundles = []
        with tempfile.TemporaryDirectory(prefix="dochar-runs-") as scratch:
            for run_id in run_ids:
                run = self.client.get_run(run_id)
                if run.info.status != FINISHED:
                    raise RunLookupError(f"run {run_id} has status {run.info.status}, not "
                                         f"{FINISHED}")
                if not self.is_dochar_run(run_id):
                    raise RunLookupError(f"run {run_id} has no {SUMMARY} artifact (not a "
                                         f"dochar run)")
                folder = mlflow.artifacts.download_artifacts(
                    run_id=run_id, tracking_uri=self.uri, dst_path=str(Path(scratch) / run_id))
                bundle = RunBundle.load(folder)
                bundle.run_id = run_id
                bundles.append(bundle)
        return bundles

    def bundles(self, experiment: str | None = None, *, sweep: str | None = None,
                tags: Mapping[str, str] | None = None) -> list[RunBundle]:
        """Every finished dochar run matching the filters (runs of other tools passed over)."""
        runs = [r.info.run_id for r in self.search(experiment, sweep=sweep, tags=tags)]
        return self.load([run_id for run_id in runs if self.is_dochar_run(run_id)])

    def listing(self, experiment: str | None = None,
                tags: Mapping[str, str] | None = None) -> pd.DataFrame:
        """One row per run: what `dochar runs` prints."""
        names = {e.experiment_id: e.name for e in self.client.search_experiments()}
        rows = []
        for run in self.search(experiment, tags=tags, status=None):
            tag, metric = run.data.tags, run.data.metrics
            rows.append({
                "run": run.info.run_id[:SHORT_ID], "name": run.info.run_name,
                "experiment": names.get(run.info.experiment_id, run.info.experiment_id),
                "data": tag.get("dataset", ""), "split": tag.get("split_protocol", ""),
                "macro_f1": metric.get("macro_f1"), "entity_f1": metric.get("entity_f1"),
                "status": run.info.status,
                "date": datetime.fromtimestamp(run.info.start_time / 1000, timezone.utc)
                .strftime("%Y-%m-%d %H:%M")})
        return pd.DataFrame(rows, columns=["run", "name", "experiment", "data", "split",
                                           "macro_f1", "entity_f1", "status", "date"])


def find_run(reference: str, uri: str) -> RunBundle:
    """A run folder on disk, or a run of the store by id or id prefix (any experiment)."""
    folder = run_folder(reference)
    if folder is not None:
        return RunBundle.load(folder)
    if Path(reference).exists():
        raise RunLookupError(f"{reference}: a folder without {SUMMARY} (not a dochar run folder)")
    store = RunStore(uri)
    return store.load([store.resolve_id(reference)])[0]
