"""Record scores per layout side: each side's straight-through rate counts its own documents
only (worked out by hand below from which documents were spoiled)."""

from __future__ import annotations

import pandas as pd
import pytest

from dochar.metrics.record_run import record_evaluation
from dochar.records.shape import RecordShape

SHAPE = RecordShape(("lab_name", "client", "cert_no", "sample_id", "date"),
                    ("analyte", "method", "result", "unit", "limit", "verdict"))


def test_each_side_scores_its_own_documents():
    from data_synth.generator import iter_documents_with_links
    from data_synth.noise import NoiseConfig

    documents = list(iter_documents_with_links(8, seed=5, noise=NoiseConfig(0.0, 0, 0, 0)))
    words = pd.concat([w for w, _ in documents], ignore_index=True)
    links = pd.concat([k for _, k in documents], ignore_index=True)
    words["predicted"], words["probability"] = words["label"], 1.0
    ids = sorted(words["doc_id"].astype(str).unique())
    sides = {doc: ("seen" if i < 4 else "unseen") for i, doc in enumerate(ids)}
    spoiled = ids[4:6]            # two of the four unseen documents lose their certificate number
    for doc in spoiled:
        hit = words.index[(words["doc_id"] == doc) & (words["label"] == "cert_no")]
        assert len(hit) > 0
        words.loc[hit, "predicted"] = "other"

    metrics, _ = record_evaluation(words, SHAPE, links,
                                   {"bootstrap_resamples": 50, "confidence": 0.95}, seed=0,
                                   sides=sides)
    # by hand: seen 4 of 4 right, unseen 2 of 4, all 6 of 8
    assert metrics["records/straight_through"] == pytest.approx(6 / 8)
    assert metrics["records/seen/straight_through"] == pytest.approx(1.0)
    assert metrics["records/unseen/straight_through"] == pytest.approx(2 / 4)
    assert metrics["records/unseen/test_documents"] == 4
    assert "records/unseen/straight_through_low" in metrics


def test_no_sides_no_side_scores():
    from data_synth.generator import iter_documents_with_links
    from data_synth.noise import NoiseConfig

    documents = list(iter_documents_with_links(2, seed=5, noise=NoiseConfig(0.0, 0, 0, 0)))
    words = pd.concat([w for w, _ in documents], ignore_index=True)
    links = pd.concat([k for _, k in documents], ignore_index=True)
    words["predicted"], words["probability"] = words["label"], 1.0
    metrics, _ = record_evaluation(words, SHAPE, links,
                                   {"bootstrap_resamples": 20, "confidence": 0.95}, seed=0)
    assert metrics["records/straight_through"] == 1.0
    assert not any(key.startswith(("records/seen/", "records/unseen/")) for key in metrics)
