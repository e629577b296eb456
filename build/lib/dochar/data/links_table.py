"""The links table: which entity of a page points to which, beside the word table.

One row per directed link ``source -> target`` between two entities (the word table's
``entity_id`` groups) of one page: a key and its value, a column heading and a cell. Words that
belong together need no table: they share an ``entity_id``. The validator checks the table on
its own (columns, values) and against the validated word table (both ends must be entities of
that page); a bad link is reported with its file, row and column and dropped, never used half.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from dochar.data.files import atomic_write
from dochar.data.word_table import Problem, WordTableError

LINK_COLUMNS: tuple[str, ...] = ("doc_id", "page", "source", "target", "kind")
TEXT_COLUMNS: tuple[str, ...] = ("doc_id", "source", "target", "kind")
ROW_KIND = "row"   # two cells of one table row (a line item); the other kinds point key -> value


class LinksTableError(WordTableError):
    """A links table that cannot be used at all, or any problem in strict mode."""


def empty_links() -> pd.DataFrame:
    frame = pd.DataFrame({c: pd.Series(dtype="string") for c in TEXT_COLUMNS})
    frame["page"] = pd.Series(dtype="int64")
    return frame[list(LINK_COLUMNS)]


@dataclass
class LinksReport:
    """Links in = links used + links dropped; every dropped link has a located problem."""

    links: pd.DataFrame
    problems: list[Problem] = field(default_factory=list)
    links_in: int = 0
    unknown_entity: int = 0      # an end that is no entity of that page in the word table
    duplicates: int = 0

    @property
    def links_used(self) -> int:
        return len(self.links)

    @property
    def links_dropped(self) -> int:
        return self.links_in - self.links_used

    def notes(self) -> dict[str, int]:
        return {"links_in": self.links_in, "links_used": self.links_used,
                "links_dropped": self.links_dropped,
                "links_unknown_entity": self.unknown_entity,
                "links_duplicate": self.duplicates}

    def summary(self) -> str:
        return (f"{self.links_in} links in, {self.links_used} used, {self.links_dropped} "
                f"dropped ({self.unknown_entity} to an unknown entity, {self.duplicates} "
                f"duplicates, {len(self.problems)} problems)")


def read_links_table(path: str | Path) -> pd.DataFrame:
    """Read a CSV/TSV or Parquet links table with the id columns kept as text."""
    path = Path(path)
    if not path.exists():
        raise LinksTableError(f"{path}: no such links table")
    suffix = path.suffix.lower()
    if suffix == ".parquet":
        frame = pd.read_parquet(path)
    elif suffix in {".csv", ".tsv"}:
        frame = pd.read_csv(path, sep="\t" if suffix == ".tsv" else ",",
                            dtype={c: "string" for c in TEXT_COLUMNS}, keep_default_na=False)
    else:
        raise LinksTableError(f"{path}: unknown links table format '{suffix}' "
                              "(use .csv or .parquet)")
    frame.attrs["source"] = str(path)
    return frame


def write_links_table(frame: pd.DataFrame, path: str | Path) -> Path:
    path = Path(path)
    frame = frame[list(LINK_COLUMNS)]
    with atomic_write(path) as scratch:
        if path.suffix.lower() == ".parquet":
            frame.to_parquet(scratch, index=False)
        else:
            frame.to_csv(scratch, index=False)
    return path


def validate_links_table(links: pd.DataFrame, words: pd.DataFrame, *, source: str | None = None,
                         strict: bool = False) -> LinksReport:
    """Keep the links whose every value is usable and whose ends are entities of their page.

    ``words`` is the validated word table; links of documents it set aside count as links to an
    unknown entity, so the count says how many links the run could not use and why.
    """
    source = source or links.attrs.get("source", "<links table>")
    missing = [c for c in LINK_COLUMNS if c not in links.columns]
    if missing:
        raise LinksTableError(f"{source}: missing required column(s) {missing}; "
                              f"a links table needs {list(LINK_COLUMNS)}")
    frame = links.reset_index(drop=True).copy()
    for column in TEXT_COLUMNS:
        frame[column] = frame[column].astype("string").fillna("").str.strip()
    problems: list[Problem] = []
    bad = np.zeros(len(frame), dtype=bool)

    def flag(mask: np.ndarray, column: str, message: str) -> None:
        for index in np.flatnonzero(mask & ~bad):
            problems.append(Problem(source, str(frame.at[index, "doc_id"]) or None,
                                    int(index) + 1, column, message))
        bad[mask] = True

    for column in TEXT_COLUMNS:
        flag((frame[column] == "").to_numpy(), column, f"empty {column}")
    pages = pd.to_numeric(frame["page"], errors="coerce").to_numpy(dtype=float)
    flag(~np.isfinite(pages) | (pages != np.round(pages)), "page", "not an integer page number")
    flag((frame["source"] == frame["target"]).to_numpy(), "target",
         "a link from an entity to itself")
    frame["page"] = np.where(np.isfinite(pages), pages, -1).astype(np.int64)
    known = _entities(words)
    ends_known = {}
    for column in ("source", "target"):
        keys = pd.MultiIndex.from_frame(frame[["doc_id", "page", column]].astype(
            {"doc_id": str, column: str}))
        ends_known[column] = keys.isin(known)
    unknown_before = int(bad.sum())
    for column in ("source", "target"):
        flag(~ends_known[column], column,
             "no entity with this id on this page of the word table")
    unknown = int(bad.sum()) - unknown_before
    duplicate = frame.duplicated(subset=["doc_id", "page", "source", "target"]).to_numpy()
    duplicates = int((duplicate & ~bad).sum())
    flag(duplicate, "target", "duplicate link (already listed above)")
    if strict and problems:
        shown = "\n  ".join(str(p) for p in problems[:20])
        raise LinksTableError(f"{len(problems)} problem(s) in {source} (strict mode):\n  {shown}")
    kept = frame.loc[~bad, list(LINK_COLUMNS)].reset_index(drop=True)
    for column in TEXT_COLUMNS:
        kept[column] = kept[column].astype("string")
    kept.attrs["source"] = source
    return LinksReport(kept, problems, len(frame), unknown, duplicates)


def _entities(words: pd.DataFrame) -> pd.MultiIndex:
    if "entity_id" not in words.columns:
        return pd.MultiIndex.from_tuples([], names=["doc_id", "page", "entity_id"])
    rows = words.loc[words["entity_id"].astype(str) != "", ["doc_id", "page", "entity_id"]]
    rows = rows.drop_duplicates().astype({"doc_id": str, "entity_id": str})
    rows["page"] = rows["page"].astype(np.int64)
    return pd.MultiIndex.from_frame(rows)
