"""Scores of one run's test predictions: the metrics logged, ranked, gated and reported.

Headline scores get a percentile bootstrap interval over test documents; per-class, per-layout
and calibration figures come from the same prediction frame, so every consumer agrees. The
task picks the scorers: node scores (``macro_f1``, per-class F1, confusion) are over the task's
node classes (word labels, boundary tags or segment labels); ``entity_f1`` is the run-of-labels
entity F1 for word labels and the chunk F1 of the tags for entity tags; tasks whose nodes are
not word labels also get the word labels their predictions decode to, as ``word/...``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from dochar.metrics.calibration import expected_calibration_error
from dochar.metrics.entities import entity_scores
from dochar.metrics.intervals import bootstrap_interval
from dochar.metrics.scorers import EntityF1, WordF1
from dochar.metrics.seen_unseen import side_metrics
from dochar.metrics.tags import TagEntityF1, tag_entity_scores
from dochar.metrics.words import per_group_scores, score_words
from dochar.tasks import EntityTags, Task, WordLabels


def headline_scorers(labels: Sequence[str], ignore: Sequence[str] = ("other",), *,
                     entities: bool = True, task: Task | None = None) -> dict[str, Any]:
    """The scores that get intervals and paired tests, each resampled from per-document counts."""
    task = task or WordLabels()
    scorers: dict[str, Any] = {"macro_f1": WordF1(labels, "macro"),
                               "micro_f1": WordF1(labels, "micro")}
    if task.name == "entity_tags":
        scorers["entity_f1"] = TagEntityF1(task.scheme)
    elif task.name == "word_labels" and entities:
        scorers["entity_f1"] = EntityF1(labels, ignore=ignore)
    return scorers


def headline_names() -> tuple[str, ...]:
    """Every score a run can carry with an interval, whatever its task: what the gate may watch."""
    from dochar.metrics.links import link_scorers

    names: dict[str, None] = {}
    for task in (WordLabels(), EntityTags()):
        names.update(dict.fromkeys(headline_scorers(["_"], task=task)))
    names.update(dict.fromkeys(link_scorers("same_entity")))
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
    """Scores of the node predictions; ``words`` (with ``word_labels``) is their word view."""
    task = task or WordLabels()
    ignore = tuple(cfg.get("entity_ignore", ("other",)))
    nodes = score_words(predictions["label"], predictions["predicted"], labels)
    metrics = nodes.to_flat()
    tables = {"per_class": nodes.per_class,
              "confusion": pd.DataFrame(nodes.confusion, index=labels, columns=labels)}
    has_entities = (task.name == "word_labels" and "entity_id" in predictions
                    and (predictions["entity_id"] != "").any())
    entities = None
    if has_entities:
        entities = entity_scores(predictions, labels, ignore=ignore)
    elif task.name == "entity_tags":
        entities = tag_entity_scores(predictions, labels, task.scheme)
    if entities is not None:
        metrics.update(entities.to_flat())
        tables["entity_per_class"] = entities.per_class
    metrics.update(_intervals(predictions, headline_scorers(labels, ignore, task=task,
                                                            entities=has_entities), cfg, seed))
    if words is not None and task.name != "word_labels":
        word_labels = list(word_labels or labels)
        decoded = score_words(words["label"], words["predicted"], word_labels)
        metrics.update(decoded.to_flat("word/"))
        tables["word_per_class"] = decoded.per_class
        metrics.update(_intervals(words, {"macro_f1": WordF1(word_labels, "macro")}, cfg, seed,
                                  prefix="word/"))
    metrics.update(side_metrics(predictions, headline_scorers(labels, ignore, task=task,
                                                              entities=has_entities),
                                cfg, seed=seed))
    correct = (predictions["label"] == predictions["predicted"]).to_numpy()
    metrics["ece"] = float(expected_calibration_error(
        predictions["confidence"].to_numpy(), correct, n_bins=int(cfg.get("calibration_bins", 15))))
    if (predictions["layout_id"] != "").any():
        per_layout = per_group_scores(predictions, labels, "layout_id")
        tables["per_layout"] = per_layout
        metrics.update({f"layout_f1/{layout}": float(value)
                        for layout, value in per_layout["macro_f1"].items()})
    return Evaluation({k: float(v) for k, v in metrics.items() if np.isfinite(v)}, tables)
