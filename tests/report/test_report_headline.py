"""The report's opening paragraph under every split protocol, checked against the runs' own
split tables: which documents and layout families it speaks of, and on which side of training.

The runs are real (dochar.experiment on generated certificates): a random forest, the default
reference, and per-layout templates. Documents, families and sides are counted from each run's
``documents`` table (part and layout of every document); differences are recomputed with
scikit-learn's f1_score on the documents of each side.
"""

from __future__ import annotations

import pytest
from sklearn.metrics import f1_score

from dochar.report import write_report
from dochar.runs.bundle import RunBundle
from tests.helpers.report_runs import funsd_runs, table_cells
from tests.helpers.report_verdict import check_verdict
from tests.helpers.split_runs import SPLITS, expected_sides, protocol_runs

# Which sides a protocol's test set must hold, by its definition (dochar/splits/protocols.py
# docstring): held-out protocols test unseen families only, seen_and_unseen both.
DEFINED = {"layout_held_out": {"unseen"}, "layout_kfold": {"unseen"},
           "leave_one_layout_out": {"unseen"}, "inferred_layouts": {"unseen"},
           "seen_and_unseen_layouts": {"seen", "unseen"}}


def _macro_f1(frame) -> float:
    # sklearn.metrics.f1_score(average="macro") over the classes present, as the runs score
    return f1_score(frame["label"], frame["predicted"], average="macro")


# three protocols, one of each kind of test set, in the default suite; the rest marked slow
QUICK_SPLITS = ("random", "layout_held_out", "seen_and_unseen_layouts")


@pytest.mark.parametrize("split", [split if split in QUICK_SPLITS else
                                   pytest.param(split, marks=pytest.mark.slow)
                                   for split in SPLITS])
def test_headline_names_the_documents_and_sides_of_the_split(split, tmp_path):
    runs = protocol_runs(split, tmp_path)
    forest, templates = runs
    html = write_report(runs, tmp_path / "report.html", overlay_pages=0).read_text()
    said = check_verdict(html, runs, reference=forest.name, measure="macro_f1")
    challenger = next(r for r in runs if r.name == said.challenger)
    test = expected_sides(challenger)
    sides = set(test["side"])
    if split in DEFINED:
        assert sides == DEFINED[split]
    assert said.documents == len(test)
    if sides == {"seen", "unseen"}:
        assert said.families is None and list(said.sides) == ["unseen", "seen"]
        _, paired = table_cells(html, "seen-unseen-paired-table")
        row = next(r for r in paired if r[0] == templates.name)
        for n, side in enumerate(("unseen", "seen")):
            docs = test[test["side"] == side]
            documents, families, clause = said.sides[side]
            assert (documents, families) == (len(docs), docs["layout_id"].nunique())
            chosen = [run.predictions[run.predictions["doc_id"].isin(docs.index)]
                      for run in (challenger, forest)]
            assert abs(clause.difference - (_macro_f1(chosen[0]) - _macro_f1(chosen[1]))) \
                <= 5e-4 + 1e-12
            # the section's paired table prints the same numbers (templates minus forest)
            sign = 1 if challenger is templates else -1
            assert float(row[1 + 3 * n]) == pytest.approx(sign * clause.difference, abs=1e-12)
    else:
        (side,) = sides
        assert said.families == test["layout_id"].nunique()
        assert said.scope == f", all {side} in training"
        assert said.sides is None


def test_verdict_names_every_system_the_comparison_leaves_out(funsd_root, tmp_path):
    # A run of a third system (the shallow tree's predictions tagged as an R-GCN) ranks below
    # the pair compared; the paragraph still names it once, with its score recomputed here by
    # sklearn's f1_score; a second run of a system already named is not repeated.
    runs = funsd_runs(funsd_root)
    shallow = next(r for r in runs if r.name == "shallow tree")
    graph = RunBundle(name="graph on forms", labels=shallow.labels,
                      metrics=dict(shallow.metrics), predictions=shallow.predictions,
                      tags={**shallow.tags, "model": "relational"})
    chosen = [*runs, graph]
    html = write_report(chosen, tmp_path / "others.html", overlay_pages=0).read_text()
    said = check_verdict(html, chosen, reference="forest & friends", measure="macro_f1")
    assert said.challenger == "deep tree"
    truth, predicted = graph.predictions["label"], graph.predictions["predicted"]
    documents = graph.predictions["doc_id"].nunique()
    assert said.rest == (f" R-GCN (graph on forms): word macro-F1 "
                         f"{f1_score(truth, predicted, average='macro'):.3f} on all "
                         f"{documents} test documents.")
