"""The word-table validator: every rule names file, row and column; nothing is lost silently."""

from __future__ import annotations

import math

import pandas as pd
import pytest

from dochar.data.word_table import (
    REQUIRED_COLUMNS,
    WordTableError,
    iter_pages,
    read_word_table,
    table_fingerprint,
    validate_word_table,
    write_word_table,
)

LABELS = ["key", "value", "other"]


def table(rows: list[dict]) -> pd.DataFrame:
    base = {"page": 1, "page_width": 100.0, "page_height": 200.0, "label": "other"}
    return pd.DataFrame([{**base, **row} for row in rows])


def word(doc: str, word_id: int, x0: float = 10, y0: float = 10, x1: float = 20,
         y1: float = 15, **extra) -> dict:
    return {"doc_id": doc, "word_id": word_id, "text": f"w{word_id}", "x0": x0, "y0": y0,
            "x1": x1, "y1": y1, **extra}


def test_clean_table_passes_untouched():
    frame = table([word("a", 0), word("a", 1, x0=30, x1=40), word("b", 0)])
    report = validate_word_table(frame, LABELS, source="t.csv")
    assert report.problems == []
    assert (report.documents_in, report.documents_used, report.documents_reported) == (2, 2, 0)
    assert len(report.table) == 3


@pytest.mark.parametrize("bad, column, fragment", [
    ({"x0": "abc"}, "x0", "not a finite number"),
    ({"y1": math.inf}, "y1", "not a finite number"),
    ({"x0": 30, "x1": 20}, "x1", "left of x0"),
    ({"y0": 30, "y1": 20}, "y1", "above y0"),
    ({"x1": 150}, "x1", "outside the page"),
    ({"label": "price"}, "label", "outside the configured set"),
])
def test_each_rule_is_located_and_its_document_skipped(bad, column, fragment):
    frame = table([word("good", 0), word("bad", 0), word("bad", 1, **bad)])
    report = validate_word_table(frame, LABELS, source="words.csv")
    assert len(report.problems) == 1
    problem = report.problems[0]
    assert (problem.source, problem.doc_id, problem.row, problem.column) == \
        ("words.csv", "bad", 3, column)
    assert fragment in problem.message and "words.csv, row 3" in str(problem)
    # documents in = documents used + documents reported
    assert (report.documents_in, report.documents_used, report.documents_reported) == (2, 1, 1)
    assert set(report.table["doc_id"]) == {"good"}


def test_duplicate_word_id_is_reported():
    frame = table([word("a", 0), word("a", 0, x0=40, x1=50)])
    report = validate_word_table(frame, LABELS)
    assert [p.column for p in report.problems] == ["word_id"]
    assert report.documents_used == 0


def test_missing_column_fails_with_names():
    frame = table([word("a", 0)]).drop(columns=["page_height"])
    with pytest.raises(WordTableError, match="page_height"):
        validate_word_table(frame, LABELS, source="x.csv")


def test_strict_mode_raises_with_every_location():
    frame = table([word("a", 0, x0=30, x1=20)])
    with pytest.raises(WordTableError, match=r"row 1, column 'x1'"):
        validate_word_table(frame, LABELS, strict=True)


def test_csv_and_parquet_round_trip_and_pages(tmp_path):
    frame = table([word("a", 1, x0=50, x1=60), word("a", 0), word("b", 0, text="0042")])
    for suffix in (".csv", ".parquet"):
        path = write_word_table(frame, tmp_path / f"words{suffix}")
        back = validate_word_table(read_word_table(path), LABELS).table
        pages = list(iter_pages(back))
        assert [p.key for p in pages] == ["a#p1", "b#p1"]
        assert pages[0].word_ids.tolist() == [0, 1]  # ordered by word_id
        assert pages[1].texts == ["0042"]  # text stays text, leading zeros kept
        assert table_fingerprint(back) == table_fingerprint(
            validate_word_table(read_word_table(path), LABELS).table)


def test_unknown_format_and_missing_file(tmp_path):
    with pytest.raises(WordTableError, match="no such word table"):
        read_word_table(tmp_path / "nope.csv")
    (tmp_path / "w.xlsx").write_text("")
    with pytest.raises(WordTableError, match="unknown word table format"):
        read_word_table(tmp_path / "w.xlsx")


def test_required_columns_are_the_documented_ones():
    assert REQUIRED_COLUMNS == ("doc_id", "page", "word_id", "text", "x0", "y0", "x1", "y1",
                                "page_width", "page_height")
