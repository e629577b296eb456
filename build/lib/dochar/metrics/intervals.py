"""Uncertainty of a test score, and whether one system really beats another.

Words of one document are not independent (one layout, one writer, one scan), so the unit of
resampling is the document (``group_col``), never the word.

* :func:`bootstrap_interval`: percentile bootstrap over documents (Efron & Tibshirani 1993, ch. 13).
* :func:`paired_comparison`: the difference ``score(a) - score(b)`` on the same documents, with a
  paired bootstrap interval (Koehn, 2004; Berg-Kirkpatrick et al., 2012) and a two-sided p-value,
  either from that bootstrap — the distribution shifted to the null, ``|δ* - δ| >= |δ|`` — or
  from approximate randomisation (Noreen, 1989): each document's predictions are swapped between
  the systems with probability 1/2. When all ``2^n`` swap patterns fit in ``n_resamples`` they
  are enumerated, which makes the randomisation test exact. Monte Carlo p-values are
  ``(1 + hits) / (1 + n_resamples)`` (Davison & Hinkley, 1997, sec. 4.2), never 0.

Scores with ``group_counts`` (see :mod:`dochar.metrics.scorers`) are resampled as sums of
per-document counts; any other ``frame -> float`` function is re-run on each resampled frame.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd

from dochar.metrics.scorers import AdditiveScore
from dochar.metrics.words import MetricInputError

ScoreFn = Callable[[pd.DataFrame], float]
_TIE = 1e-12   # scores this close count as equal when comparing to the observed difference


@dataclass
class PairedResult:
    difference: float            # score(a) - score(b)
    low: float                   # paired-bootstrap percentile interval of the difference
    high: float
    p_value: float               # two-sided, for "no difference"
    n_documents: int
    method: str
    score_a: float = float("nan")
    score_b: float = float("nan")
    exact: bool = False          # randomisation over all 2^n swap patterns


def _group_ids(frame: pd.DataFrame, group_col: str) -> np.ndarray:
    if group_col not in frame.columns:
        raise MetricInputError(f"resampling needs column '{group_col}'; the frame has "
                               f"{list(frame.columns)}")
    groups = np.unique(frame[group_col].astype(str).to_numpy())
    if len(groups) < 2:
        raise MetricInputError(f"resampling over '{group_col}' needs at least 2 groups, "
                               f"got {len(groups)}")
    return groups


def _counts(frame: pd.DataFrame, score_fn: AdditiveScore, group_col: str,
            groups: np.ndarray) -> np.ndarray:
    ids, counts = score_fn.group_counts(frame, group_col)
    if not np.array_equal(np.asarray(ids, dtype=str), groups):
        raise MetricInputError(f"{score_fn!r} returned counts for other groups than "
                               f"'{group_col}' holds")
    return np.asarray(counts, dtype=float)


def _combine(weights: np.ndarray, counts: np.ndarray, score_fn: AdditiveScore) -> np.ndarray:
    """Scores of many weighted sums of per-group counts: weights (R, G), counts (G, ...)."""
    summed = weights @ counts.reshape(len(counts), -1)
    return np.asarray(score_fn.from_counts(summed.reshape(len(weights), *counts.shape[1:])))


def _rescore(frames: list[pd.DataFrame], pieces: list[list[tuple[int, np.ndarray]]],
             score_fn: ScoreFn, group_col: str) -> np.ndarray:
    """Re-run ``score_fn`` on frames glued from (frame index, row positions) pieces.

    Each piece gets its own group (and doc_id) value, so a scorer never merges two drawn copies
    of one document into one.
    """
    scores = np.empty(len(pieces))
    for r, parts in enumerate(pieces):
        glued = pd.concat([frames[f].iloc[rows] for f, rows in parts], ignore_index=True)
        copy = np.repeat(np.arange(len(parts)), [len(rows) for _, rows in parts]).astype(str)
        for column in {group_col, "doc_id"} & set(glued.columns):
            glued[column] = glued[column].astype(str) + "\x1f" + copy
        scores[r] = score_fn(glued)
    return scores


def bootstrap_scores(frame: pd.DataFrame, score_fn: ScoreFn, *, group_col: str = "doc_id",
                     n_resamples: int = 1000, seed: int = 0) -> np.ndarray:
    """Scores of ``n_resamples`` bootstrap resamples of the groups (documents).

    Draws are ``default_rng(seed).integers(0, G, (n_resamples, G))`` over the sorted group ids,
    so one seed gives the same resamples for every score and both systems of a comparison.
    """
    groups = _group_ids(frame, group_col)
    if n_resamples < 1:
        raise MetricInputError(f"n_resamples must be positive, got {n_resamples}")
    draws = np.random.default_rng(seed).integers(0, len(groups), size=(n_resamples, len(groups)))
    if isinstance(score_fn, AdditiveScore):
        counts = _counts(frame, score_fn, group_col, groups)
        offsets = draws + len(groups) * np.arange(n_resamples)[:, None]
        weights = np.bincount(offsets.ravel(), minlength=draws.size).reshape(draws.shape)
        return _combine(weights.astype(float), counts, score_fn)
    rows = frame.groupby(frame[group_col].astype(str)).indices
    return _rescore([frame], [[(0, rows[groups[g]]) for g in draw] for draw in draws],
                    score_fn, group_col)


def _check_confidence(confidence: float) -> float:
    if not 0 < confidence < 1:
        raise MetricInputError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    return (1 - confidence) / 2


def bootstrap_interval(frame: pd.DataFrame, score_fn: ScoreFn, *, group_col: str = "doc_id",
                       n_resamples: int = 1000, confidence: float = 0.95, seed: int = 0
                       ) -> tuple[float, float, float]:
    """(point, low, high): the score on all documents and its percentile bootstrap interval."""
    tail = _check_confidence(confidence)
    scores = bootstrap_scores(frame, score_fn, group_col=group_col, n_resamples=n_resamples,
                              seed=seed)
    low, high = np.percentile(scores, [100 * tail, 100 * (1 - tail)])
    return float(score_fn(frame)), float(low), float(high)


def _check_pair(frame_a: pd.DataFrame, frame_b: pd.DataFrame, group_col: str) -> np.ndarray:
    groups_a, groups_b = _group_ids(frame_a, group_col), _group_ids(frame_b, group_col)
    only_a = sorted(set(groups_a) - set(groups_b))
    only_b = sorted(set(groups_b) - set(groups_a))
    if only_a or only_b:
        raise MetricInputError(
            f"a paired comparison needs the same test documents in both systems; "
            f"only in system A ({len(only_a)}): {only_a[:10]}; "
            f"only in system B ({len(only_b)}): {only_b[:10]}")
    sizes_a = frame_a.groupby(frame_a[group_col].astype(str)).size()
    sizes_b = frame_b.groupby(frame_b[group_col].astype(str)).size().reindex(sizes_a.index)
    differ = sizes_a.index[sizes_a != sizes_b]
    if len(differ):
        first = differ[0]
        raise MetricInputError(
            f"systems scored different words: {group_col} '{first}' has {sizes_a[first]} words "
            f"in system A and {sizes_b[first]} in system B ({len(differ)} such groups)")
    return groups_a


def _swap_patterns(n_groups: int, n_resamples: int, rng: np.random.Generator
                   ) -> tuple[np.ndarray, bool]:
    if n_groups < 31 and 2 ** n_groups <= n_resamples:
        return np.array(list(itertools.product((0, 1), repeat=n_groups)), dtype=float), True
    return rng.integers(0, 2, size=(n_resamples, n_groups)).astype(float), False


def _swapped_differences(frame_a: pd.DataFrame, frame_b: pd.DataFrame, score_fn: ScoreFn,
                         group_col: str, groups: np.ndarray, swaps: np.ndarray) -> np.ndarray:
    """score(A') - score(B') where A', B' take the other system's words where ``swaps`` is 1."""
    if isinstance(score_fn, AdditiveScore):
        counts_a = _counts(frame_a, score_fn, group_col, groups)
        counts_b = _counts(frame_b, score_fn, group_col, groups)
        flip = (counts_b - counts_a).reshape(len(groups), -1)
        total_a, total_b = counts_a.sum(axis=0), counts_b.sum(axis=0)
        shape = (len(swaps), *counts_a.shape[1:])
        scores_a = score_fn.from_counts(total_a + (swaps @ flip).reshape(shape))
        scores_b = score_fn.from_counts(total_b - (swaps @ flip).reshape(shape))
        return np.asarray(scores_a) - np.asarray(scores_b)
    rows_a = frame_a.groupby(frame_a[group_col].astype(str)).indices
    rows_b = frame_b.groupby(frame_b[group_col].astype(str)).indices
    rows = (rows_a, rows_b)
    side_a = [[(int(s), rows[int(s)][g]) for g, s in zip(groups, pattern)] for pattern in swaps]
    side_b = [[(1 - int(s), rows[1 - int(s)][g]) for g, s in zip(groups, pattern)]
              for pattern in swaps]
    frames = [frame_a, frame_b]
    return (_rescore(frames, side_a, score_fn, group_col)
            - _rescore(frames, side_b, score_fn, group_col))


def paired_comparison(frame_a: pd.DataFrame, frame_b: pd.DataFrame, score_fn: ScoreFn, *,
                      group_col: str = "doc_id", n_resamples: int = 2000, seed: int = 0,
                      method: Literal["bootstrap", "randomisation"] = "bootstrap",
                      confidence: float = 0.95) -> PairedResult:
    """Is ``score(a) - score(b)`` more than resampling noise? Same documents required."""
    if method not in ("bootstrap", "randomisation"):
        raise MetricInputError(f"method must be 'bootstrap' or 'randomisation', not {method!r}")
    tail = _check_confidence(confidence)
    groups = _check_pair(frame_a, frame_b, group_col)
    score_a, score_b = float(score_fn(frame_a)), float(score_fn(frame_b))
    observed = score_a - score_b
    options = dict(group_col=group_col, n_resamples=n_resamples, seed=seed)
    deltas = (bootstrap_scores(frame_a, score_fn, **options)
              - bootstrap_scores(frame_b, score_fn, **options))
    low, high = np.percentile(deltas, [100 * tail, 100 * (1 - tail)])
    exact = False
    if method == "bootstrap":
        hits = int(np.sum(np.abs(deltas - observed) >= abs(observed) - _TIE))
        p_value = (1 + hits) / (1 + n_resamples)
    else:
        swaps, exact = _swap_patterns(len(groups), n_resamples, np.random.default_rng(seed))
        swapped = _swapped_differences(frame_a, frame_b, score_fn, group_col, groups, swaps)
        hits = int(np.sum(np.abs(swapped) >= abs(observed) - _TIE))
        p_value = hits / len(swaps) if exact else (1 + hits) / (1 + len(swaps))
    return PairedResult(difference=observed, low=float(low), high=float(high),
                        p_value=float(p_value), n_documents=len(groups), method=method,
                        score_a=score_a, score_b=score_b, exact=exact)
