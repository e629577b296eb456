"""Bootstrap intervals and paired tests against naive loops, scipy and exact enumeration."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
import scipy.stats
from sklearn.metrics import f1_score

from dochar.metrics import (
    ColumnMean,
    EntityF1,
    MetricInputError,
    WordF1,
    bootstrap_interval,
    bootstrap_scores,
    entity_scores,
    paired_comparison,
    score_words,
)

LABELS = ["lab_name", "analyte", "result", "unit", "other"]


def _predictions(n_docs: int, seed: int, accuracy: float = 0.7, words: int = 24) -> pd.DataFrame:
    """Documents of one-line entities on a grid; each word kept right with prob ``accuracy``."""
    rng = np.random.default_rng(seed)
    records = []
    for doc in range(n_docs):
        entity, position = 0, 0
        while position < words:
            size, label = int(rng.integers(1, 3)), str(rng.choice(LABELS))
            for _ in range(min(size, words - position)):
                line, column = divmod(position, 4)
                records.append(dict(doc_id=f"doc{doc:03d}", page=1, word_id=position,
                                    x0=column * 50.0, x1=column * 50.0 + 40, y0=line * 15.0,
                                    y1=line * 15.0 + 10, entity_id=str(entity), label=label))
                position += 1
            entity += 1
    frame = pd.DataFrame(records)
    keep = rng.random(len(frame)) < accuracy
    frame["predicted"] = np.where(keep, frame["label"], rng.choice(LABELS, len(frame)))
    return frame


def _naive_bootstrap(frame, score, n_resamples, seed):
    """Oracle: draw documents with replacement as documented, glue copies, re-score words."""
    groups = np.unique(frame["doc_id"])
    draws = np.random.default_rng(seed).integers(0, len(groups), size=(n_resamples, len(groups)))
    by_doc = {doc: words for doc, words in frame.groupby("doc_id")}
    scores = []
    for draw in draws:
        copies = [by_doc[groups[g]].assign(doc_id=f"copy{k}") for k, g in enumerate(draw)]
        scores.append(score(pd.concat(copies, ignore_index=True)))
    return np.array(scores)


def test_vectorised_bootstrap_equals_naive_rescoring():
    frame = _predictions(9, seed=1)
    macro = lambda f: score_words(f["label"], f["predicted"], LABELS).macro_f1  # noqa: E731
    micro = lambda f: score_words(f["label"], f["predicted"], LABELS).micro_f1  # noqa: E731
    entity = lambda f: entity_scores(f, LABELS).f1  # noqa: E731
    for fast, naive in ((WordF1(LABELS), macro), (WordF1(LABELS, "micro"), micro),
                        (EntityF1(LABELS), entity)):
        expected = _naive_bootstrap(frame, naive, 30, seed=5)
        assert bootstrap_scores(frame, fast, n_resamples=30, seed=5) == pytest.approx(expected)
        # a plain callable takes the re-scoring road: same draws, same scores
        assert bootstrap_scores(frame, naive, n_resamples=30, seed=5) == pytest.approx(expected)


def test_interval_contains_point_and_narrows_with_more_documents():
    widths = []
    for n_docs in (8, 128):
        frame = _predictions(n_docs, seed=2)
        point, low, high = bootstrap_interval(frame, WordF1(LABELS), n_resamples=500, seed=0)
        assert low <= point <= high
        assert point == pytest.approx(score_words(frame["label"], frame["predicted"],
                                                  LABELS).macro_f1)
        widths.append(high - low)
    # standard error shrinks like 1/sqrt(n) (Efron & Tibshirani 1993): 16x documents → ~1/4
    assert widths[1] < widths[0] / 2


def test_percentile_interval_agrees_with_scipy_bootstrap():
    rng = np.random.default_rng(11)
    doc_means = rng.normal(loc=0.6, scale=0.2, size=30)
    # three words per document with equal values: the word mean is the mean of document means
    frame = pd.DataFrame({"doc_id": np.repeat([f"d{i:02d}" for i in range(30)], 3),
                          "value": np.repeat(doc_means, 3)})
    _, low, high = bootstrap_interval(frame, ColumnMean("value"), n_resamples=20000, seed=1)
    # reference: scipy.stats.bootstrap(method="percentile"), independent draws → Monte Carlo
    # tolerance; the bootstrap standard error here is ~0.036, percentile noise at 20k ≪ 0.01
    reference = scipy.stats.bootstrap((doc_means,), np.mean, method="percentile",
                                      n_resamples=20000, rng=np.random.default_rng(99))
    assert low == pytest.approx(reference.confidence_interval.low, abs=0.01)
    assert high == pytest.approx(reference.confidence_interval.high, abs=0.01)


def test_bootstrap_refuses_bad_input():
    frame = _predictions(1, seed=0)
    with pytest.raises(MetricInputError, match="at least 2 groups, got 1"):
        bootstrap_interval(frame, WordF1(LABELS))
    with pytest.raises(MetricInputError, match="confidence"):
        bootstrap_interval(_predictions(3, seed=0), WordF1(LABELS), confidence=95)
    with pytest.raises(MetricInputError, match="layout_id"):
        bootstrap_interval(frame, WordF1(LABELS), group_col="layout_id")


# ---------------------------------------------------------------- paired comparisons

@pytest.mark.parametrize("method", ["bootstrap", "randomisation"])
def test_identical_systems_have_no_difference(method):
    frame = _predictions(12, seed=3)
    result = paired_comparison(frame, frame.copy(), WordF1(LABELS), method=method)
    # δ = 0 and every resample or swap gives 0 too: |δ*| >= |δ| always (p = 1)
    assert result.difference == 0
    assert result.p_value == pytest.approx(1.0)
    assert (result.low, result.high) == (0, 0)


@pytest.mark.parametrize("method", ["bootstrap", "randomisation"])
def test_better_on_every_document_is_significant(method):
    worse = _predictions(20, seed=4, accuracy=0.5)
    better = worse.assign(predicted=worse["label"])   # perfect on every document
    result = paired_comparison(better, worse, WordF1(LABELS), method=method, n_resamples=2000)
    assert result.difference > 0
    assert result.low > 0
    # the exact value 1/2001 is checked in test_monte_carlo_p_value_counts_the_observed_arrangement
    assert result.p_value < 0.01
    assert result.n_documents == 20


def _exact_randomisation_p(frame_a, frame_b, score):
    """Noreen 1989, enumerated: all 2^n per-document swaps of the two systems' predictions."""
    docs = sorted(frame_a["doc_id"].unique())
    observed = score(frame_a) - score(frame_b)
    hits = 0
    patterns = list(itertools.product((False, True), repeat=len(docs)))
    for pattern in patterns:
        swapped = {d for d, s in zip(docs, pattern) if s}
        side_a = pd.concat([frame_a[~frame_a.doc_id.isin(swapped)],
                            frame_b[frame_b.doc_id.isin(swapped)]])
        side_b = pd.concat([frame_b[~frame_b.doc_id.isin(swapped)],
                            frame_a[frame_a.doc_id.isin(swapped)]])
        hits += abs(score(side_a) - score(side_b)) >= abs(observed) - 1e-12
    return hits / len(patterns)


def _sk_macro(frame):
    # sklearn.metrics.f1_score over the classes present in truth or prediction
    present = sorted(set(frame["label"]) | set(frame["predicted"]))
    return f1_score(frame["label"], frame["predicted"], labels=present, average="macro")


def _rival(frame, accuracy, seed):
    """A second system on the same words: each word right with prob ``accuracy``."""
    rng = np.random.default_rng(seed)
    keep = rng.random(len(frame)) < accuracy
    return frame.assign(predicted=np.where(keep, frame["label"],
                                           rng.choice(LABELS, len(frame))))


def test_randomisation_exact_on_four_documents():
    frame_a = _predictions(4, seed=6, accuracy=0.8, words=8)
    frame_b = _rival(frame_a, accuracy=0.6, seed=1)
    expected = _exact_randomisation_p(frame_a, frame_b, _sk_macro)   # 16 swap patterns
    result = paired_comparison(frame_a, frame_b, WordF1(LABELS), method="randomisation",
                               n_resamples=100)
    assert result.exact
    assert result.p_value == pytest.approx(expected)
    assert 0.05 < expected < 0.95        # not a degenerate case
    plain = paired_comparison(frame_a, frame_b, _sk_macro, method="randomisation",
                              n_resamples=16)
    assert plain.p_value == pytest.approx(expected)


def test_monte_carlo_randomisation_approaches_exact_p():
    frame_a = _predictions(10, seed=8, accuracy=0.72, words=10)
    frame_b = _rival(frame_a, accuracy=0.66, seed=0)
    accuracy = lambda f: float((f["label"] == f["predicted"]).mean())  # noqa: E731
    expected = _exact_randomisation_p(frame_a, frame_b, accuracy)     # 1024 patterns
    result = paired_comparison(frame_a, frame_b, WordF1(LABELS, "micro"),
                               method="randomisation", n_resamples=1000, seed=3)
    assert not result.exact
    assert 0.05 < expected < 0.95
    # binomial Monte Carlo error of a p-value from 1000 draws: 4 standard errors
    assert abs(result.p_value - expected) < 4 * np.sqrt(expected * (1 - expected) / 1000) + 2e-3


def test_paired_comparison_names_missing_documents():
    frame_a = _predictions(5, seed=0)
    frame_b = frame_a[frame_a["doc_id"] != "doc003"]
    with pytest.raises(MetricInputError, match=r"only in system A \(1\): \['doc003'\]"):
        paired_comparison(frame_a, frame_b, WordF1(LABELS))
    fewer_words = frame_a.drop(index=frame_a.index[frame_a["doc_id"] == "doc002"][:1])
    with pytest.raises(MetricInputError, match=r"'doc002' has 23 words in system A and 24"):
        paired_comparison(fewer_words, frame_a, WordF1(LABELS))


# --- the paired interval and p-values against computations written here ----------------------

def _paired_loop(frame_a, frame_b, score, n_resamples, seed):
    """Oracle: for each resample draw test documents with replacement (one draw shared by both
    systems: that is what makes it paired), glue copies, score both, keep the difference."""
    docs = np.unique(frame_a["doc_id"])
    draws = np.random.default_rng(seed).integers(0, len(docs), size=(n_resamples, len(docs)))
    by_a = {d: w for d, w in frame_a.groupby("doc_id")}
    by_b = {d: w for d, w in frame_b.groupby("doc_id")}
    out = []
    for draw in draws:
        pick_a = pd.concat([by_a[docs[g]].assign(doc_id=f"c{k}") for k, g in enumerate(draw)])
        pick_b = pd.concat([by_b[docs[g]].assign(doc_id=f"c{k}") for k, g in enumerate(draw)])
        out.append(score(pick_a) - score(pick_b))
    return np.array(out)


def test_paired_bootstrap_interval_and_p_value_match_a_plain_loop():
    """Percentile interval of the paired differences (Efron & Tibshirani 1993, ch. 13) and the
    shifted-bootstrap p-value (1 + #{|d* - d| >= |d|}) / (1 + R) (Davison & Hinkley 1997,
    eq. 4.11, from memory), recomputed with sklearn's macro-F1 on glued documents."""
    frame_a = _predictions(12, seed=21, accuracy=0.8, words=12)
    frame_b = _rival(frame_a, accuracy=0.7, seed=5)
    result = paired_comparison(frame_a, frame_b, WordF1(LABELS), n_resamples=400, seed=4)
    deltas = _paired_loop(frame_a, frame_b, _sk_macro, 400, seed=4)
    low, high = np.percentile(deltas, [2.5, 97.5])
    assert (result.low, result.high) == (pytest.approx(low, abs=1e-12),
                                         pytest.approx(high, abs=1e-12))
    observed = _sk_macro(frame_a) - _sk_macro(frame_b)
    assert result.difference == pytest.approx(observed, abs=1e-12)
    hits = np.sum(np.abs(deltas - observed) >= abs(observed) - 1e-12)
    assert result.p_value == pytest.approx((1 + hits) / 401, abs=1e-12)
    # the check can tell a wrong interval: the 25th-75th percentiles are far inside
    quartiles = np.percentile(deltas, [25, 75])
    assert abs(quartiles[0] - result.low) > 0.01 and abs(quartiles[1] - result.high) > 0.01


def test_paired_bootstrap_agrees_with_scipy_paired_bootstrap():
    """scipy.stats.bootstrap(paired=True, method="percentile") resamples the same document
    indices for both systems; its own draws, so a Monte Carlo tolerance (interval ends of a
    difference with standard error ~0.03 from 2000 draws move by well under 0.015)."""
    frame_a = _predictions(20, seed=31, accuracy=0.78, words=10)
    frame_b = _rival(frame_a, accuracy=0.7, seed=9)
    docs = np.unique(frame_a["doc_id"])
    by_a = [frame_a[frame_a["doc_id"] == d] for d in docs]
    by_b = [frame_b[frame_b["doc_id"] == d] for d in docs]

    def difference(index_a, index_b):
        return (_sk_macro(pd.concat([by_a[int(i)] for i in index_a]))
                - _sk_macro(pd.concat([by_b[int(i)] for i in index_b])))

    reference = scipy.stats.bootstrap((np.arange(len(docs)), np.arange(len(docs))), difference,
                                      paired=True, vectorized=False, method="percentile",
                                      n_resamples=2000, rng=np.random.default_rng(17))
    result = paired_comparison(frame_a, frame_b, WordF1(LABELS), n_resamples=2000, seed=2)
    assert result.low == pytest.approx(reference.confidence_interval.low, abs=0.015)
    assert result.high == pytest.approx(reference.confidence_interval.high, abs=0.015)


def test_randomisation_p_value_equals_scipy_permutation_test():
    """scipy.stats.permutation_test(permutation_type="samples") swaps each document's two
    predictions between the systems: all 2^8 patterns here, so both p-values are exact."""
    frame_a = _predictions(8, seed=13, accuracy=0.8, words=10)
    frame_b = _rival(frame_a, accuracy=0.65, seed=2)
    docs = np.unique(frame_a["doc_id"])
    stacked = [frame_a[frame_a["doc_id"] == d] for d in docs] + \
        [frame_b[frame_b["doc_id"] == d] for d in docs]

    def difference(side_a, side_b):
        return (_sk_macro(pd.concat([stacked[int(i)] for i in side_a]))
                - _sk_macro(pd.concat([stacked[int(i)] for i in side_b])))

    reference = scipy.stats.permutation_test(
        (np.arange(len(docs)), np.arange(len(docs)) + len(docs)), difference,
        permutation_type="samples", vectorized=False, n_resamples=10_000,
        alternative="two-sided")
    result = paired_comparison(frame_a, frame_b, WordF1(LABELS), method="randomisation",
                               n_resamples=1000)
    assert result.exact
    assert 0.01 < reference.pvalue < 0.99
    assert result.p_value == pytest.approx(reference.pvalue, abs=1e-9)


def test_monte_carlo_p_value_counts_the_observed_arrangement():
    """Davison & Hinkley 1997, sec. 4.2: a Monte Carlo p-value is (1 + hits) / (1 + R), never 0.
    System A is right on every word, B on none, 20 documents of 24 words each: with accuracy
    (micro-F1 of single-label words), swapping a set S of documents gives A' - B' =
    (n - 2|S|) / n documents' worth, so |A' - B'| >= |A - B| only when S is empty or every
    document (2 of the 2^20 patterns). Among 2000 random patterns the chance of either is
    2000 * 2 / 2^20 < 0.4%, so hits = 0 and p = 1 / 2001 (worked by hand)."""
    frame = _predictions(20, seed=4, words=24)
    better = frame.assign(predicted=frame["label"])
    wrong = {label: LABELS[(i + 1) % len(LABELS)] for i, label in enumerate(LABELS)}
    worse = frame.assign(predicted=frame["label"].map(wrong))
    result = paired_comparison(better, worse, WordF1(LABELS, "micro"), method="randomisation",
                               n_resamples=2000, seed=0)
    assert not result.exact and result.difference == pytest.approx(1.0)
    assert result.p_value == pytest.approx(1 / 2001, abs=1e-15)
    # the paired bootstrap: every resample has the same difference 1, |δ* - δ| = 0 < |δ|
    bootstrap = paired_comparison(better, worse, WordF1(LABELS, "micro"), n_resamples=2000)
    assert bootstrap.p_value == pytest.approx(1 / 2001, abs=1e-15)


@pytest.mark.parametrize("options,resamples,seed,confidence", [
    ({}, 1000, 0, 0.95),                                          # the documented defaults
    ({"n_resamples": 37, "seed": 5, "confidence": 0.8}, 37, 5, 0.8),
])
def test_percentile_interval_equals_the_documented_draws(options, resamples, seed, confidence):
    """Efron & Tibshirani 1993, ch. 13: the (1-c)/2 and (1+c)/2 percentiles of the resampled
    scores, with numpy's linear interpolation; the draws are default_rng(seed).integers(0, G,
    (R, G)) over the sorted document ids (bootstrap_scores' docstring), rescored here."""
    rng = np.random.default_rng(17)
    doc_means = rng.normal(loc=0.6, scale=0.2, size=9)
    frame = pd.DataFrame({"doc_id": np.repeat([f"d{i}" for i in range(9)], 2),
                          "value": np.repeat(doc_means, 2)})
    point, low, high = bootstrap_interval(frame, ColumnMean("value"), **options)
    draws = np.random.default_rng(seed).integers(0, 9, size=(resamples, 9))
    scores = doc_means[draws].mean(axis=1)
    tail = (1 - confidence) / 2
    expected = np.percentile(scores, [100 * tail, 100 * (1 - tail)])
    assert point == pytest.approx(doc_means.mean())
    assert (low, high) == (pytest.approx(expected[0], abs=1e-12),
                           pytest.approx(expected[1], abs=1e-12))


# ------------------------------------------------ edges: sizes, defaults, messages, groups

def _accuracy(frame: pd.DataFrame) -> float:
    """A plain (not additive) score: share of words labelled right, re-run on each resample."""
    return float((frame["label"] == frame["predicted"]).mean())


def test_two_documents_and_one_resample_are_enough():
    # the documented minimum is 2 groups and 1 resample (the errors name 1 and 0)
    frame = _predictions(2, seed=5)
    assert len(bootstrap_scores(frame, WordF1(LABELS), n_resamples=1)) == 1
    point, low, high = bootstrap_interval(frame, WordF1(LABELS), n_resamples=20)
    assert low <= high
    with pytest.raises(MetricInputError, match="^n_resamples must be positive, got 0$"):
        bootstrap_scores(frame, WordF1(LABELS), n_resamples=0)


@pytest.mark.parametrize("confidence", [0.0, 1.0, 1.5, -0.1])
def test_confidence_must_lie_strictly_between_zero_and_one(confidence):
    with pytest.raises(MetricInputError, match="strictly between 0 and 1"):
        bootstrap_interval(_predictions(3, seed=0), WordF1(LABELS), confidence=confidence)


def test_bootstrap_defaults_are_1000_resamples_of_seed_0():
    # the documented defaults (docstring of bootstrap_scores): R = 1000, seed 0
    frame = _predictions(6, seed=2)
    default = bootstrap_scores(frame, WordF1(LABELS))
    assert len(default) == 1000
    np.testing.assert_array_equal(default, bootstrap_scores(frame, WordF1(LABELS),
                                                            n_resamples=1000, seed=0))


def _scored(frame: pd.DataFrame) -> pd.DataFrame:
    """The frame with a 0/1 ``correct`` column, for ColumnMean("correct") (word accuracy)."""
    return frame.assign(correct=(frame["label"] == frame["predicted"]).astype(float))


def test_paired_comparison_defaults_and_result_fields():
    # better is right on every word: each bootstrap resample has the same difference as the
    # data, so p = 1 / (1 + R) = 1/2001 at the default R = 2000 (Davison & Hinkley 1997,
    # sec. 4.2); the scores reported are those of the two frames (accuracy, computed here)
    worse = _scored(_predictions(6, seed=4, accuracy=0.5))
    better = _scored(worse.assign(predicted=worse["label"]))
    accuracy = ColumnMean("correct")
    result = paired_comparison(better, worse, accuracy)
    assert result.method == "bootstrap" and result.exact is False
    assert result.p_value == pytest.approx(1 / 2001, abs=1e-12)
    assert result.score_a == 1.0 and result.score_b == pytest.approx(_accuracy(worse))
    # the default seed is 0: documents whose differences vary give a draw-dependent interval
    rival = _scored(_predictions(6, seed=9, accuracy=0.6))
    default = paired_comparison(worse, rival, accuracy, n_resamples=300)
    seeded = paired_comparison(worse, rival, accuracy, n_resamples=300, seed=0)
    other = paired_comparison(worse, rival, accuracy, n_resamples=300, seed=1)
    assert (default.low, default.high, default.p_value) == (seeded.low, seeded.high,
                                                            seeded.p_value)
    assert (default.low, default.high, default.p_value) != (other.low, other.high,
                                                            other.p_value)


def test_approximate_randomisation_is_seeded_and_reports_its_fields():
    # 12 documents have 4096 swap patterns: 500 resamples draw them (Noreen 1989, ch. 3)
    a, b = _scored(_predictions(12, seed=1)), _scored(_predictions(12, seed=2, accuracy=0.5))
    runs = [paired_comparison(a, b, ColumnMean("correct"), method="randomisation",
                              n_resamples=500, seed=seed) for seed in (3, 3, 4)]
    assert runs[0].exact is False and runs[0].method == "randomisation"
    assert (runs[0].score_a, runs[0].score_b) == (pytest.approx(_accuracy(a)),
                                                  pytest.approx(_accuracy(b)))
    assert runs[0].p_value == runs[1].p_value            # one seed, one draw
    assert runs[0].p_value != runs[2].p_value            # the seed is used


def test_paired_comparison_refusals_name_the_problem():
    frame = _scored(_predictions(12, seed=3))
    with pytest.raises(MetricInputError,
                       match="^method must be 'bootstrap' or 'randomisation', not 'swap'$"):
        paired_comparison(frame, frame, ColumnMean("correct"), method="swap")
    # 11 documents only in A: the message counts them and names the first 10 (sorted)
    more = pd.concat([frame, _scored(_predictions(23, seed=3)).query("doc_id >= 'doc012'")])
    with pytest.raises(MetricInputError) as refused:
        paired_comparison(more, frame, ColumnMean("correct"))
    named = [f"doc{d:03d}" for d in range(12, 22)]
    assert f"only in system A (11): {named}; only in system B (0): []" in str(refused.value)
    with pytest.raises(MetricInputError) as refused:
        paired_comparison(frame, more, ColumnMean("correct"))
    assert f"only in system A (0): []; only in system B (11): {named}" in str(refused.value)


class _OtherIds(ColumnMean):
    """A broken additive score: its counts are labelled with group ids of its own."""

    def group_counts(self, frame, group_col):
        ids, counts = super().group_counts(frame, group_col)
        return np.array([f"x{i}" for i in range(len(ids))]), counts


def test_counts_for_other_groups_are_refused():
    frame = _scored(_predictions(3, seed=0))
    with pytest.raises(MetricInputError, match="returned counts for other groups than "
                                               "'doc_id' holds"):
        bootstrap_scores(frame, _OtherIds("correct"), n_resamples=5)


def _copies(frame: pd.DataFrame) -> float:
    """A plain score that counts groups: 100 per distinct lab, 1 per distinct document."""
    return 100.0 * frame["lab"].nunique() + frame["doc_id"].nunique()


def test_each_drawn_copy_is_its_own_group_and_its_own_document():
    # resampling labs (group_col="lab") of two documents each: a resample of G = 3 labs holds
    # 3 lab copies and 6 document copies whatever was drawn, twice the same lab included
    # (the rule of dochar.metrics.intervals._rescore), so every score is 3·100 + 6 = 306
    frame = _predictions(6, seed=7)
    frame["lab"] = frame["doc_id"].map(lambda d: f"lab{int(d[3:]) // 2}")
    scores = bootstrap_scores(frame, _copies, group_col="lab", n_resamples=20)
    assert scores.tolist() == [306.0] * 20
    # a paired comparison resampling labs of frames without a doc_id column works on labs alone
    bare = _scored(frame).drop(columns="doc_id")
    result = paired_comparison(bare, bare, ColumnMean("correct"), group_col="lab",
                               n_resamples=50)
    assert result.n_documents == 3 and result.p_value == pytest.approx(1.0)


def _fresh_index(frame: pd.DataFrame) -> float:
    """1 when the frame has the plain 0..n-1 index of a frame read from a file, else 0."""
    return float(frame.index.equals(pd.RangeIndex(len(frame))))


def test_a_resample_reaches_a_plain_score_with_a_fresh_index():
    # glued copies of documents would repeat row labels; a score function may rely on the
    # labels being unique (loc, join, reindex), so every resample gets a fresh index
    frame = _predictions(4, seed=8)
    assert _fresh_index(frame) == 1.0
    assert bootstrap_scores(frame, _fresh_index, n_resamples=10).tolist() == [1.0] * 10
