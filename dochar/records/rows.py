"""Table rows from item pieces, and header values written over several lines.

Three ways to find a document's line items:

* **from row links** (a row model's predicted links, or the truth's links of kind ``row``):
  the rows are the connected components of the links between the pieces' groups; a piece no
  link touches is a row of its own.
* **by the layout rule** (no row model), page by page:

  1. *line bands*: pieces sorted by the height of their centre, measured square to the page's
     text lines (:func:`page_slope`: a photographed page held at an angle keeps its lines); a
     piece whose centre lies within half a piece height (the page's median) of the band's first
     centre joins that band.
  2. *continuation lines*: a band directly under the previous row (its top less than one
     piece height below that row's bottom) that fills at most half as many columns as the
     page's fullest band, and whose every piece lies under a cell of its own column in that
     row, is the next line of that row's wrapped cells: each piece is joined to the cell of its
     column. Any other band starts a new row.

  Cells of one column within one row are joined in reading order.
* **by an anchor column** (the shape's ``row_anchor``, e.g. a receipt's item name), page by
  page: the same line bands; a band holding an anchor piece starts a new item when the current
  item has its anchor already, and so does a band holding a value of a column an item holds
  once (the shape's ``once_per_item``: a receipt item's price and unit price) when the current
  item has one already; every other band joins the current item (a receipt's count, unit
  price, price, discount and sub-item lines under their item's name). Bands before the first
  anchor belong to the first item. With the shape's ``line_arithmetic`` (count, unit price and
  amount columns), a band of a count and a unit price without an amount opens the item below
  it when their product is the amount on the next band's anchor line and not the current
  item's (a receipt that prints "2 x 24,000" above the item's name). Cells of one column within
  one item are joined in reading order.

Header values over several lines (:func:`join_header_lines`): a piece joins the value above it
when it has the same label, starts within one height of that value's left edge, lies less than
one height under it, and either nothing stands left of it on its line or its nearest left word
lies clear of (no horizontal overlap with) every word left of the value's first line. So a
wrapped value, whose key column is empty on its later lines, is joined, and two dates stacked
under each other, each with its key beside it, stay two values. Known limit: a value wrapped in
the right column of a two-column header, where the left column has words on both lines, stays
two pieces.
"""

from __future__ import annotations

import re
from collections.abc import Collection, Iterable, Mapping, Sequence
from decimal import Decimal, InvalidOperation

import numpy as np
from scipy.spatial import cKDTree

from dochar.records.normalise import as_amount
from dochar.records.pieces import Value

Row = dict[str, Value]


def _join_cells(pieces: Iterable[Value]) -> Row:
    row: Row = {}
    for piece in pieces:
        row[piece.label] = row[piece.label].join(piece) if piece.label in row else piece
    return row


def _top(row: Row) -> tuple[int, float, float]:
    return (min(v.page for v in row.values()), min(v.box[1] for v in row.values()),
            min(v.box[0] for v in row.values()))


def rows_from_links(pieces: Sequence[Value], links: Iterable[tuple[int, str, str]]) -> list[Row]:
    """Rows as connected components of ``links`` (page, group, group) between pieces' groups."""
    parent = list(range(len(pieces)))

    def find(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    where = {(p.page, p.group): i for i, p in enumerate(pieces) if p.group}
    for page, source, target in links:
        a, b = where.get((page, source)), where.get((page, target))
        if a is not None and b is not None:
            parent[find(a)] = find(b)
    components: dict[int, list[Value]] = {}
    for i, piece in enumerate(pieces):
        components.setdefault(find(i), []).append(piece)
    return sorted((_join_cells(c) for c in components.values()), key=_top)


NEIGHBOURS = 6   # nearest word centres searched for each word's right-hand neighbour
SLOPE_Z = 3.0    # a page is deskewed when its slope is this many standard errors from level


def page_slope(boxes: np.ndarray) -> float:
    """The slope (dy/dx) of a page's text lines: the median over words of the slope from a
    word's centre to its right-hand neighbour's, the nearest of its k nearest centres that starts
    right of its left edge and lies within 0.7 of its height above or below. This is the
    nearest-neighbour angle estimate of O'Gorman's docstrum (IEEE TPAMI 15(11), 1993), using
    within-line neighbours only. 0 when no word has such a neighbour, or when the median lies
    within ``SLOPE_Z`` standard errors of level (standard error of a median from the scaled
    median absolute deviation, common practice), so jittered boxes of a level page stay level."""
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    if len(boxes) < 2:
        return 0.0
    centre = np.c_[(boxes[:, 0] + boxes[:, 2]) / 2, (boxes[:, 1] + boxes[:, 3]) / 2]
    k = min(NEIGHBOURS + 1, len(boxes))
    _, near = cKDTree(centre).query(centre, k=k)
    near = near[:, 1:]
    dx = centre[near, 0] - centre[:, None, 0]
    dy = centre[near, 1] - centre[:, None, 1]
    height = (boxes[:, 3] - boxes[:, 1])[:, None]
    beside = (boxes[near, 0] > boxes[:, None, 0]) & (np.abs(dy) < 0.7 * height) & (dx > 0)
    distance = np.where(beside, np.hypot(dx, dy), np.inf)
    first = np.argmin(distance, axis=1)
    found = np.isfinite(distance[np.arange(len(boxes)), first])
    if not found.any():
        return 0.0
    rows = np.flatnonzero(found)
    slopes = dy[rows, first[rows]] / dx[rows, first[rows]]
    slope = float(np.median(slopes))
    spread = 1.4826 * float(np.median(np.abs(slopes - slope)))
    standard_error = 1.2533 * spread / np.sqrt(len(slopes))
    return slope if abs(slope) > SLOPE_Z * standard_error else 0.0


def levels(boxes: np.ndarray, slope: float) -> np.ndarray:
    """Each box's centre height measured square to text lines of ``slope`` (dy/dx)."""
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    return (boxes[:, 1] + boxes[:, 3]) / 2 - slope * (boxes[:, 0] + boxes[:, 2]) / 2


def line_bands(level: np.ndarray, height: float, left: np.ndarray | None = None
               ) -> list[list[int]]:
    """Indices of boxes in line bands, top to bottom: taken by level (then by ``left`` edge),
    a box whose level lies within half ``height`` of its band's first level joins that band."""
    order = (np.lexsort((left, level)) if left is not None
             else np.argsort(level, kind="stable"))
    bands: list[list[int]] = []
    for i in order.tolist():
        if bands and level[i] - level[bands[-1][0]] < 0.5 * height:
            bands[-1].append(i)
        else:
            bands.append([i])
    return bands


def _bands(pieces: list[Value], height: float, slope: float) -> list[list[Value]]:
    boxes = np.array([piece.box for piece in pieces], dtype=np.float64)
    left = boxes[:, 0]
    return [[pieces[i] for i in sorted(band, key=lambda i: left[i])]
            for band in line_bands(levels(boxes, slope), height, left)]


def _under(piece: Value, cell: Value | None) -> bool:
    return cell is not None and piece.box[0] < cell.box[2] and cell.box[0] < piece.box[2]


def rows_by_layout(pieces: Sequence[Value], slopes: Mapping[int, float] | None = None
                   ) -> list[Row]:
    """Rows of item pieces by the layout rule (module docstring), page by page; ``slopes``
    gives each page's line slope (:func:`page_slope`; 0 where absent)."""
    rows: list[Row] = []
    for page in sorted({p.page for p in pieces}):
        on_page = [p for p in pieces if p.page == page]
        height = float(np.median([p.height for p in on_page]))
        bands = _bands(on_page, height, (slopes or {}).get(page, 0.0))
        fullest = max(len({p.label for p in band}) for band in bands)
        current: Row | None = None
        for band in bands:
            columns = {p.label for p in band}
            continues = (current is not None and len(columns) <= fullest / 2
                         and band[0].box[1] - max(v.box[3] for v in current.values()) < height
                         and all(_under(p, current.get(p.label)) for p in band))
            if continues:
                for piece in band:
                    current[piece.label] = current[piece.label].join(piece)
            else:
                current = _join_cells(band)
                rows.append(current)
    return rows


def rows_by_anchor(pieces: Sequence[Value], anchor: str, once: Collection[str] = (),
                   slopes: Mapping[int, float] | None = None,
                   arithmetic: Sequence[str] = ()) -> list[Row]:
    """Rows of item pieces opened by ``anchor`` pieces, or by a second value of one of the
    ``once`` columns (module docstring), page by page; ``slopes`` as for
    :func:`rows_by_layout`. ``arithmetic`` (count, unit price, amount columns) lets a line of
    count and unit price open the item below it when their product is that item's amount
    (:func:`_opens_item_below`)."""
    rows: list[Row] = []
    for page in sorted({p.page for p in pieces}):
        on_page = [p for p in pieces if p.page == page]
        height = float(np.median([p.height for p in on_page]))
        current: Row | None = None
        bands = _bands(on_page, height, (slopes or {}).get(page, 0.0))
        for k, band in enumerate(bands):
            labels = {p.label for p in band}
            opens = (current is None or (anchor in current and anchor in labels)
                     or any(label in current for label in labels & set(once))
                     or (bool(arithmetic) and k + 1 < len(bands)
                         and _opens_item_below(band, current, bands[k + 1], anchor,
                                               arithmetic)))
            if opens:
                current = {}
                rows.append(current)
            for piece in band:
                current[piece.label] = (current[piece.label].join(piece)
                                        if piece.label in current else piece)
    return rows


def _amount(text: str) -> Decimal | None:
    """An amount, read past a leading "x" or "@" of a unit price ("x4.00", "@9500")."""
    try:
        return Decimal(as_amount(text.strip().lstrip("xX@").strip()))
    except InvalidOperation:
        return None


def _opens_item_below(band: list[Value], current: Row, below: list[Value], anchor: str,
                      arithmetic: Sequence[str]) -> bool:
    """A band without an anchor, holding a count and a unit price and no amount, under an item
    with its anchor: it belongs to the next band's item (a receipt that prints "2 x 24,000"
    above the item's name) when the next band holds an anchor and an amount that count × unit
    price gives, and the current item's amount is not that product. Receipts' own arithmetic
    (count × unit price = amount, common practice) decides, not distance."""
    count, unit_price, amount = arithmetic
    cells = {p.label: p for p in band}
    under = {p.label: p for p in below}
    if (anchor in cells or amount in cells or count not in cells or unit_price not in cells
            or anchor not in current or anchor not in under or amount not in under):
        return False
    number = re.search(r"\d+", cells[count].text)
    unit = _amount(cells[unit_price].text)
    if number is None or unit is None:
        return False
    product = int(number.group()) * unit
    return product == _amount(under[amount].text) and (
        amount not in current or product != _amount(current[amount].text))


def join_header_lines(pieces: Sequence[Value], others: np.ndarray) -> list[Value]:
    """One page's header pieces with the later lines of one value joined to its first (module
    docstring); ``others`` are the boxes (n, 4) of the page's words outside these pieces, whose
    presence just left of a piece makes it a value of its own."""
    joined: list[Value] = []
    for piece in pieces:
        above = next((i for i in range(len(joined) - 1, -1, -1)
                      if _continues(joined[i], piece, others)), None)
        if above is None:
            joined.append(piece)
        else:
            joined[above] = joined[above].join(piece)
    return joined


def _left_of(box: tuple[float, float, float, float], height: float,
             others: np.ndarray) -> np.ndarray:
    """Boxes of the words left of ``box`` on its line."""
    return others[(np.abs(others[:, 1] - box[1]) < 0.5 * height) & (others[:, 2] <= box[0])]


def _continues(above: Value, piece: Value, others: np.ndarray) -> bool:
    height = min(above.height, piece.height)
    if (above.label != piece.label or above.page != piece.page
            or abs(piece.box[0] - above.box[0]) > height
            or not -0.5 * height < piece.box[1] - above.box[3] < height):
        return False
    beside = _left_of(piece.box, height, others)
    if not len(beside):
        return True
    nearest = beside[np.argmax(beside[:, 2])]
    first_line = _left_of(above.box, height, others)
    return not ((first_line[:, 0] < nearest[2]) & (nearest[0] < first_line[:, 2])).any()
