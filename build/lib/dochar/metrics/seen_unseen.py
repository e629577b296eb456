"""Scores on seen and on unseen layouts: the question a team with per-layout templates asks.

A test document is on the ``seen`` side when its layout family has training documents and on the
``unseen`` side when not (the ``layout_side`` column of the prediction frame, set by the split).
Each side gets the run's headline scores with their bootstrap intervals, resampling the side's
own documents, so an interval on one side never borrows documents from the other.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from dochar.metrics.intervals import bootstrap_interval

SIDE_COLUMN = "layout_side"
SIDES = ("seen", "unseen")


def side_metrics(predictions: pd.DataFrame, scorers: Mapping[str, Any],
                 cfg: Mapping[str, Any], *, seed: int) -> dict[str, float]:
    """``<side>/<score>``, ``_low``, ``_high`` and ``<side>/test_documents``, ``<side>/test_words``
    for each side present; no interval for a side with one document (nothing to resample)."""
    if SIDE_COLUMN not in predictions.columns:
        return {}
    metrics: dict[str, float] = {}
    side_of_word = predictions[SIDE_COLUMN].astype(str)
    for side in SIDES:
        subset = predictions[side_of_word == side]
        if subset.empty:
            continue
        n_documents = subset["doc_id"].nunique()
        metrics[f"{side}/test_documents"] = float(n_documents)
        metrics[f"{side}/test_words"] = float(len(subset))
        for name, scorer in scorers.items():
            if n_documents < 2:
                metrics[f"{side}/{name}"] = float(scorer(subset))
                continue
            point, low, high = bootstrap_interval(subset, scorer,
                                                  n_resamples=int(cfg["bootstrap_resamples"]),
                                                  confidence=float(cfg["confidence"]), seed=seed)
            metrics.update({f"{side}/{name}": point, f"{side}/{name}_low": low,
                            f"{side}/{name}_high": high})
    return {key: value for key, value in metrics.items() if np.isfinite(value)}
