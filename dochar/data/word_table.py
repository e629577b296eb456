"""The word table: dochar's one native dataset format, its validator and the page view.

Every importer converts into a word table and everything downstream reads only pages cut from
it, so the rules here are the single contract between sources and the rest of the harness.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from dochar.errors import DocharError

REQUIRED_COLUMNS: tuple[str, ...] = (
    "doc_id", "page", "word_id", "text", "x0", "y0", "x1", "y1", "page_width", "page_height",
)
OPTIONAL_COLUMNS: tuple[str, ...] = ("label", "entity_id", "layout_id", "split")
COORDINATE_COLUMNS: tuple[str, ...] = ("x0", "y0", "x1", "y1", "page_width", "page_height")
BOX_TOLERANCE = 0.5  # page units a box may overhang the page edge (scanner rounding)
LINE_OVERLAP = 0.5   # share of the smaller height two words must overlap by to share a line
PAIR_CELLS = 2_000_000  # word x word cells compared at once when grouping lines


class WordTableError(DocharError):
    """Raised for a word table that cannot be used at all, or any problem in strict mode."""


@dataclass(frozen=True)
class Problem:
    """One located defect: which file, which row (1-based data row), which column, and what."""

    source: str
    doc_id: str | None
    row: int | None
    column: str | None
    message: str

    def __str__(self) -> str:
        where = self.source
        if self.row is not None:
            where += f", row {self.row}"
        if self.column is not None:
            where += f", column '{self.column}'"
        doc = f" (document {self.doc_id})" if self.doc_id is not None else ""
        return f"{where}{doc}: {self.message}"


@dataclass
class ValidationReport:
    """What went in, what is used, what was set aside and why: in = used + reported."""

    table: pd.DataFrame
    problems: list[Problem] = field(default_factory=list)
    documents_in: int = 0
    documents_used: int = 0

    @property
    def documents_reported(self) -> int:
        return self.documents_in - self.documents_used

    def summary(self) -> str:
        return (f"{self.documents_in} documents in, {self.documents_used} used, "
                f"{self.documents_reported} reported ({len(self.problems)} problems)")


def read_word_table(path: str | Path) -> pd.DataFrame:
    """Read a CSV or Parquet word table with text-like columns kept as strings."""
    path = Path(path)
    if not path.exists():
        raise WordTableError(f"{path}: no such word table")
    suffix = path.suffix.lower()
    if suffix == ".parquet":
        frame = pd.read_parquet(path)
    elif suffix in {".csv", ".tsv"}:
        text_columns = {c: "string" for c in ("doc_id", "text", "label", "entity_id",
                                               "layout_id", "split")}
        frame = pd.read_csv(path, sep="\t" if suffix == ".tsv" else ",", dtype=text_columns,
                            keep_default_na=False, na_values={"x0": [""], "y0": [""]})
    else:
        raise WordTableError(f"{path}: unknown word table format '{suffix}' (use .csv or .parquet)")
    frame.attrs["source"] = str(path)
    return frame


def write_word_table(frame: pd.DataFrame, path: str | Path) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    if path.suffix.lower() == ".parquet":
        frame.to_parquet(path, index=False)
    else:
        frame.to_csv(path, index=False)
    return path


def validate_word_table(frame: pd.DataFrame, labels: Sequence[str] | None = None, *,
                        source: str | None = None, strict: bool = False) -> ValidationReport:
    """Check every rule of the format; set aside whole documents that break one.

    A document with any bad row is reported and skipped (never half-used), so downstream code
    can trust every page it sees. ``strict`` turns the first report into a WordTableError.
    """
    source = source or frame.attrs.get("source", "<word table>")
    missing = [c for c in REQUIRED_COLUMNS if c not in frame.columns]
    if missing:
        raise WordTableError(f"{source}: missing required column(s) {missing}; "
                             f"a word table needs {list(REQUIRED_COLUMNS)}")
    frame = frame.reset_index(drop=True).copy()
    frame["doc_id"] = frame["doc_id"].astype("string").fillna("")
    frame["text"] = frame["text"].astype("string").fillna("")
    problems: list[Problem] = []
    bad_rows = np.zeros(len(frame), dtype=bool)

    def flag(mask: np.ndarray, column: str | None, message: str) -> None:
        for index in np.flatnonzero(mask):
            problems.append(Problem(source, str(frame.at[index, "doc_id"]), int(index) + 1,
                                    column, message))
        bad_rows[mask] = True

    flag((frame["doc_id"] == "").to_numpy(), "doc_id", "empty document id")
    numbers = {}
    for column in (*COORDINATE_COLUMNS, "page", "word_id"):
        values = pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float)
        flag(~np.isfinite(values), column, "not a finite number")
        numbers[column] = values
    x0, y0, x1, y1 = (numbers[c] for c in ("x0", "y0", "x1", "y1"))
    width, height = numbers["page_width"], numbers["page_height"]
    with np.errstate(invalid="ignore"):
        flag(x1 < x0, "x1", "x1 is left of x0")
        flag(y1 < y0, "y1", "y1 is above y0")
        flag(~(width > 0), "page_width", "page width must be positive")
        flag(~(height > 0), "page_height", "page height must be positive")
        outside = ((x0 < -BOX_TOLERANCE) | (y0 < -BOX_TOLERANCE)
                   | (x1 > width + BOX_TOLERANCE) | (y1 > height + BOX_TOLERANCE))
        flag(outside & ~bad_rows, "x0", "box lies outside the page")
    duplicated = frame.duplicated(subset=["doc_id", "page", "word_id"], keep="first").to_numpy()
    flag(duplicated, "word_id", "duplicate word_id on this page")
    if labels is not None and "label" in frame.columns:
        allowed = set(labels)
        label_values = frame["label"].astype("string").fillna("")
        flag(~label_values.isin(allowed).to_numpy(), "label",
             f"label outside the configured set {sorted(allowed)}")

    bad_docs = set(frame.loc[bad_rows, "doc_id"])
    documents_in = frame["doc_id"].nunique()
    if strict and problems:
        shown = "\n  ".join(str(p) for p in problems[:20])
        raise WordTableError(f"{len(problems)} problem(s) in {source} (strict mode):\n  {shown}")
    kept = frame.loc[~frame["doc_id"].isin(bad_docs)].copy()
    for column in COORDINATE_COLUMNS:
        kept[column] = pd.to_numeric(kept[column]).astype(float)
    kept["page"] = pd.to_numeric(kept["page"]).astype(int)
    kept["word_id"] = pd.to_numeric(kept["word_id"]).astype(int)
    for column in OPTIONAL_COLUMNS:
        if column in kept.columns:
            kept[column] = kept[column].astype("string").fillna("")
    kept.attrs["source"] = source
    return ValidationReport(kept.reset_index(drop=True), problems, documents_in,
                            kept["doc_id"].nunique())


@dataclass
class Page:
    """One page of one document, as arrays in reading-independent word_id order."""

    doc_id: str
    page: int
    word_ids: np.ndarray          # (n,) int64
    texts: list[str]
    boxes: np.ndarray             # (n, 4) float64: x0, y0, x1, y1 in page units, origin top-left
    width: float
    height: float
    labels: list[str] | None = None
    entity_ids: list[str] | None = None
    layout_id: str | None = None
    split: str | None = None

    def __len__(self) -> int:
        return len(self.texts)

    @property
    def centres(self) -> np.ndarray:
        return np.column_stack([(self.boxes[:, 0] + self.boxes[:, 2]) / 2,
                                (self.boxes[:, 1] + self.boxes[:, 3]) / 2])

    @property
    def key(self) -> str:
        return f"{self.doc_id}#p{self.page}"


def iter_pages(table: pd.DataFrame) -> Iterator[Page]:
    """Cut a validated word table into pages, in a stable order (doc_id, page, word_id)."""
    ordered = table.sort_values(["doc_id", "page", "word_id"], kind="stable")
    for (doc_id, page_no), words in ordered.groupby(["doc_id", "page"], sort=False):
        def column(name: str) -> list[str] | None:
            return words[name].astype(str).tolist() if name in words.columns else None

        layouts = column("layout_id")
        splits = column("split")
        yield Page(
            doc_id=str(doc_id), page=int(page_no),
            word_ids=words["word_id"].to_numpy(dtype=np.int64),
            texts=words["text"].astype(str).tolist(),
            boxes=words[["x0", "y0", "x1", "y1"]].to_numpy(dtype=np.float64),
            width=float(words["page_width"].iloc[0]), height=float(words["page_height"].iloc[0]),
            labels=column("label"), entity_ids=column("entity_id"),
            layout_id=layouts[0] if layouts else None, split=splits[0] if splits else None,
        )


def table_fingerprint(table: pd.DataFrame) -> str:
    """A content hash of a word table: equal tables give equal fingerprints across runs."""
    rows = pd.util.hash_pandas_object(table.sort_index(axis=1), index=False).to_numpy()
    return hashlib.sha256(rows.tobytes()).hexdigest()[:16]


def line_ids(boxes: np.ndarray) -> np.ndarray:
    """Line of each box: the connected components of "y-ranges overlap by at least half the
    smaller height" (a flat box joins a line its y lies within), so a skewed line holds together.
    """
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    n = len(boxes)
    y0, y1 = boxes[:, 1], boxes[:, 3]
    height = y1 - y0
    rows, cols = [np.zeros(0, np.int64)], [np.zeros(0, np.int64)]
    step = max(1, PAIR_CELLS // max(n, 1))
    for start in range(0, n, step):
        block = slice(start, min(n, start + step))
        overlap = np.minimum(y1[block, None], y1[None, :]) - np.maximum(y0[block, None], y0[None, :])
        smaller = np.minimum(height[block, None], height[None, :])
        r, c = np.nonzero((overlap >= 0) & (overlap >= LINE_OVERLAP * smaller))
        rows.append(r + start)
        cols.append(c)
    r, c = np.concatenate(rows), np.concatenate(cols)
    graph = coo_matrix((np.ones(len(r), dtype=np.int8), (r, c)), shape=(n, n))
    return connected_components(graph, directed=False)[1]


def reading_order(boxes: np.ndarray, word_ids: np.ndarray | None = None) -> np.ndarray:
    """Positions of the boxes in reading order: dochar's one definition of it.

    Lines (:func:`line_ids`) are read top to bottom by the mean y of their word centres, words
    within a line left to right by centre x; remaining ties go to the smaller ``word_id`` (the
    position when none is given). Multi-column text is read across the columns, line by line
    (a known limit of this rule).
    """
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    n = len(boxes)
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    ids = np.arange(n) if word_ids is None else np.asarray(word_ids)
    rank = np.empty(n, dtype=np.int64)
    rank[np.argsort(ids, kind="stable")] = np.arange(n)
    centre_x, centre_y = (boxes[:, 0] + boxes[:, 2]) / 2, (boxes[:, 1] + boxes[:, 3]) / 2
    line = line_ids(boxes)
    count = np.bincount(line)
    line_y = np.bincount(line, weights=centre_y) / count
    line_first = np.full(len(count), n, dtype=np.int64)
    np.minimum.at(line_first, line, rank)
    line_pos = np.empty(len(count), np.int64)
    line_pos[np.lexsort((line_first, line_y))] = np.arange(len(count))
    return np.lexsort((rank, centre_x, line_pos[line]))


def line_segments(boxes: np.ndarray, word_ids: np.ndarray | None = None, *,
                  max_gap: float = 1.0) -> np.ndarray:
    """Segment id of each box: a reading-order line cut wherever the horizontal gap between
    neighbouring words exceeds ``max_gap`` times the median word height of the page (an OCR
    engine's text lines stop at column gaps the same way). Ids follow reading order from 0.
    """
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    order = reading_order(boxes, word_ids)
    segment = np.zeros(len(boxes), dtype=np.int64)
    if len(order) < 2:
        return segment
    line = line_ids(boxes)[order]
    gap = boxes[order[1:], 0] - boxes[order[:-1], 2]
    height = float(np.median(boxes[:, 3] - boxes[:, 1]))
    cut = (line[1:] != line[:-1]) | (gap > max_gap * max(height, 1e-9))
    segment[order] = np.concatenate([[0], np.cumsum(cut)])
    return segment
