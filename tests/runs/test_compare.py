"""`dochar compare` on two run folders built here, against counts worked out by hand.

Each test document is one line of three words, each its own entity: ``Lot:`` (key), ``page``
(other), ``42`` (value). Run A labels every word right; run B labels ``page`` as ``key``, so
its predicted runs are key {Lot:, page} (wrong) and value {42} (right). The runs were made with
``evaluation.entity_ignore=[]``, so ``other`` entities are scored too (rule of
dochar.metrics.entities). Per document, as (correct, predicted, true) entities:

* A: (3, 3, 3); B: (1, 2, 3): entity F1 of A = 1, of B = 2·1 / (2 + 3) = 0.4, A - B = 0.6.
* with the default ignore list (``other`` not scored) B would be (1, 2, 2): F1 0.5.

Randomisation over the 4 documents (Noreen 1989), all 2^4 swap patterns: swapping a set S of
documents gives A' = 2(12 - 2|S|) / (24 - |S|) and B' = 2(4 + 2|S|) / (20 + |S|): the differences
for |S| = 0..4 are 0.6, 0.298, 0, -0.298, -0.6, so |A' - B'| >= 0.6 for 2 of 16 patterns and the
exact p-value is 2/16 = 0.125. Every document has the same difference, so every paired bootstrap
resample has difference 0.6 too: the interval is [0.6, 0.6] and the bootstrap p-value is
1 / (1 + R) (Davison & Hinkley 1997, sec. 4.2).
"""

from __future__ import annotations

import re

import pandas as pd
import pytest

from dochar.cli import main
from dochar.metrics.seen_unseen import SIDE_COLUMN
from dochar.runs.bundle import RunBundle
from dochar.runs.compare import compare_runs, format_comparison

LABELS = ["key", "value", "other"]
WORDS = [("Lot:", "key", "k"), ("page", "other", "o"), ("42", "value", "v")]


def _bundle(name: str, wrong: dict[str, str]) -> RunBundle:
    rows = []
    for d in range(4):
        for w, (text, label, entity) in enumerate(WORDS):
            rows.append({"doc_id": f"coa-{d}", "page": 1, "word_id": w, "text": text,
                         "x0": 10.0 + 30 * w, "y0": 10.0, "x1": 35.0 + 30 * w, "y1": 20.0,
                         "page_width": 200.0, "page_height": 100.0, "layout_id": "L1",
                         "entity_id": f"{entity}{d}", "label": label,
                         "predicted": wrong.get(text, label), "confidence": 0.9})
    config = {"evaluation": {"entity_ignore": []}, "task": {"name": "word_labels"}}
    return RunBundle(name=name, labels=LABELS, metrics={}, predictions=pd.DataFrame(rows),
                     config=config, run_id=f"run-{name}")


@pytest.fixture(scope="module")
def folders(tmp_path_factory):
    root = tmp_path_factory.mktemp("compare")
    return {name: str(_bundle(name, wrong).save(root / name))
            for name, wrong in (("right", {}), ("again", {}), ("slip", {"page": "key"}))}


def compare(capsys, folders, a: str, b: str, *options: str) -> str:
    assert main(["compare", folders[a], folders[b], "--score", "entity_f1", *options]) == 0
    return capsys.readouterr().out


def test_the_runs_own_entity_ignore_list_decides_what_is_scored(capsys, folders):
    out = compare(capsys, folders, "right", "slip", "--resamples", "100")
    assert "entity_f1 = 1.0000" in out and "entity_f1 = 0.4000" in out   # not 0.5 (other ignored)
    assert "A - B = +0.6000   95% interval [+0.6000, +0.6000]" in out
    # p = 1/101 = 0.0099, written to three decimals as every dochar output writes p
    assert "p = 0.010" in out and "(paired bootstrap, 4 test documents)" in out
    assert out.strip().endswith("verdict: A is better")


def test_the_method_option_chooses_the_test(capsys, folders):
    out = compare(capsys, folders, "right", "slip", "--method", "randomisation",
                  "--resamples", "100")
    assert re.search(r"p = 0\.125 +\(exact randomisation, 4 test documents\)", out), out


def test_identical_runs_have_no_clear_difference(capsys, folders):
    out = compare(capsys, folders, "right", "again", "--resamples", "100")
    # δ = 0 and every resample gives 0: interval [0, 0] holds 0, p = (1 + 100) / 101 = 1
    assert "A - B = +0.0000   95% interval [+0.0000, +0.0000]   p = 1" in out
    assert out.strip().endswith("verdict: no clear difference")
    reversed_out = compare(capsys, folders, "slip", "right", "--resamples", "100")
    assert reversed_out.strip().endswith("verdict: B is better")


# --- compare_runs and format_comparison called directly (the API under the command) ----------

def _slipping(name: str, slipped_docs: set[int], config: dict | None = None) -> RunBundle:
    """Run B of the module docstring, but wrong (``page`` labelled key) only in these documents."""
    bundle = _bundle(name, {})
    rows = bundle.predictions
    slip = rows["doc_id"].isin([f"coa-{d}" for d in slipped_docs]) & (rows["text"] == "page")
    rows.loc[slip, "predicted"] = "key"
    if config is not None:
        bundle.config = config
    return bundle


def test_compare_runs_defaults_to_a_paired_bootstrap_of_2000_resamples():
    # every document has difference 0.6, so the bootstrap p-value is 1 / (1 + R) with the
    # default R = 2000 (Davison & Hinkley 1997, sec. 4.2); a mistyped default method fails
    result = compare_runs(_bundle("right", {}), _bundle("slip", {"page": "key"}),
                          score="entity_f1")
    assert result.method == "bootstrap" and not result.exact
    assert result.p_value == pytest.approx(1 / 2001, abs=1e-12)


def test_the_seed_decides_the_resamples_and_defaults_to_zero():
    # B slips in two of four documents: per-document differences 0.6, 0.6, 0, 0, so the
    # resamples differ from draw to draw and the p-value is a count that depends on the draw
    right, half = _bundle("right", {}), _slipping("half", {0, 1})
    options = dict(score="entity_f1", resamples=500)
    by_seed = {seed: compare_runs(right, half, seed=seed, **options).p_value for seed in (0, 7)}
    assert by_seed[7] == compare_runs(right, half, seed=7, **options).p_value   # reproducible
    assert by_seed[0] != by_seed[7]                                             # seed is used
    assert compare_runs(right, half, **options).p_value == by_seed[0]   # default seed 0 (CLI)


def test_a_run_without_an_evaluation_section_ignores_other_entities():
    # dochar's default entity_ignore is ["other"] (configs/evaluation): B's entities are then
    # key {Lot:, page} (wrong) and value {42} (right) against key, value: F1 = 2·1 / (2 + 2);
    # the ignore list is run A's
    plain = {"task": {"name": "word_labels"}}
    right = _slipping("right", set(), config=plain)
    result = compare_runs(right, _slipping("slip", {0, 1, 2, 3}, config=plain),
                          score="entity_f1", resamples=10)
    assert result.score_a == pytest.approx(1.0) and result.score_b == pytest.approx(0.5)


def test_runs_with_other_label_sets_are_refused_with_the_reason():
    other = _bundle("other", {})
    other.labels = ["key", "value", "other", "date"]
    with pytest.raises(ValueError, match="different label sets; they cannot be compared word "
                                         "for word"):
        compare_runs(_bundle("right", {}), other, score="entity_f1")


def test_runs_without_entity_ids_offer_no_entity_f1():
    # run-of-labels entity F1 needs entity ids (dochar.metrics.evaluate.headline_scorers)
    bare = [_bundle(name, {}) for name in ("a", "b")]
    for bundle in bare:
        bundle.predictions = bundle.predictions.drop(columns="entity_id")
    with pytest.raises(ValueError, match=r"--score 'entity_f1': choose one of "
                                         r"\['macro_f1', 'micro_f1'\]$"):
        compare_runs(*bare, score="entity_f1")


def _tag_run(name: str, tags: list[str]) -> RunBundle:
    """One document per tag row below: ``Lot`` ``number`` ``42`` with true tags B-key I-key
    B-value, predicted ``tags``; the run is an entity_tags run without entity ids."""
    rows = [{"doc_id": f"coa-{d}", "page": 1, "word_id": w, "text": text,
             "x0": 10.0 + 30 * w, "y0": 10.0, "x1": 35.0 + 30 * w, "y1": 20.0,
             "page_width": 200.0, "page_height": 100.0, "layout_id": "L1", "label": truth,
             "predicted": guess, "confidence": 0.9}
            for d in range(3)
            for w, (text, truth, guess) in enumerate(zip(("Lot", "number", "42"),
                                                         ("B-key", "I-key", "B-value"), tags))]
    return RunBundle(name=name, labels=["O", "B-key", "I-key", "B-value", "I-value"], metrics={},
                     predictions=pd.DataFrame(rows), run_id=f"run-{name}",
                     config={"task": {"name": "entity_tags", "scheme": "bio"}})


def test_an_entity_tags_run_is_scored_on_its_chunks():
    # by hand: truth has chunks key [0, 1] and value [2]; B-key B-key B-value predicts key [0],
    # key [1], value [2]: 1 correct of 3 predicted and 2 true, chunk F1 = 2·1 / (3 + 2) = 0.4
    # (seqeval's strict-mode F1 of these tags is the same, Ramshaw & Marcus chunking)
    right = _tag_run("right", ["B-key", "I-key", "B-value"])
    split = _tag_run("split", ["B-key", "B-key", "B-value"])
    result = compare_runs(right, split, resamples=10)       # the headline: entity_f1
    assert result.score_a == pytest.approx(1.0) and result.score_b == pytest.approx(0.4)


def _record_run(name: str, straight: list[int], normalised: list[int]) -> RunBundle:
    """A run carrying per-document record tables, indexed by document like a saved run's."""
    bundle = _bundle(name, {})
    docs = pd.Index([f"coa-{d}" for d in range(4)])
    for table, column in (("records", straight), ("records_normalised", normalised)):
        bundle.tables[table] = pd.DataFrame({
            "straight_through": column, "field_tp": column, "field_fp": [0] * 4,
            "field_fn": [1 - v for v in column], "ted_accuracy": [float(v) for v in column],
            "row_right": column, "row_predicted": [1] * 4, "row_true": [1] * 4}, index=docs)
    return bundle


def test_record_scores_are_compared_on_the_record_tables_both_runs_carry():
    # straight-through rate = share of documents whose record is all right: A 4/4, B 2/4 raw,
    # and 3/4 on normalised values
    a, b = _record_run("a", [1] * 4, [1] * 4), _record_run("b", [1, 0, 1, 0], [1, 1, 1, 0])
    raw = compare_runs(a, b, score="straight_through", resamples=10)
    assert (raw.score_a, raw.score_b) == pytest.approx((1.0, 0.5))
    normalised = compare_runs(a, b, score="normalised/straight_through", resamples=10)
    assert (normalised.score_a, normalised.score_b) == pytest.approx((1.0, 0.75))
    without = _bundle("plain", {})
    for one_sided in ((a, without), (without, a)):
        with pytest.raises(ValueError, match="choose one of"):
            compare_runs(*one_sided, score="straight_through")


def test_the_printout_names_an_approximate_randomisation_and_has_four_lines():
    # 4 documents have 2^4 = 16 swap patterns: with 10 resamples they are drawn, not listed
    a, b = _bundle("right", {}), _bundle("slip", {"page": "key"})
    result = compare_runs(a, b, score="entity_f1", method="randomisation", resamples=10)
    lines = format_comparison(a, b, result, "entity_f1").split("\n")
    assert len(lines) == 4 and lines[0].startswith("A  right") and lines[3] == "verdict: A is better"
    assert "(approximate randomisation, 4 test documents)" in lines[2]


def test_record_scores_are_paired_per_layout_side_when_the_runs_know_the_sides():
    # coa-0 and coa-1 unseen, coa-2 and coa-3 seen (by hand): A is right on all four, B on
    # the unseen two only -> unseen 1.0 against 1.0, seen 1.0 against 0.0, all 1.0 against
    # 0.5; a run without sides offers no side scores
    a, b = _record_run("a", [1] * 4, [1] * 4), _record_run("b", [1, 1, 0, 0], [1] * 4)
    sides = {"coa-0": "unseen", "coa-1": "unseen", "coa-2": "seen", "coa-3": "seen"}
    for bundle in (a, b):
        docs = [f"coa-{d}" for d in range(4)]
        bundle.predictions = pd.concat([bundle.predictions.assign(doc_id=d) for d in docs])
        bundle.predictions[SIDE_COLUMN] = bundle.predictions["doc_id"].map(sides)
    unseen = compare_runs(a, b, score="unseen/straight_through", resamples=10)
    seen = compare_runs(a, b, score="seen/straight_through", resamples=10)
    assert (unseen.score_a, unseen.score_b) == pytest.approx((1.0, 1.0))
    assert (seen.score_a, seen.score_b) == pytest.approx((1.0, 0.0))
    assert compare_runs(a, b, score="straight_through", resamples=10).score_b == pytest.approx(0.5)
    with pytest.raises(ValueError, match="choose one of"):
        compare_runs(_record_run("c", [1] * 4, [1] * 4), b, score="unseen/straight_through")
