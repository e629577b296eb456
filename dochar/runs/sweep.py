"""Sweeps (`dochar run -m ...`): one parent MLflow run and one ranked table at the end.

Hydra calls this callback around a multirun; every job's bundle sits in its own job folder, so
the table is read back from disk and agrees with what each job logged.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import mlflow
import pandas as pd
from hydra.experimental.callback import Callback
from omegaconf import DictConfig

from dochar.runs.aggregate import aggregate_runs
from dochar.runs.bundle import RunBundle
from dochar.runs.console import aggregate_table, console, print_comparison
from dochar.runs.tracking import (SWEEP_ID_ENV, SWEEP_PARENT_ENV, ensure_experiment, resolve_uri,
                                  ui_hint)

RUN_FOLDER = "run"
REPEAT_KEYS = ("seed", "split.fold")  # overrides that repeat a system rather than change it
AGGREGATED = ("link_f1", "macro_f1", "micro_f1", "entity_f1", "cost/train_seconds")


def sweep_bundles(sweep_dir: Path) -> list[RunBundle]:
    return [RunBundle.load(summary.parent)
            for summary in sorted(sweep_dir.glob(f"*/{RUN_FOLDER}/summary.json"))]


def system_of(bundle: RunBundle) -> str:
    """The run's overrides without seed and fold: runs sharing it are repeats of one system."""
    words = bundle.command.split()[2:]
    kept = [w for w in words if w.split("=", 1)[0].lstrip("+~") not in REPEAT_KEYS]
    return " ".join(kept) or bundle.name


def sweep_frame(bundles: list[RunBundle]) -> pd.DataFrame:
    rows = [{"run": b.name, "system": system_of(b), "run_id": b.run_id, **b.tags, **b.metrics,
             **{f"cost/{k}": v for k, v in b.cost.items()}} for b in bundles]
    frame = pd.DataFrame(rows)
    return frame.sort_values("link_f1" if "link_f1" in frame else "macro_f1", ascending=False)


def repeats_summary(frame: pd.DataFrame) -> pd.DataFrame | None:
    """Mean ± std per system when the sweep repeated systems over seeds or folds."""
    if frame["system"].duplicated().sum() == 0:
        return None
    metrics = [m for m in AGGREGATED if m in frame.columns]
    summary = aggregate_runs(frame, ["system"], metrics)
    return summary.sort_values(f"{metrics[0]}_mean", ascending=False)


class SweepTable(Callback):
    def __init__(self) -> None:
        self.parent_run: Any = None

    def on_multirun_start(self, config: DictConfig, **kwargs: Any) -> None:
        sweep_id = Path(config.hydra.sweep.dir).name
        os.environ[SWEEP_ID_ENV] = sweep_id
        if config.tracking.enabled:
            uri = resolve_uri(config.tracking.uri)
            experiment_id = ensure_experiment(uri, str(config.tracking.experiment))
            client = mlflow.MlflowClient(tracking_uri=uri)
            self.parent_run = client.create_run(experiment_id, run_name=f"sweep {sweep_id}",
                                                tags={"sweep_id": sweep_id, "kind": "sweep"})
            os.environ[SWEEP_PARENT_ENV] = self.parent_run.info.run_id

    def on_multirun_end(self, config: DictConfig, **kwargs: Any) -> None:
        sweep_dir = Path(config.hydra.sweep.dir)
        bundles = sweep_bundles(sweep_dir)
        if not bundles:
            console.print(f"[red]no finished runs under {sweep_dir}[/red]")
        else:
            print_comparison(bundles)
            frame = sweep_frame(bundles)
            table_path = sweep_dir / "sweep_table.csv"
            frame.to_csv(table_path, index=False)
            console.print(f"sweep table: {table_path}")
            repeats = repeats_summary(frame)
            if repeats is not None:
                console.print(aggregate_table(repeats))
                repeats.to_csv(sweep_dir / "sweep_repeats.csv", index=False)
        if self.parent_run is not None:
            uri = resolve_uri(config.tracking.uri)
            client = mlflow.MlflowClient(tracking_uri=uri)
            run_id = self.parent_run.info.run_id
            for name in ("sweep_table.csv", "sweep_repeats.csv"):
                if (sweep_dir / name).exists():
                    client.log_artifact(run_id, str(sweep_dir / name))
            client.set_terminated(run_id)
            os.environ.pop(SWEEP_PARENT_ENV, None)
            console.print(ui_hint(uri, str(config.tracking.experiment)))
        os.environ.pop(SWEEP_ID_ENV, None)
