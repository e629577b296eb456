"""The links table: located errors, dropped-and-counted links, and the round trip."""

from __future__ import annotations

import pandas as pd
import pytest

from dochar.data.links_table import (
    LinksTableError,
    read_links_table,
    validate_links_table,
    write_links_table,
)

WORDS = pd.DataFrame({"doc_id": ["d1"] * 4 + ["d2"] * 2, "page": [1, 1, 1, 2, 1, 1],
                      "entity_id": ["k1", "v1", "v1", "k9", "k1", "v1"]})


def _links() -> pd.DataFrame:
    return pd.DataFrame({
        "doc_id": ["d1", "d1", "d1", "d1", "", "d2", "d1", "d2"],
        "page": ["1", "1", "x", "1", "1", "1", "2", "1"],
        "source": ["k1", "k1", "k1", "v1", "k1", "k1", "k9", "v1"],
        "target": ["v1", "v1", "v1", "v1", "v1", "nope", "k1", "k1"],
        "kind": ["key_value"] * 8,
    })


def test_located_problems_and_counts(tmp_path):
    path = write_links_table(_links(), tmp_path / "links.csv")
    report = validate_links_table(read_links_table(path), WORDS)
    found = {(p.row, p.column) for p in report.problems}
    # row numbers are 1-based data rows of the file written above
    assert found == {(2, "target"),   # duplicate of row 1
                     (3, "page"),     # 'x' is no page number
                     (4, "target"),   # v1 -> v1, a link to itself
                     (5, "doc_id"),   # empty document id
                     (6, "target"),   # 'nope' is no entity of d2 page 1
                     (7, "target")}   # k1 is no entity of d1 page 2 (k9 is)
    assert all(str(path) in str(p) for p in report.problems)
    assert report.links_in == 8 and report.links_used == 2 and report.links_dropped == 6
    assert report.unknown_entity == 2 and report.duplicates == 1
    kept = report.links[["doc_id", "page", "source", "target"]].values.tolist()
    assert kept == [["d1", 1, "k1", "v1"], ["d2", 1, "v1", "k1"]]


def test_strict_mode_and_missing_columns():
    with pytest.raises(LinksTableError, match="strict mode"):
        validate_links_table(_links(), WORDS, strict=True)
    with pytest.raises(LinksTableError, match=r"missing required column\(s\) \['kind'\]"):
        validate_links_table(_links().drop(columns="kind"), WORDS)


def test_parquet_round_trip(tmp_path):
    links = _links().iloc[[0, 7]]
    path = write_links_table(links, tmp_path / "links.parquet")
    report = validate_links_table(read_links_table(path), WORDS)
    assert report.links_used == 2 and not report.problems
