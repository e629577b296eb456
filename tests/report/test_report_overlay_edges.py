"""Page overlays of a demo-like report draw the graph edges their legend lists: the run keeps
the edges of exactly the pages the report draws (its most wrong test pages)."""

from __future__ import annotations

import re

import pandas as pd
import pytest

from dochar.report import write_report
from tests.helpers.split_runs import demo_runs


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
