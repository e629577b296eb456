"""A demo-like report (R-GCN, random forest, per-layout templates on seen and unseen layouts):
its page overlays draw the graph edges their legend lists, since the run keeps the edges of
exactly the pages the report draws (its most wrong test pages); its cost columns say what they
count; its per-layout table marks the families held out of training."""

from __future__ import annotations

import re

import pandas as pd
import pytest

from dochar.report import write_report
from tests.helpers.report_runs import table_cells
from tests.helpers.split_runs import demo_runs, expected_sides


@pytest.fixture(scope="module")
def runs():
    return demo_runs()


def test_every_drawn_page_shows_its_kept_edges(runs, tmp_path):
    html = write_report(runs, tmp_path / "demo.html").read_text()
    blocks = re.findall(r'<div class="overlay" data-doc="([^"]+)" data-page="(\d+)">(.*?)</svg>',
                        html, flags=re.S)
    assert len(blocks) == 3   # the report's default, and the run's overlay_pages default
    # the page drawn first is the best run's: find it by its ranking score
    best = max(runs, key=lambda run: run.metrics["macro_f1"])
    predictions = best.predictions
    wrong = (predictions["label"] != predictions["predicted"]).groupby(
        [predictions["doc_id"], predictions["page"]]).sum()
    # the most wrong pages, recounted here with pandas (ties by document id, then page)
    expected = (wrong.reset_index(name="wrong")
                .sort_values(["wrong", "doc_id", "page"], ascending=[False, True, True])
                .head(3))
    assert [(d, int(p)) for d, p, _ in blocks] == list(zip(expected["doc_id"], expected["page"]))
    for doc_id, page, svg in blocks:
        kept = best.edges[(best.edges["doc_id"] == doc_id) & (best.edges["page"] == int(page))]
        assert len(kept) > 0, (doc_id, page)
        drawn = sum(len(re.findall(r"M[-\d.]+ [-\d.]+L", path))
                    for path in re.findall(r'<path class="edge"[^>]*d="([^"]*)"', svg))
        assert drawn == len(kept)
    legend = re.findall(r"edge: ([^<]+)</span>", html)
    assert legend == sorted(pd.unique(best.edges["relation"].astype(str)))


def test_cost_columns_carry_units_and_sizes_are_not_mixed(runs, tmp_path):
    html = write_report(runs, tmp_path / "demo.html", overlay_pages=0).read_text()
    header, rows = table_cells(html, "leaderboard-table")
    assert {"training time (s)", "speed (test pages/s)"} <= set(header)
    # what each fitted model holds, by kind (common practice: weights of a network, nodes of
    # trees, words a template stores) - each in its own column, never summed under one heading
    unit = {"gnn": "size (network weights)", "baseline": "size (tree nodes)",
            "template": "size (template words)"}
    sizes = [h for h in header if h.startswith("size")]
    assert sorted(sizes) == sorted(unit.values())
    for run in runs:
        row = next(r for r in rows if r[1] == run.name)
        filled = {h: row[header.index(h)] for h in sizes if row[header.index(h)]}
        assert filled == {unit[run.tags["model_kind"]]: f"{int(run.cost['parameters']):,}"}


def test_per_layout_table_marks_the_families_held_out(runs, tmp_path):
    html = write_report(runs, tmp_path / "demo.html", overlay_pages=0).read_text()
    header, rows = table_cells(html, "layout-table")
    test = expected_sides(runs[0])   # from the run's own split table
    side_of = test.groupby("layout_id")["side"].first()
    assert {row[0]: row[header.index("in training")] for row in rows} == side_of.to_dict()
    assert set(side_of) == {"seen", "unseen"}
