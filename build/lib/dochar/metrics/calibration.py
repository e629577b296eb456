"""Do the model's word confidences mean what they say?

Equal-width confidence bins B_m = ((m-1)/M, m/M] (a confidence of exactly 0 goes to the first
bin), and the expected calibration error of Guo et al., "On Calibration of Modern Neural
Networks", ICML 2017, eq. 3:  ECE = sum_m |B_m|/n * |acc(B_m) - conf(B_m)|.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from dochar.metrics.words import MetricInputError


def _bins(confidence: np.ndarray, correct: np.ndarray, n_bins: int
          ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    confidence = np.asarray(confidence, dtype=float).ravel()
    correct = np.asarray(correct).ravel()
    if len(confidence) != len(correct):
        raise MetricInputError(f"{len(confidence)} confidences but {len(correct)} correctness "
                               f"values")
    if len(confidence) == 0:
        raise MetricInputError("no predictions to calibrate")
    if n_bins < 1:
        raise MetricInputError(f"n_bins must be positive, got {n_bins}")
    outside = ~((confidence >= 0) & (confidence <= 1))
    if outside.any():
        first = int(np.flatnonzero(outside)[0])
        raise MetricInputError(f"confidence must lie in [0, 1]; position {first} has "
                               f"{confidence[first]} ({int(outside.sum())} such values)")
    if not np.isin(correct, (0, 1, True, False)).all():
        raise MetricInputError("correct must hold only 0/1 or booleans")
    # edges[i] < c <= edges[i + 1], with the same edges the curve reports
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    index = np.clip(np.searchsorted(edges, confidence, side="left") - 1, 0, n_bins - 1)
    return index, confidence, correct.astype(float)


def reliability_curve(confidence: np.ndarray, correct: np.ndarray, n_bins: int = 15
                      ) -> pd.DataFrame:
    """One row per bin: bin, lower, upper, mean_confidence, accuracy (NaN if empty), count."""
    index, confidence, correct = _bins(confidence, correct, n_bins)
    count = np.bincount(index, minlength=n_bins)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_confidence = np.bincount(index, weights=confidence, minlength=n_bins) / count
        accuracy = np.bincount(index, weights=correct, minlength=n_bins) / count
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    return pd.DataFrame({"bin": np.arange(n_bins), "lower": edges[:-1], "upper": edges[1:],
                         "mean_confidence": mean_confidence, "accuracy": accuracy,
                         "count": count})


def expected_calibration_error(confidence: np.ndarray, correct: np.ndarray,
                               n_bins: int = 15) -> float:
    """ECE (Guo et al., 2017, eq. 3); empty bins contribute nothing."""
    curve = reliability_curve(confidence, correct, n_bins)
    filled = curve[curve["count"] > 0]
    gap = (filled["accuracy"] - filled["mean_confidence"]).abs()
    return float((filled["count"] * gap).sum() / curve["count"].sum())
