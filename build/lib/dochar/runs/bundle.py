"""What one finished run leaves behind, as a folder of plain files.

The same folder is logged to MLflow as the run's artifacts, so the report, the paired comparison
and the gate read runs the same way whether they come from the tracking store or from disk.

Folder layout::

    summary.json         name, system, labels, flat metrics, cost, tags, command
    config.yaml          the resolved config
    predictions.parquet  one row per test word (see PREDICTION_COLUMNS) + prob:<label> columns
    edges.parquet        typed edges of the pages the report draws (doc_id, page, source,
                         target, relation)
    page_images.parquet  pictures of those pages (doc_id, page, origin, JPEG bytes)
    <table>.csv          per_class, per_layout, confusion, ... (listed in summary.json)
    *.png, model/        figures and the fitted model (not read back)
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd
import yaml

from dochar import tasks
from dochar.data.files import atomic_write
from dochar.tasks import Task

PREDICTION_COLUMNS: tuple[str, ...] = (
    "doc_id", "page", "word_id", "text", "x0", "y0", "x1", "y1", "page_width", "page_height",
    "layout_id", "entity_id", "label", "predicted", "confidence",
)
PROBABILITY_PREFIX = "prob:"


@dataclass
class RunBundle:
    """Everything downstream consumers need from a run; ``predictions`` is the test set only."""

    name: str
    labels: list[str]
    metrics: dict[str, float]
    predictions: pd.DataFrame
    config: dict[str, Any] = field(default_factory=dict)
    cost: dict[str, float] = field(default_factory=dict)
    tags: dict[str, str] = field(default_factory=dict)
    command: str = ""
    edges: pd.DataFrame | None = None
    page_images: pd.DataFrame | None = None
    run_id: str | None = None
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)

    @property
    def task(self) -> Task:
        """The task the run was made for, rebuilt from its config."""
        return tasks.from_config(self.config.get("task"))

    @property
    def headline(self) -> str:
        """The run's headline score (its task's first score)."""
        return tasks.headline(self.task)

    def save(self, folder: str | Path) -> Path:
        """Each file written whole (scratch file, then rename), ``summary.json`` last: a folder
        a crash interrupted has no summary and is never read as a run."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        with atomic_write(folder / "config.yaml") as scratch:
            scratch.write_text(yaml.safe_dump(self.config, sort_keys=False))
        with atomic_write(folder / "predictions.parquet") as scratch:
            self.predictions.to_parquet(scratch, index=False)
        if self.edges is not None:
            with atomic_write(folder / "edges.parquet") as scratch:
                self.edges.to_parquet(scratch, index=False)
        if self.page_images is not None:
            with atomic_write(folder / "page_images.parquet") as scratch:
                self.page_images.to_parquet(scratch, index=False)
        for name, table in self.tables.items():
            with atomic_write(folder / f"{name}.csv") as scratch:
                table.to_csv(scratch)
        summary = {"name": self.name, "labels": self.labels, "metrics": self.metrics,
                   "cost": self.cost, "tags": self.tags, "command": self.command,
                   "run_id": self.run_id, "tables": sorted(self.tables)}
        with atomic_write(folder / "summary.json") as scratch:
            scratch.write_text(json.dumps(summary, indent=2, sort_keys=True))
        return folder

    @classmethod
    def load(cls, folder: str | Path) -> RunBundle:
        folder = Path(folder)
        summary_path = folder / "summary.json"
        if not summary_path.exists():
            raise FileNotFoundError(f"{folder}: not a dochar run folder (no summary.json)")
        summary = json.loads(summary_path.read_text())
        config_path = folder / "config.yaml"
        edges_path = folder / "edges.parquet"
        pictures_path = folder / "page_images.parquet"
        return cls(
            name=summary["name"], labels=list(summary["labels"]),
            metrics={k: float(v) for k, v in summary["metrics"].items()},
            predictions=pd.read_parquet(folder / "predictions.parquet"),
            config=yaml.safe_load(config_path.read_text()) if config_path.exists() else {},
            cost=summary.get("cost", {}), tags=summary.get("tags", {}),
            command=summary.get("command", ""),
            edges=pd.read_parquet(edges_path) if edges_path.exists() else None,
            page_images=pd.read_parquet(pictures_path) if pictures_path.exists() else None,
            run_id=summary.get("run_id"),
            tables={name: pd.read_csv(folder / f"{name}.csv", index_col=0)
                    for name in summary.get("tables", []) if (folder / f"{name}.csv").exists()},
        )

    def probabilities(self) -> pd.DataFrame:
        columns = [f"{PROBABILITY_PREFIX}{label}" for label in self.labels]
        return self.predictions[columns]
