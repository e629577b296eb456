"""split=seen_and_unseen_layouts, documents per layout, and the scores per side.

Expected sides are worked out here from the parts alone (a held-out family is one with test
documents and no training document), never read from the code's own ``test_sides``; per-side
scores are recomputed with scikit-learn's ``f1_score`` on the side's words, and their
intervals with a percentile bootstrap over the side's documents written out below (Efron &
Tibshirani 1993, ch. 13), re-scoring every resample with scikit-learn.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import f1_score

from dochar.metrics.evaluate import evaluate
from dochar.splits import split_run
from dochar.splits.protocols import documents_per_layout, make_splits


def _docs(sizes: list[int]) -> pd.DataFrame:
    rows = [(f"f{f:02d}-d{d:02d}", f"family-{f:02d}") for f, n in enumerate(sizes)
            for d in range(n)]
    return pd.DataFrame(rows, columns=["doc_id", "layout_id"])


@settings(max_examples=60, deadline=None)
@given(sizes=st.lists(st.integers(1, 8), min_size=3, max_size=12), seed=st.integers(0, 10_000),
       test_size=st.sampled_from([0.2, 0.25, 0.4]), val_size=st.sampled_from([0.0, 0.15, 0.3]),
       seen_fraction=st.sampled_from([0.1, 0.2, 0.5]))
def test_no_document_of_a_held_out_family_is_on_the_seen_side(sizes, seed, test_size, val_size,
                                                             seen_fraction) -> None:
    docs = _docs(sizes)
    family = dict(zip(docs["doc_id"], docs["layout_id"]))
    (split,) = make_splits(docs, "seen_and_unseen_layouts", seed=seed, test_size=test_size,
                           val_size=val_size, seen_test_fraction=seen_fraction)
    parts = [set(split.train), set(split.val), set(split.test)]
    assert sum(map(len, parts)) == len(docs) and set().union(*parts) == set(docs["doc_id"])
    trained = {family[d] for d in split.train}
    held_out = {family[d] for d in split.test} - trained
    assert held_out and held_out == set(split.test_layouts)   # whole families held out
    assert not held_out & {family[d] for d in [*split.train, *split.val]}
    assert set(split.test_sides) == set(split.test)
    for doc in split.test:
        assert split.test_sides[doc] == ("unseen" if family[doc] in held_out else "seen")
    # every family with two or more pool documents lends at least one to the seen side
    pool = [d for d in docs["doc_id"] if family[d] in trained]
    counts = pd.Series([family[d] for d in pool]).value_counts()
    seen_families = {family[d] for d, side in split.test_sides.items() if side == "seen"}
    assert seen_families == set(counts.index[counts >= 2])
    # validation from the training pool only: its families are held-out-for-validation ones
    # (no train or test documents) or training families
    for doc in split.val:
        assert family[doc] not in held_out


def test_documents_per_layout_nest_and_take_k_of_each_family() -> None:
    docs = _docs([6, 2, 5])
    family = dict(zip(docs["doc_id"], docs["layout_id"]))
    train = list(docs["doc_id"])
    subsets = {k: documents_per_layout(train, family, k, seed=7) for k in (1, 3, 5)}
    for k, (kept, short) in subsets.items():
        per_family = pd.Series([family[d] for d in kept]).value_counts()
        assert dict(per_family) == {"family-00": min(k, 6), "family-01": min(k, 2),
                                    "family-02": min(k, 5)}
        assert short == sum(n < k for n in (6, 2, 5))
    assert set(subsets[1][0]) <= set(subsets[3][0]) <= set(subsets[5][0])


def _table(sizes: list[int]) -> pd.DataFrame:
    docs = _docs(sizes)
    return pd.DataFrame({"doc_id": docs["doc_id"], "layout_id": docs["layout_id"], "page": 1})


def test_a_family_left_out_of_a_smaller_training_part_moves_its_test_documents_unseen() -> None:
    cfg = {"protocol": "seen_and_unseen_layouts", "test_size": 0.25, "val_size": 0.15,
           "n_folds": 5, "fold": 0, "seen_test_fraction": 0.3, "leakage_threshold": None,
           "train_documents": 1}
    split = split_run(_table([5, 5, 5, 5, 5, 5, 5, 5]), cfg, seed=3)
    family = {d: d.split("-")[0] for d in [*split.assignment.train, *split.assignment.test]}
    trained = {family[d] for d in split.assignment.train}
    assert len(trained) == 1
    for doc, side in split.assignment.test_sides.items():
        assert side == ("seen" if family[doc] in trained else "unseen")
    assert split.notes["split/train_layouts"] == 1
    assert split.notes["split/seen_test_documents"] + split.notes["split/unseen_test_documents"] \
        == len(split.assignment.test)


def _predictions(seed: int) -> pd.DataFrame:
    """Twelve documents (five seen, seven unseen) with random labels and predictions."""
    rng = np.random.default_rng(seed)
    labels = ["key", "value", "other"]
    rows = []
    for d in range(12):
        side = "seen" if d < 5 else "unseen"
        for w in range(int(rng.integers(4, 15))):
            truth = labels[int(rng.integers(0, 3))]
            right = rng.random() < (0.9 if side == "seen" else 0.5)
            rows.append({"doc_id": f"doc-{d:02d}", "page": 1, "word_id": w, "label": truth,
                         "predicted": truth if right else labels[int(rng.integers(0, 3))],
                         "confidence": 0.8, "entity_id": "", "layout_id": f"L{d % 4}",
                         "layout_side": side})
    return pd.DataFrame(rows)


def _macro(frame: pd.DataFrame) -> float:
    present = sorted(set(frame["label"]) | set(frame["predicted"]))
    return f1_score(frame["label"], frame["predicted"], labels=present, average="macro",
                    zero_division=0)


def test_side_scores_and_intervals_match_a_recomputation_with_sklearn() -> None:
    predictions = _predictions(seed=11)
    cfg = {"bootstrap_resamples": 200, "confidence": 0.9, "entity_ignore": ["other"]}
    metrics = evaluate(predictions, ["key", "value", "other"], cfg, seed=5).metrics
    for side in ("seen", "unseen"):
        subset = predictions[predictions["layout_side"] == side]
        assert metrics[f"{side}/test_documents"] == subset["doc_id"].nunique()
        assert np.isclose(metrics[f"{side}/macro_f1"], _macro(subset))
        # the same draws as the project's bootstrap: default_rng(seed).integers over the sorted
        # document ids of the side; every resample re-scored from its words
        docs = np.sort(subset["doc_id"].unique())
        draws = np.random.default_rng(5).integers(0, len(docs), size=(200, len(docs)))
        by_doc = {doc: words for doc, words in subset.groupby("doc_id")}
        scores = [_macro(pd.concat([by_doc[docs[i]] for i in draw])) for draw in draws]
        low, high = np.percentile(scores, [5, 95])
        assert np.isclose(metrics[f"{side}/macro_f1_low"], low)
        assert np.isclose(metrics[f"{side}/macro_f1_high"], high)
    assert metrics["seen/macro_f1"] > metrics["unseen/macro_f1"]   # 90% vs 50% right


def _side_frame(documents) -> pd.DataFrame:
    """(doc_id, side, words right out of 4) -> one row per word, true label ``key``."""
    return pd.DataFrame([{"doc_id": doc, "page": 1, "word_id": w, "label": "key",
                          "predicted": "key" if w < right else "value", "layout_side": side}
                         for doc, side, right in documents for w in range(4)])


def test_a_side_of_two_documents_gets_its_interval() -> None:
    # seen side: doc-a 4 words all right, doc-b 4 words 2 right; unseen side: one document.
    # Word accuracy (micro-F1 of single-label words): seen = 6/8 = 0.75. Resampling 2 documents
    # gives (a, a) 1.0 and (b, b) 0.5 with probability 1/4 each, mixed pairs 0.75: the 2.5th and
    # 97.5th percentiles of 500 draws are 0.5 and 1.0 (worked by hand; a 1/4 mass at each end
    # lies far beyond 2.5% of the draws).
    from dochar.metrics.scorers import WordF1
    from dochar.metrics.seen_unseen import side_metrics

    accuracy = WordF1(["key", "value"], "micro")
    scorers = {"accuracy": accuracy, "errors": lambda f: float((f.label != f.predicted).mean())}
    frame = _side_frame([("doc-a", "seen", 4), ("doc-b", "seen", 2), ("doc-c", "unseen", 3)])
    metrics = side_metrics(frame, scorers, {"bootstrap_resamples": 500, "confidence": 0.95},
                           seed=0)
    assert metrics["seen/test_documents"] == 2 and metrics["seen/test_words"] == 8
    assert (metrics["seen/accuracy"], metrics["seen/accuracy_low"],
            metrics["seen/accuracy_high"]) == (0.75, 0.5, 1.0)
    # one document: nothing to resample, so the scores stand alone
    assert metrics["unseen/accuracy"] == 0.75 and metrics["unseen/errors"] == 0.25
    assert "unseen/accuracy_low" not in metrics and metrics["unseen/test_documents"] == 1
    # a side of one document first, and no seen side at all: the other side is still scored
    swapped = frame.assign(layout_side=frame["layout_side"].map({"seen": "unseen",
                                                                 "unseen": "seen"}))
    swapped_metrics = side_metrics(swapped, scorers, {"bootstrap_resamples": 500,
                                                      "confidence": 0.95}, seed=0)
    assert swapped_metrics["seen/errors"] == 0.25
    assert swapped_metrics["unseen/accuracy_high"] == 1.0
    only_unseen = side_metrics(frame[frame["layout_side"] == "unseen"], scorers,
                               {"bootstrap_resamples": 500, "confidence": 0.95}, seed=0)
    assert only_unseen["unseen/test_documents"] == 1 and "seen/test_documents" not in only_unseen

    # the interval follows the settings: five documents (accuracies 1, 3/4, 1/2, 1/4, 0), 10
    # resamples, 50% interval, seeds 3 and 4, against the documented draws
    # default_rng(seed).integers over the sorted document ids, each resample's accuracy
    # computed here (numpy's percentile interpolates between the 3rd/4th and 7th/8th draws)
    five = _side_frame([(f"doc-{right}", "seen", right) for right in range(5)])
    for seed in (3, 4):
        metrics = side_metrics(five, {"accuracy": accuracy},
                               {"bootstrap_resamples": 10, "confidence": 0.5}, seed=seed)
        draws = np.random.default_rng(seed).integers(0, 5, size=(10, 5))  # doc-0 .. doc-4
        low, high = np.percentile([np.mean(draw) / 4 for draw in draws], [25, 75])
        assert (metrics["seen/accuracy_low"], metrics["seen/accuracy_high"]) == (
            pytest.approx(low), pytest.approx(high))
