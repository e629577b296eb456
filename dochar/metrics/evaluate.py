"""Scores of one run's test predictions: the metrics logged, ranked, gated and reported.

Headline scores get a percentile bootstrap interval over test documents; per-class, per-layout
and calibration figures come from the same prediction frame, so every consumer agrees.
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
from dochar.metrics.words import per_group_scores, score_words


def headline_scorers(labels: Sequence[str], ignore: Sequence[str] = ("other",), *,
                     entities: bool = True) -> dict[str, Any]:
    """The scores that get intervals and paired tests, each resampled from per-document counts."""
    scorers: dict[str, Any] = {"macro_f1": WordF1(labels, "macro"),
                               "micro_f1": WordF1(labels, "micro")}
    if entities:
        scorers["entity_f1"] = EntityF1(labels, ignore=ignore)
    return scorers


@dataclass
class Evaluation:
    metrics: dict[str, float]
    tables: dict[str, pd.DataFrame]


def evaluate(predictions: pd.DataFrame, labels: Sequence[str], cfg: Mapping[str, Any], *,
             seed: int) -> Evaluation:
    ignore = tuple(cfg.get("entity_ignore", ("other",)))
    words = score_words(predictions["label"], predictions["predicted"], labels)
    metrics = words.to_flat()
    has_entities = "entity_id" in predictions and (predictions["entity_id"] != "").any()
    if has_entities:
        entities = entity_scores(predictions, labels, ignore=ignore)
        metrics.update(entities.to_flat())
    for name, scorer in headline_scorers(labels, ignore, entities=has_entities).items():
        _, low, high = bootstrap_interval(predictions, scorer,
                                          n_resamples=int(cfg["bootstrap_resamples"]),
                                          confidence=float(cfg["confidence"]), seed=seed)
        metrics[f"{name}_low"], metrics[f"{name}_high"] = low, high
    metrics.update(side_metrics(predictions, headline_scorers(labels, ignore,
                                                              entities=has_entities),
                                cfg, seed=seed))
    correct = (predictions["label"] == predictions["predicted"]).to_numpy()
    metrics["ece"] = float(expected_calibration_error(predictions["confidence"].to_numpy(),
                                                      correct))
    tables = {"per_class": words.per_class,
              "confusion": pd.DataFrame(words.confusion, index=labels, columns=labels)}
    if has_entities:
        tables["entity_per_class"] = entities.per_class
    if (predictions["layout_id"] != "").any():
        per_layout = per_group_scores(predictions, labels, "layout_id")
        tables["per_layout"] = per_layout
        metrics.update({f"layout_f1/{layout}": float(value)
                        for layout, value in per_layout["macro_f1"].items()})
    return Evaluation({k: float(v) for k, v in metrics.items() if np.isfinite(v)}, tables)
