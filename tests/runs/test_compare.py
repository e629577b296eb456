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
from dochar.runs.bundle import RunBundle

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
