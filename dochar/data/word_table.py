"""The word table: dochar's one native dataset format, its validator and the page view.

Every importer converts into a word table and everything downstream reads only pages cut from
it, so the rules here are the single contract between sources and the rest of the harness.
"""

from __future__ import annotations

import csv
import hashlib
from collections import Counter
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

# the line rule lives in dochar.data.lines; its names stay importable from here
from dochar.data.lines import LINE_OVERLAP, line_ids, line_segments, reading_order  # noqa: F401
from dochar.errors import DocharError

REQUIRED_COLUMNS: tuple[str, ...] = (
    "doc_id", "page", "word_id", "text", "x0", "y0", "x1", "y1", "page_width", "page_height",
)
OPTIONAL_COLUMNS: tuple[str, ...] = ("label", "entity_id", "layout_id", "split", "page_image")
PAGE_IMAGE = "page_image"   # path of the page's image (or PDF); relative to the table's folder
COORDINATE_COLUMNS: tuple[str, ...] = ("x0", "y0", "x1", "y1", "page_width", "page_height")
BOX_TOLERANCE = 0.5  # page units a box may overhang the page edge (scanner rounding)
MAX_PAGE_SIZE = 1e6  # page units; beyond this a size is a unit mix-up, not a page
MAX_ID = 1e9         # largest page number or word id (keeps int64 casts exact)


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
    repairs: Counter = field(default_factory=Counter)

    @property
    def documents_reported(self) -> int:
        return self.documents_in - self.documents_used

    def summary(self) -> str:
        repaired = "".join(f"; repaired: {n} {kind}" for kind, n in sorted(self.repairs.items()))
        return (f"{self.documents_in} documents in, {self.documents_used} used, "
                f"{self.documents_reported} reported ({len(self.problems)} problems){repaired}")


def _check_header(path: Path, header: Sequence[str]) -> None:
    repeated = sorted({c for c in header if list(header).count(c) > 1})
    if repeated:
        raise WordTableError(f"{path}: column(s) {repeated} appear more than once in the header; "
                             f"each column must be named once")


def read_word_table(path: str | Path) -> pd.DataFrame:
    """Read a CSV or Parquet word table with text-like columns kept as strings.

    A file that cannot be read at all (missing, unreadable, malformed, truncated, repeated
    column names) is a WordTableError naming the file; a row that reads but breaks a rule is
    left to the validator, which names its row and column."""
    path = Path(path)
    if not path.exists():
        raise WordTableError(f"{path}: no such word table")
    suffix = path.suffix.lower()
    if suffix not in {".parquet", ".csv", ".tsv"}:
        raise WordTableError(f"{path}: unknown word table format '{suffix}' (use .csv or .parquet)")
    try:
        if suffix == ".parquet":
            import pyarrow.parquet as pq

            parquet = pq.read_table(path)
            _check_header(path, parquet.column_names)
            frame = parquet.to_pandas()
        else:
            sep = "\t" if suffix == ".tsv" else ","
            with path.open(encoding="utf-8", newline="") as handle:
                header = next(csv.reader(handle, delimiter=sep), [])
            _check_header(path, header)
            text_columns = {c: "string" for c in ("doc_id", "text", "label", "entity_id",
                                                   "layout_id", "split", PAGE_IMAGE)}
            frame = pd.read_csv(path, sep=sep, dtype=text_columns, keep_default_na=False,
                                na_values={c: [""] for c in COORDINATE_COLUMNS})
    except WordTableError:
        raise
    except UnicodeDecodeError as error:
        raise WordTableError(f"{path}: not UTF-8 text (byte {error.start}: {error.reason})") \
            from None
    except pd.errors.ParserError as error:
        raise WordTableError(f"{path}: malformed CSV ({' '.join(str(error).split())})") from None
    except pd.errors.EmptyDataError:
        raise WordTableError(f"{path}: empty file (no header row)") from None
    except OSError as error:
        raise WordTableError(f"{path}: cannot read the file ({error.strerror or error})") \
            from None
    except Exception as error:  # pyarrow raises its own types for a damaged Parquet file
        if type(error).__module__.startswith("pyarrow"):
            raise WordTableError(f"{path}: not a readable Parquet file ({error})") from None
        raise
    if PAGE_IMAGE in frame.columns:
        frame[PAGE_IMAGE] = resolve_page_images(frame[PAGE_IMAGE], path.parent)
    frame.attrs["source"] = str(path)
    return frame


def resolve_page_images(values: pd.Series, folder: Path) -> pd.Series:
    """``page_image`` values with relative paths made absolute against ``folder`` (the word
    table's own folder), so a table and its images move together; empty stays empty."""
    values = values.astype("string").fillna("")
    return values.map(lambda v: v if not v or Path(v).is_absolute() else str(folder / v)
                      ).astype("string")


TABLE_SUFFIXES = (".parquet", ".csv")   # what write_word_table writes (Parquet, else CSV)


def table_name_problem(path: str | Path, option: str) -> str | None:
    """Why ``path`` (given as ``option``) cannot name a written table, or None: a command
    checks its output names before any work, with the same rule the writer applies."""
    if Path(path).suffix.lower() in TABLE_SUFFIXES:
        return None
    return f"{option} {path}: use a {' or '.join(TABLE_SUFFIXES)} file name"


def write_word_table(frame: pd.DataFrame, path: str | Path) -> Path:
    """Write then rename, so a reader never finds half a table under the final name."""
    from dochar.data.files import atomic_write

    path = Path(path)
    if (problem := table_name_problem(path, "table file")) is not None:
        raise ValueError(problem)
    with atomic_write(path) as scratch:
        if path.suffix.lower() == ".parquet":
            frame.to_parquet(scratch, index=False)
        else:
            frame.to_csv(scratch, index=False)
    return path


def _integers(values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(fractional, negative, too large) masks of finite values that must be whole numbers."""
    with np.errstate(invalid="ignore"):
        finite = np.isfinite(values)
        return (finite & (values != np.floor(values)), finite & (values < 0),
                finite & (np.abs(values) > MAX_ID))


def validate_word_table(frame: pd.DataFrame, labels: Sequence[str] | None = None, *,
                        source: str | None = None, strict: bool = False,
                        repair: str | None = None,
                        clip_tolerance: float = 0.01) -> ValidationReport:
    """Check every rule of the format; set aside whole documents that break one.

    A document with any bad row is reported and skipped (never half-used), so downstream code
    can trust every page it sees. ``strict`` turns the first report into a WordTableError.
    ``repair="clip"`` clips boxes that overhang their page by at most ``clip_tolerance`` of
    its width (x) or height (y), counted in ``repairs``; boxes farther out are reported.
    """
    source = source or frame.attrs.get("source", "<word table>")
    if repair not in (None, "clip"):
        raise WordTableError(f"repair={repair!r}: expected None or 'clip'")
    repeated = sorted({str(c) for c in frame.columns[frame.columns.duplicated()]})
    if repeated:
        raise WordTableError(f"{source}: column(s) {repeated} appear more than once")
    missing = [c for c in REQUIRED_COLUMNS if c not in frame.columns]
    if missing:
        raise WordTableError(f"{source}: missing required column(s) {missing}; "
                             f"a word table needs {list(REQUIRED_COLUMNS)}")
    frame = frame.reset_index(drop=True).copy()
    frame["doc_id"] = frame["doc_id"].astype("string").fillna("")
    frame["text"] = frame["text"].astype("string").fillna("")
    problems: list[Problem] = []
    repairs: Counter = Counter()
    bad_rows = np.zeros(len(frame), dtype=bool)

    def flag(mask: np.ndarray, column: str | None, message) -> None:
        for index in np.flatnonzero(mask):
            text = message(index) if callable(message) else message
            problems.append(Problem(source, str(frame.at[index, "doc_id"]), int(index) + 1,
                                    column, text))
        bad_rows[mask] = True

    flag((frame["doc_id"].str.strip() == "").to_numpy(), "doc_id", "empty document id")
    numbers = {}
    for column in (*COORDINATE_COLUMNS, "page", "word_id"):
        values = pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float)
        raw = frame[column].to_numpy()
        flag(~np.isfinite(values), column, lambda i, raw=raw: (
            f"{raw[i]!r}" if isinstance(raw[i], str) else f"{raw[i]}") + " is not a finite number")
        numbers[column] = values
    for column in ("page", "word_id"):
        fractional, negative, large = _integers(numbers[column])
        values = numbers[column]
        flag(fractional, column, lambda i, v=values: f"{v[i]:g} is not a whole number")
        flag(negative & ~fractional, column, lambda i, v=values: f"{v[i]:g} is negative")
        flag(large & ~negative, column, f"larger than {MAX_ID:.0e}")
    x0, y0, x1, y1 = (numbers[c] for c in ("x0", "y0", "x1", "y1"))
    width, height = numbers["page_width"], numbers["page_height"]
    readable = ~bad_rows.copy()     # later rules only judge rows whose numbers read
    with np.errstate(invalid="ignore"):
        flag((x1 < x0) & readable, "x1", lambda i: f"x1 {x1[i]:g} is left of x0 {x0[i]:g}")
        flag((y1 < y0) & readable, "y1", lambda i: f"y1 {y1[i]:g} is above y0 {y0[i]:g}")
        for column, size in (("page_width", width), ("page_height", height)):
            flag(~(size > 0), column, "page size must be positive")
            flag(size > MAX_PAGE_SIZE, column,
                 lambda i, s=size: f"{s[i]:g} is larger than {MAX_PAGE_SIZE:.0e} page units")
        _check_page_sizes(frame, numbers, flag)
        _check_page_images(frame, numbers["page"], flag)
        if repair == "clip":
            _clip_boxes(frame, numbers, bad_rows, clip_tolerance, repairs)
            x0, y0, x1, y1 = (numbers[c] for c in ("x0", "y0", "x1", "y1"))
        ok = ~bad_rows
        sides = (("x0", x0 < -BOX_TOLERANCE, "left of the page (x < 0)"),
                 ("y0", y0 < -BOX_TOLERANCE, "above the page (y < 0)"),
                 ("x1", x1 > width + BOX_TOLERANCE, "right of the page (x > page_width)"),
                 ("y1", y1 > height + BOX_TOLERANCE, "below the page (y > page_height)"))
        hint = "" if repair else (f" (data.repair=clip clips overhangs of up to "
                                  f"{clip_tolerance:g} of the page)")
        outside = np.zeros(len(frame), dtype=bool)
        for column, mask, where in sides:
            flag(mask & ok & ~outside, column, lambda i, c=column, w=where: (
                f"box lies outside the page: {c} {numbers[c][i]:g} is {w}{hint}"))
            outside |= mask & ok
    keys = pd.DataFrame({"doc_id": frame["doc_id"], "page": numbers["page"],
                         "word_id": numbers["word_id"]})
    duplicated = keys.duplicated(keep="first").to_numpy() & ~bad_rows
    flag(duplicated, "word_id", lambda i: f"duplicate word_id {numbers['word_id'][i]:g} on "
                                          f"page {numbers['page'][i]:g}")
    if labels is not None and "label" in frame.columns:
        allowed = set(labels)
        label_values = frame["label"].astype("string").fillna("")
        flag(~label_values.isin(allowed).to_numpy(), "label",
             lambda i: f"label {label_values[i]!r} outside the configured set {sorted(allowed)}")

    bad_docs = set(frame.loc[bad_rows, "doc_id"])
    documents_in = frame["doc_id"].nunique()
    if strict and problems:
        shown = "\n  ".join(str(p) for p in problems[:20])
        raise WordTableError(f"{len(problems)} problem(s) in {source} (strict mode):\n  {shown}")
    keep = ~frame["doc_id"].isin(bad_docs).to_numpy()
    kept = frame.loc[keep].copy()
    for column in COORDINATE_COLUMNS:
        kept[column] = numbers[column][keep]
    kept["page"] = numbers["page"][keep].astype(np.int64)
    kept["word_id"] = numbers["word_id"][keep].astype(np.int64)
    for column in OPTIONAL_COLUMNS:
        if column in kept.columns:
            kept[column] = kept[column].astype("string").fillna("")
    kept.attrs["source"] = source
    return ValidationReport(kept.reset_index(drop=True), problems, documents_in,
                            kept["doc_id"].nunique(), repairs)


def _check_page_sizes(frame: pd.DataFrame, numbers: dict[str, np.ndarray], flag) -> None:
    """Every row of a page must give the same page size (the page's first row sets it)."""
    for column in ("page_width", "page_height"):
        values = pd.Series(numbers[column])
        first = values.groupby([frame["doc_id"], pd.Series(numbers["page"])],
                               dropna=False).transform("first").to_numpy()
        with np.errstate(invalid="ignore"):
            differs = np.isfinite(first) & np.isfinite(values.to_numpy()) & \
                (values.to_numpy() != first)
        flag(differs, column, lambda i, v=values, f=first: (
            f"{column} {v[i]:g} differs from {f[i]:g} on an earlier row of this page"))


def _check_page_images(frame: pd.DataFrame, pages: np.ndarray, flag) -> None:
    """One ``page_image`` per page: every row of a page repeats its first row's value."""
    if PAGE_IMAGE not in frame.columns:
        return
    values = frame[PAGE_IMAGE].astype("string").fillna("")
    first = values.groupby([frame["doc_id"], pd.Series(pages)], dropna=False).transform("first")
    differs = (values != first).to_numpy(dtype=bool)
    flag(differs, PAGE_IMAGE, lambda i: (
        f"page {pages[i]:g}: page_image {values[i]!r} differs from {first[i]!r} on an earlier "
        f"row of this page (one image per page)"))


def _clip_boxes(frame: pd.DataFrame, numbers: dict[str, np.ndarray], bad_rows: np.ndarray,
                tolerance: float, repairs: Counter) -> None:
    """Clip boxes that overhang the page by no more than ``tolerance`` of its size (counted)."""
    x0, y0, x1, y1 = (numbers[c].copy() for c in ("x0", "y0", "x1", "y1"))
    width, height = numbers["page_width"], numbers["page_height"]
    reach_x, reach_y = tolerance * width, tolerance * height
    overhang = (x0 < 0) | (y0 < 0) | (x1 > width) | (y1 > height)
    within = ((x0 >= -reach_x) & (y0 >= -reach_y) & (x1 <= width + reach_x)
              & (y1 <= height + reach_y))
    clipped = [np.clip(x0, 0, width), np.clip(y0, 0, height), np.clip(x1, 0, width),
               np.clip(y1, 0, height)]
    keeps_area = (clipped[2] > clipped[0]) | (x1 == x0)
    keeps_area &= (clipped[3] > clipped[1]) | (y1 == y0)
    chosen = overhang & within & keeps_area & ~bad_rows
    for column, values in zip(("x0", "y0", "x1", "y1"), clipped):
        numbers[column] = np.where(chosen, values, numbers[column])
    if chosen.any():
        repairs["boxes clipped to the page"] += int(chosen.sum())


def unusable_boxes(boxes: np.ndarray) -> np.ndarray:
    """Rows no stage can use: a non-finite coordinate, or x1 < x0 / y1 < y0. The validator
    reports each such row by column; later stages refuse pages built around it."""
    boxes = np.asarray(boxes, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        return (~np.isfinite(boxes).all(axis=1) | (boxes[:, 2] < boxes[:, 0])
                | (boxes[:, 3] < boxes[:, 1]))


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
    image: str | None = None      # the page image's path (``page_image``), None when unknown

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
    """Cut a validated word table into pages, in a stable order (doc_id, page, word_id).

    Each column is converted once for the whole table and sliced per page: a page costs a few
    slices, not a sub-frame (prediction reads thousands of pages a second)."""
    ordered = table.sort_values(["doc_id", "page", "word_id"], kind="stable")
    codes = ordered.groupby(["doc_id", "page"], sort=False).ngroup().fillna(-1).to_numpy(np.int64)
    starts = np.flatnonzero(np.diff(codes, prepend=-2))    # pages are contiguous once sorted
    ends = np.append(starts[1:], len(codes))

    def column(name: str) -> list[str] | None:
        return ordered[name].astype(str).tolist() if name in ordered.columns else None

    doc_ids, page_numbers = ordered["doc_id"].to_numpy(), ordered["page"].to_numpy()
    word_ids = ordered["word_id"].to_numpy(dtype=np.int64)
    texts = ordered["text"].astype(str).tolist()
    boxes = ordered[["x0", "y0", "x1", "y1"]].to_numpy(dtype=np.float64)
    widths, heights = ordered["page_width"].to_numpy(), ordered["page_height"].to_numpy()
    labels, entity_ids = column("label"), column("entity_id")
    layouts, splits, images = column("layout_id"), column("split"), column(PAGE_IMAGE)
    for start, end in zip(starts, ends):
        if codes[start] < 0:                             # a missing doc_id or page: no page
            continue
        yield Page(
            doc_id=str(doc_ids[start]), page=int(page_numbers[start]),
            word_ids=word_ids[start:end].copy(), texts=texts[start:end],
            boxes=boxes[start:end].copy(), width=float(widths[start]),
            height=float(heights[start]),
            labels=None if labels is None else labels[start:end],
            entity_ids=None if entity_ids is None else entity_ids[start:end],
            layout_id=layouts[start] if layouts else None,
            split=splits[start] if splits else None,
            image=(images[start] or None) if images else None,
        )


def table_fingerprint(table: pd.DataFrame) -> str:
    """A content hash of a word table: equal tables give equal fingerprints across runs."""
    rows = pd.util.hash_pandas_object(table.sort_index(axis=1), index=False).to_numpy()
    return hashlib.sha256(rows.tobytes()).hexdigest()[:16]
