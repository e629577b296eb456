"""Scores of one run's test predictions: the metrics logged, ranked, gated and reported.

Headline scores get a percentile bootstrap interval over test documents; per-class, per-layout
and calibration figures come from the same prediction frame, so every consumer agrees. The
task names its scores and the kind of scorer behind each (:attr:`dochar.tasks.Task.scores`):
node scores (``macro_f1``, per-class F1, confusion) are over the task's classes (word labels,
boundary tags, segment labels, or link / none for candidate pairs); ``entity_f1`` is the
run-of-labels entity F1 for word labels, the chunk F1 of the tags for entity tags and the
grouping F1 of same-entity links; tasks whose nodes are not words also get the word labels their
predictions decode to, as ``word/...``.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from dochar.metrics.calibration import expected_calibration_error
from dochar.metrics.entities import entity_scores
from dochar.metrics.intervals import bootstrap_interval
from dochar.metrics.links import GroupingF1, LinkScore, RowF1
from dochar.metrics.records import RECORD_SCORES
from dochar.metrics.scorers import EntityF1, WordF1
from dochar.metrics.seen_unseen import side_metrics
from dochar.metrics.tags import TagEntityF1, tag_entity_scores
from dochar.metrics.words import per_group_scores, score_words
from dochar.tasks import TASKS, Task, WordLabels

# kind -> scorer built from (task, classes, entity_ignore); None where the frame cannot tell
SCORER_KINDS: dict[str, Callable[[Task, Sequence[str], Sequence[str]], Any]] = {
    "word_macro": lambda task, labels, ignore: WordF1(labels, "macro"),
    "word_micro": lambda task, labels, ignore: WordF1(labels, "micro"),
    "label_runs": lambda task, labels, ignore: EntityF1(labels, ignore=ignore),
    "tag_chunks": lambda task, labels, ignore: TagEntityF1(task.scheme),
    "link_f1": lambda task, labels, ignore: LinkScore("f1"),
    "link_precision": lambda task, labels, ignore: LinkScore("precision"),
    "link_recall": lambda task, labels, ignore: LinkScore("recall"),
    "word_grouping": lambda task, labels, ignore: GroupingF1(),
    "row_grouping": lambda task, labels, ignore: RowF1(),
}
# kinds whose per-class entity table the run keeps beside the score
ENTITY_TABLES: dict[str, Callable[[pd.DataFrame, Sequence[str], Task, Sequence[str]], Any]] = {
    "label_runs": lambda frame, labels, task, ignore: entity_scores(frame, labels,
                                                                    ignore=ignore),
    "tag_chunks": lambda frame, labels, task, ignore: tag_entity_scores(frame, labels,
                                                                        task.scheme),
}


def has_entity_ids(predictions: pd.DataFrame) -> bool:
    return "entity_id" in predictions and bool((predictions["entity_id"] != "").any())


def headline_scorers(labels: Sequence[str], ignore: Sequence[str] = ("other",), *,
                     entities: bool = True, task: Task | None = None) -> dict[str, Any]:
    """The task's scores that get intervals and paired tests, headline first, each resampled
    from per-document counts. ``entities``: the frame has entity ids (run-of-labels entity F1
    needs them)."""
    task = task or WordLabels()
    return {name: SCORER_KINDS[kind](task, labels, ignore) for name, kind in task.scores.items()
            if entities or kind != "label_runs"}


def headline_names() -> tuple[str, ...]:
    """Every score a run can carry with an interval, whatever its task: what the gate may watch
    (record scores, ``records/<score>``, when the data has a record shape)."""
    names: dict[str, None] = {}
    for cls in TASKS.values():
        for task in getattr(cls, "variants", lambda: [cls()])():
            names.update(dict.fromkeys(task.scores))
    names.update(dict.fromkeys(f"records/{name}" for name in RECORD_SCORES))
    return tuple(names)


@dataclass
class Evaluation:
    metrics: dict[str, float]
    tables: dict[str, pd.DataFrame]


def _intervals(frame: pd.DataFrame, scorers: Mapping[str, Any], cfg: Mapping[str, Any],
               seed: int, prefix: str = "") -> dict[str, float]:
    out = {}
    for name, scorer in scorers.items():
        _, low, high = bootstrap_interval(frame, scorer,
                                          n_resamples=int(cfg["bootstrap_resamples"]),
                                          confidence=float(cfg["confidence"]), seed=seed)
        out[f"{prefix}{name}_low"], out[f"{prefix}{name}_high"] = low, high
    return out


def evaluate(predictions: pd.DataFrame, labels: Sequence[str], cfg: Mapping[str, Any], *,
             seed: int, task: Task | None = None, words: pd.DataFrame | None = None,
             word_labels: Sequence[str] | None = None) -> Evaluation:
    """Scores of the node (or pair) predictions; ``words`` (with ``word_labels``) is their word
    view, scored as ``word/...`` when the task's nodes are not the words."""
    task = task or WordLabels()
    ignore = tuple(cfg.get("entity_ignore", ("other",)))
    nodes = score_words(predictions["label"], predictions["predicted"], labels)
    metrics = nodes.to_flat()
    tables = {"per_class": nodes.per_class,
              "confusion": pd.DataFrame(nodes.confusion, index=labels, columns=labels)}
    entities = has_entity_ids(predictions)
    scorers = headline_scorers(labels, ignore, task=task, entities=entities)
    for name, kind in task.scores.items():
        if kind in ENTITY_TABLES and name in scorers:
            found = ENTITY_TABLES[kind](predictions, labels, task, ignore)
            metrics.update(found.to_flat())
            tables["entity_per_class"] = found.per_class
    for name, scorer in scorers.items():
        if name not in metrics:
            metrics[name] = scorer(predictions)
    metrics.update(_intervals(predictions, scorers, cfg, seed))
    if words is not None and not words.empty and not task.nodes_are_word_labels:
        word_labels = list(word_labels or labels)
        decoded = score_words(words["label"], words["predicted"], word_labels)
        metrics.update(decoded.to_flat("word/"))
        tables["word_per_class"] = decoded.per_class
        metrics.update(_intervals(words, {"macro_f1": WordF1(word_labels, "macro")}, cfg, seed,
                                  prefix="word/"))
    metrics.update(side_metrics(predictions, scorers, cfg, seed=seed))
    correct = (predictions["label"] == predictions["predicted"]).to_numpy()
    metrics["ece"] = float(expected_calibration_error(
        predictions["confidence"].to_numpy(), correct, n_bins=int(cfg.get("calibration_bins", 15))))
    if "layout_id" in predictions and (predictions["layout_id"] != "").any():
        per_layout = per_group_scores(predictions, labels, "layout_id")
        tables["per_layout"] = per_layout
        metrics.update({f"layout_f1/{layout}": float(value)
                        for layout, value in per_layout["macro_f1"].items()})
    return Evaluation({k: float(v) for k, v in metrics.items() if np.isfinite(v)}, tables)
