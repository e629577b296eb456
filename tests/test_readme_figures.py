"""The figures README.md and docs/ state about dochar itself are the ones dochar computes today.

Each cheap figure block (between ``<!-- figures: NAME -->`` markers, in README.md or a page of
docs/) is recomputed by ``reports/readme_figures`` and must match its page apart from its date; a change to the
code that moves a figure fails here until ``make readme-figures`` rewrites the block. Where the
figure is a score, the code behind it is also checked against an independent computation.
"""

from __future__ import annotations

import pandas as pd
import pytest

from dochar.data.word_table import reading_order
from dochar.gate.rules import Score
from dochar.metrics.entities import entity_scores
from reports.readme_figures.__main__ import CHEAP, FIGURES, ROOT, Figure, compute, main
from reports.readme_figures.cheap import funsd_split
from reports.readme_figures.gate_spread import seed_spread
from reports.readme_figures.markers import (FigureBlockError, documents, find_blocks,
                                            read_blocks, replace_block, same_figures, wrap_prose)
from tests.helpers import require_dataset

NEEDS_FUNSD = {"funsd-leakage", "funsd-entity-ceiling", "funsd-blank-links"}


@pytest.mark.parametrize("name", CHEAP)
def test_cheap_readme_figure_matches_the_code(name):
    if name in NEEDS_FUNSD:
        require_dataset("funsd")
    blocks = find_blocks(documents(ROOT))
    assert name in blocks, f"neither README.md nor docs/*.md has a figure block {name!r}"
    path, body = blocks[name]
    recomputed = compute(name)
    assert same_figures(body, recomputed), (
        f"{path.name} block {name!r} differs from what the code computes now; run "
        f"`make readme-figures` (python -m reports.readme_figures --only {name}).\n"
        f"{path.name}:\n{body}\nnow:\n{recomputed}")


def test_every_figure_has_one_block_in_the_readme_or_docs():
    assert set(find_blocks(documents(ROOT))) == set(FIGURES)


def test_blocks_are_found_and_rewritten_in_the_page_that_holds_them(tmp_path, monkeypatch):
    # a checkout with the block in docs/, not in the README: --only writes into docs/ and
    # leaves the README byte for byte
    (tmp_path / "docs").mkdir()
    readme = "# r\n<!-- figures: layout-ari -->\nold\n\n<!-- /figures -->\n"
    page = readme.replace("layout-ari", "benchmarks")
    (tmp_path / "README.md").write_text(readme, encoding="utf-8")
    (tmp_path / "docs" / "bench.md").write_text(page, encoding="utf-8")
    monkeypatch.setitem(FIGURES, "benchmarks", Figure(
        lambda: "new figure", cheap=True))
    assert main(["--only", "benchmarks", "--root", str(tmp_path)]) == 0
    assert (tmp_path / "README.md").read_text(encoding="utf-8") == readme
    assert (tmp_path / "docs" / "bench.md").read_text(encoding="utf-8") == \
        "# r\n<!-- figures: benchmarks -->\nnew figure\n\n<!-- /figures -->\n"
    assert main(["--only", "benchmarks", "--check", "--root", str(tmp_path)]) == 0
    (tmp_path / "docs" / "copy.md").write_text(page, encoding="utf-8")
    with pytest.raises(FigureBlockError, match="'benchmarks' appears in both"):
        main(["--only", "benchmarks", "--root", str(tmp_path)])


# --- the blocks themselves ------------------------------------------------------------------

def test_blocks_are_read_and_replaced_in_place():
    text = "a\n<!-- figures: x -->\nold\n\n<!-- /figures -->\nb\n"
    assert read_blocks(text) == {"x": "old\n\n"}
    assert replace_block(text, "x", "new") == \
        "a\n<!-- figures: x -->\nnew\n\n<!-- /figures -->\nb\n"
    with pytest.raises(FigureBlockError, match="found 0"):
        replace_block(text, "y", "new")
    # the second copy's opening marker: 6 lines of the first copy, then line 2 of the second
    with pytest.raises(FigureBlockError, match="line 8: figure block 'x' appears twice"):
        read_blocks(text + text)


def test_the_date_alone_never_makes_a_figure_differ():
    assert same_figures("ARI 0.88 (2026-12-01)\n", "\nARI 0.88 (2027-01-31)\n\n")
    assert not same_figures("ARI 0.88 (2026-12-01)", "ARI 0.87 (2026-12-01)")


def test_prose_is_wrapped_and_tables_kept_whole():
    body = wrap_prose("word " * 30 + "\n\n| a | b |\n|---|---|\n| " + "x" * 120 + " |")
    prose, table = body.split("\n\n")
    assert max(len(line) for line in prose.splitlines()) <= 98
    assert table.splitlines()[2] == "| " + "x" * 120 + " |"


# --- the gate's seed spread, on hand-made scores ------------------------------------------------

def test_seed_spread_takes_the_worst_fall_over_ordered_pairs():
    # worked by hand: pair (0 -> 1): low 0.85 - rerun 0.84 = 0.01 (a fall);
    # pair (1 -> 0): low 0.80 - rerun 0.90 = -0.10 (above the interval); worst = 0.01 at (0, 1).
    # class f1/unit: (0 -> 1): 0.70 - 0.60 = 0.10; (1 -> 0): 0.50 - 0.75 = -0.25.
    # record straight-through: (0 -> 1): 0.40 - 0.30 = 0.10; (1 -> 0): 0.20 - 0.50 = -0.30.
    scores = {0: {"macro_f1": Score(0.90, 0.85, 0.95), "entity_f1": Score(0.80, 0.78, 0.82),
                  "records/straight_through": Score(0.50, 0.40, 0.60),
                  "f1/unit": Score(0.75, 0.70, 0.80, 40)},
              1: {"macro_f1": Score(0.84, 0.80, 0.88), "entity_f1": Score(0.81, 0.79, 0.83),
                  "records/straight_through": Score(0.30, 0.20, 0.40),
                  "f1/unit": Score(0.60, 0.50, 0.70, 35)}}
    worst = seed_spread(scores, ["macro_f1", "entity_f1", "records/straight_through"])
    assert worst["records/straight_through"].value == pytest.approx(0.10)
    assert worst["macro_f1"].value == pytest.approx(0.01)
    assert worst["macro_f1"].where == "baseline seed 0, rerun seed 1"
    # entity: (0 -> 1): 0.78 - 0.81 = -0.03; (1 -> 0): 0.79 - 0.80 = -0.01: never below, shown 0
    assert worst["entity_f1"].value == pytest.approx(-0.01) and worst["entity_f1"].text() == "0.000"
    assert worst["class"].value == pytest.approx(0.10)
    assert worst["class"].where.startswith("unit, baseline seed 0, rerun seed 1, 40 test words")


# --- the entity ceiling against a brute-force count ---------------------------------------------

def brute_force_entity_counts(frame: pd.DataFrame, ignore: set[str]) -> tuple[int, int, int]:
    """(correct, predicted, true) by the rule docs/results-public-data.md states, with plain sets: a predicted
    entity is a maximal run of one label in dochar's reading order on one page, a true entity
    the words of one ``entity_id``; correct = the same page, word set and label."""
    predicted, true = set(), set()
    for key, page in frame.groupby(["doc_id", "page"]):
        words = page.iloc[reading_order(page[["x0", "y0", "x1", "y1"]].to_numpy(float))]
        runs: list[tuple[str, list[int]]] = []
        for word_id, label in zip(words["word_id"], words["predicted"]):
            if runs and runs[-1][0] == label:
                runs[-1][1].append(word_id)
            else:
                runs.append((label, [word_id]))
        predicted |= {(key, frozenset(ids), label) for label, ids in runs if label not in ignore}
        for _, members in page[~page["label"].isin(ignore)].groupby("entity_id"):
            true.add((key, frozenset(members["word_id"]), members["label"].iloc[0]))
    return len(predicted & true), len(predicted), len(true)


def test_funsd_entity_ceiling_agrees_with_a_brute_force_count():
    require_dataset("funsd")
    cfg, table, split = funsd_split()
    test = table[table["doc_id"].isin(split.assignment.test)].copy()
    test["predicted"] = test["label"]
    assert (test["entity_id"].astype(str) != "").all()   # FUNSD: every word is in an entity
    ignore = set(cfg.evaluation.entity_ignore)
    correct, n_pred, n_true = brute_force_entity_counts(test, ignore)
    scores = entity_scores(test, list(cfg.data.labels), ignore=sorted(ignore))
    assert (scores.n_correct, scores.n_pred, scores.n_true) == (correct, n_pred, n_true)
    assert scores.f1 == pytest.approx(2 * correct / (n_pred + n_true))


def test_thread_spread_table_differences_worked_by_hand():
    from reports.readme_figures.gate_spread import thread_spread_text

    one = {"macro_f1": 0.9, "entity_f1": 0.8, "accuracy": 0.95, "f1/a": 0.5, "f1/b": 0.7}
    two = {"macro_f1": 0.89, "entity_f1": 0.81, "accuracy": 0.94, "f1/a": 0.52, "f1/b": 0.6}
    text = thread_spread_text(one, two, {"macro_f1": 0.02, "entity_f1": 0.02, "class": 0.05})
    assert "| macro-F1 | 0.90000 | 0.89000 | -0.0100 | 0.02 |" in text
    assert "| entity F1 | 0.80000 | 0.81000 | +0.0100 | 0.02 |" in text
    assert "| word accuracy | 0.95000 | 0.94000 | -0.0100 | - |" in text
    # |0.6 - 0.7| = 0.1 beats |0.52 - 0.5| = 0.02
    assert "| largest class F1 difference (b) | | | 0.1000 | 0.05 |" in text
