"""The table of tested parameters, spilling to a new page (heading repeated) when it runs out.

Every cell is one entity labelled by its column; heading cells are "column_header", and each
heading is linked to every cell below it on its page (kind ``column_cell``), and each cell of a
row to the next cell of that row (kind ``row``: the row is their chain). Column
widths follow content, except that the analyte column is capped by the layout, so long analyte
names wrap onto a second line where the family has a narrow analyte column.
"""

from __future__ import annotations

from data_synth.canvas import Canvas, line_height, text_width, wrap
from data_synth.content import Certificate
from data_synth.layouts import Layout

_GAP = 10.0          # least space between two columns
_MAX_EXTRA_GAP = 30.0
_SHRINK_ORDER = ("analyte", "limit", "method", "verdict", "result", "unit")


def _longest_word(texts: list[str], size: float, bold: bool = False) -> float:
    return max(text_width(word, size, bold) for text in texts for word in text.split())


def _widths(headings: list[str], cells: list[list[str]], layout: Layout,
            available: float) -> tuple[list[float], float]:
    """Column widths and the gap between columns for this table."""
    size = layout.font_size
    natural, minimum = [], []
    for index, kind in enumerate(layout.columns):
        column = [row[index] for row in cells]
        least = max(_longest_word(column, size), _longest_word([headings[index]], size, True))
        width = max(max(text_width(t, size) for t in column),
                    text_width(headings[index], size, True))
        if kind == "analyte":
            width = min(width, max(layout.analyte_max_width, least))
        natural.append(width)
        minimum.append(least)
    gaps = _GAP * (len(natural) - 1)
    excess = sum(natural) + gaps - available
    for kind in _SHRINK_ORDER:
        if excess <= 0:
            break
        if kind in layout.columns:
            index = layout.columns.index(kind)
            cut = min(excess, natural[index] - minimum[index])
            natural[index] -= cut
            excess -= cut
    spare = max(-excess, 0.0)
    return natural, _GAP + min(spare / max(len(natural) - 1, 1), _MAX_EXTRA_GAP)


def _row(canvas: Canvas, texts: list[str], labels: list[str], xs: list[float],
         widths: list[float], y: float, layout: Layout, bold: bool,
         headings: list[str] | None = None) -> list[str]:
    """Place one row of cells; returns their entity ids. With ``headings`` (the entity ids of
    this page's heading cells) each cell is linked from its column's heading and from the cell
    left of it in the row."""
    entities = []
    for index, (text, label, x, width, kind) in enumerate(zip(texts, labels, xs, widths,
                                                              layout.columns)):
        align = "right" if kind == "result" and layout.result_right and not bold else "left"
        entity = canvas.entity()
        if headings is not None:
            canvas.link(headings[index], entity, "column_cell")
        canvas.cell(text, x, y, width, layout.font_size, label, entity, bold=bold, align=align)
        if headings is not None and entities:
            canvas.link(entities[-1], entity, "row")
        entities.append(entity)
    return entities


def _height(texts: list[str], widths: list[float], size: float, bold: bool) -> float:
    lines = max(len(wrap(t, w, size, bold)) for t, w in zip(texts, widths))
    return lines * line_height(size)


def render_table(canvas: Canvas, cert: Certificate, layout: Layout, y: float) -> float:
    """Place caption, heading and rows from ``y``; returns the y below the table."""
    size = layout.font_size
    headings = list(layout.headers)
    if layout.unit_in_header:
        index = layout.columns.index("result")
        headings[index] = f"{headings[index]} ({cert.table_unit})"
    cells = [[getattr(row, kind) for kind in layout.columns] for row in cert.rows]
    widths, gap = _widths(headings, cells, layout, canvas.content_width)
    xs = [canvas.left + sum(widths[:i]) + gap * i for i in range(len(widths))]
    pad = 5.0 if layout.ruled else 2.0
    caption = "Results of analysis" if layout.ruled else "Test results"
    heading_height = _height(headings, widths, size, True) + pad

    heading_entities: list[str] = []

    def heading(y: float, text: str) -> float:
        canvas.line(text, canvas.left, y, size + 1, "other", bold=True)
        y += line_height(size + 1) + 2.0
        heading_entities[:] = _row(canvas, headings, ["column_header"] * len(headings), xs,
                                   widths, y, layout, True)
        return y + heading_height + pad

    if y + line_height(size + 1) + heading_height + 3 * line_height(size) > canvas.bottom:
        y = canvas.new_page()
    y = heading(y, caption)
    for texts in cells:
        height = _height(texts, widths, size, False) + pad
        if y + height > canvas.bottom:
            y = heading(canvas.new_page(), f"{caption} (continued)")
        _row(canvas, texts, list(layout.columns), xs, widths, y, layout, False, heading_entities)
        y += height
    return y
