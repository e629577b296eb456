"""Learning curves: test score against the number of training documents.

Every point is a full run of the same composed config with ``split.train_documents`` set, so
validation and test documents stay fixed along the curve and only the training part shrinks
(a seeded subset, drawn in :func:`dochar.splits.split_run`). The full training part
(``None``, "all") runs first: it fixes the pool size, so a size the pool cannot supply is
refused before any more training time is spent.

The other axis, ``split.pages_per_layout`` (``curve.axis``), keeps k documents of every training
layout (nested, seeded): how a per-layout template grows with the pages labelled per layout.
Every point of either axis is also placed at its training documents per layout
(``curve_per_layout/<docs per layout>/<score>``), so the two kinds of curve share an axis, and
carries its seen/unseen scores when the split has both sides.
"""

from __future__ import annotations

import copy
import logging
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import pandas as pd
from omegaconf import DictConfig, OmegaConf

from dochar.errors import DocharError
from dochar.runs.bundle import RunBundle
from dochar.tasks.base import ENTITY_F1, MACRO_F1, MICRO_F1

log = logging.getLogger(__name__)
CURVE_SCORES: tuple[str, ...] = (MACRO_F1, MICRO_F1, ENTITY_F1)
SIDE_SCORES: tuple[str, ...] = tuple(f"{side}/{score}" for side in ("seen", "unseen")
                                     for score in (MACRO_F1, ENTITY_F1))
AXES: tuple[str, ...] = ("train_documents", "pages_per_layout")
RunHook = Callable[[RunBundle, Any, DictConfig], None]


class LearningCurveError(DocharError):
    """Raised when curve sizes are invalid or a curve table cannot be turned into metrics."""


def _check_sizes(sizes: Sequence[int | None]) -> list[int | None]:
    if not sizes:
        raise LearningCurveError("no learning-curve sizes given")
    checked: list[int | None] = []
    for size in sizes:
        if size is not None and (isinstance(size, bool) or not isinstance(size, (int, np.integer))
                                 or size < 1):
            raise LearningCurveError(f"learning-curve size {size!r}: use a positive number of "
                                     f"documents, or None for the whole training part")
        checked.append(None if size is None else int(size))
    repeated = sorted({s for s in checked if checked.count(s) > 1}, key=str)
    if repeated:
        raise LearningCurveError(f"learning-curve size(s) {repeated} given more than once")
    return checked


def _point_config(cfg: DictConfig, size: int | None, seed: int,
                  axis: str = "train_documents") -> DictConfig:
    point = copy.deepcopy(cfg)
    OmegaConf.update(point, f"split.{axis}", size, force_add=True)
    OmegaConf.update(point, "seed", seed, force_add=True)
    return point


def _row(bundle: RunBundle, size: int | None, seed: int,
         axis: str = "train_documents") -> dict[str, Any]:
    metrics = bundle.metrics
    n_docs = int(metrics["split/train_documents"])
    layouts = metrics.get("split/train_layouts", 0.0)
    row: dict[str, Any] = {"system": bundle.name,
                           "model_kind": bundle.tags.get("model_kind", ""), "seed": seed,
                           "axis": axis,
                           "requested_documents": "all" if size is None else str(size),
                           "n_train_documents": n_docs,
                           "documents_per_layout": n_docs / layouts if layouts else np.nan}
    for score in CURVE_SCORES + SIDE_SCORES:
        for suffix in ("", "_low", "_high"):
            row[score + suffix] = float(metrics.get(score + suffix, np.nan))
    row["train_seconds"] = float(bundle.cost.get("train_seconds", np.nan))
    return row


def run_learning_curve(cfg: DictConfig, sizes: Sequence[int | None], *,
                       seeds: Sequence[int] | None = None, on_run: RunHook | None = None,
                       axis: str = "train_documents") -> pd.DataFrame:
    """One row per (size, seed): system, n_train_documents, scores with their intervals.

    ``sizes`` are training-document counts (``axis="train_documents"``) or documents per
    training layout (``axis="pages_per_layout"``; a layout with fewer keeps all of its own),
    ``None`` for the whole training part; ``seeds`` default to ``cfg.seed``.
    ``on_run(bundle, model, point_cfg)`` is called after each run, e.g. to log it; the bundle
    carries tag ``train_documents``.
    """
    from dochar.experiment import run_experiment

    if axis not in AXES:
        raise LearningCurveError(f"curve.axis={axis!r}: choose one of {list(AXES)}")
    checked = _check_sizes(sizes)
    seeds = [int(cfg.seed)] if seeds is None else [int(s) for s in seeds]
    if not seeds:
        raise LearningCurveError("no seeds given")
    order = sorted(checked, key=lambda s: -np.inf if s is None else -s)   # all, then largest
    rows: list[dict[str, Any]] = []
    for seed in seeds:
        pool: int | None = None
        for size in order:
            if axis == "train_documents" and pool is not None and size is not None \
                    and size > pool:
                raise LearningCurveError(
                    f"learning-curve size {size}: the training part holds only {pool} "
                    f"documents (seed {seed}); choose sizes up to {pool}")
            point = _point_config(cfg, size, seed, axis)
            log.info("learning curve: %s = %s, seed %d", axis,
                     "all" if size is None else size, seed)
            bundle, model = run_experiment(point)
            bundle.tags["train_documents"] = str(int(bundle.metrics["split/train_documents"]))
            if size is None:
                pool = int(bundle.metrics["split/train_documents"])
            rows.append(_row(bundle, size, seed, axis))
            if on_run is not None:
                on_run(bundle, model, point)
    frame = pd.DataFrame(rows)
    return frame.sort_values(["system", "seed", "n_train_documents"],
                             kind="stable").reset_index(drop=True)


def curve_metrics(frame: pd.DataFrame, system: str | None = None) -> dict[str, float]:
    """``curve/<n_docs>/<score>`` (mean over seeds) for one system's curve, as the report reads
    them; with one run per size, also ``curve/<n_docs>/<score>_low`` and ``_high``."""
    needed = {"system", "n_train_documents", *CURVE_SCORES}
    missing = sorted(needed - set(frame.columns))
    if missing:
        raise LearningCurveError(f"curve table has no column(s) {missing}")
    systems = sorted(frame["system"].unique())
    if system is None:
        if len(systems) != 1:
            raise LearningCurveError(f"curve table holds {len(systems)} systems {systems}; "
                                     f"name one")
        system = systems[0]
    elif system not in systems:
        raise LearningCurveError(f"system {system!r} not in the curve table (has {systems})")
    own = frame[frame["system"] == system]
    metrics: dict[str, float] = {}
    for n_docs, runs in own.groupby("n_train_documents", sort=True):
        metrics.update(_point_metrics(runs, f"curve/{int(n_docs)}"))
    if "documents_per_layout" in own and own["documents_per_layout"].notna().any():
        for per_layout, runs in own.groupby(own["documents_per_layout"].round(2), sort=True):
            metrics.update(_point_metrics(runs, f"curve_per_layout/{float(per_layout):g}"))
    return metrics


def _point_metrics(runs: pd.DataFrame, prefix: str) -> dict[str, float]:
    """Mean over seeds of each score at one point, and its interval when the point is one run."""
    metrics: dict[str, float] = {}
    for score in CURVE_SCORES + SIDE_SCORES:
        if score not in runs:
            continue
        values = runs[score].astype(float)
        if values.notna().any():
            metrics[f"{prefix}/{score}"] = float(values.mean())
        for suffix in ("_low", "_high"):
            column = score + suffix
            if len(runs) == 1 and column in runs and np.isfinite(runs[column].iloc[0]):
                metrics[f"{prefix}/{column}"] = float(runs[column].iloc[0])
    return metrics
