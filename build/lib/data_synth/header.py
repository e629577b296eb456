"""Header of a certificate: laboratory block, title and the key-value fields.

Keys are labelled "key", field values by FIELD_LABELS, addresses and titles "other". Each key
phrase and each value is one entity, so a wrapped value stays one entity over several lines;
each key entity is linked to its value entity (kind ``key_value``).
"""

from __future__ import annotations

from data_synth.canvas import PAGE_WIDTH, Canvas, line_height, text_width
from data_synth.content import Certificate
from data_synth.layouts import FIELD_LABELS, Layout

_GAP = 8.0            # between a key and its value
_COLUMN_GAP = 24.0    # between the two columns of a two-column header
_SIDE_MIN = 200.0     # narrowest region a field block may share with the lab block

Item = tuple[str, str, str, tuple[str, ...]]   # key phrase, value, value label, lines below


def _key(canvas: Canvas, key: str, x: float, y: float, size: float) -> str:
    """Place a key phrase as its own entity; returns the entity id."""
    entity = canvas.entity()
    canvas.line(key, x, y, size, "key", entity)
    return entity


def _value(canvas: Canvas, key_entity: str) -> str:
    """A new entity for the value of ``key_entity``, linked from it."""
    entity = canvas.entity()
    canvas.link(key_entity, entity, "key_value")
    return entity


def _items(cert: Certificate, layout: Layout) -> list[Item]:
    items = []
    for field, phrase in layout.keys:
        extra = cert.client_lines if field == "client" and layout.fields != "strip" else ()
        items.append((phrase + layout.key_suffix, cert.values[field], FIELD_LABELS[field], extra))
    return items


def _lab_block(canvas: Canvas, cert: Certificate, layout: Layout) -> tuple[float, ...]:
    start = len(canvas.words)
    y = canvas.top
    small = 7.5
    if layout.lab_block == "banner":
        centre = PAGE_WIDTH / 2
        canvas.line(cert.lab_name, centre, y, 15.0, "lab_name", bold=True, align="centre")
        y += line_height(15.0)
        for text in cert.lab_lines:
            canvas.line(text, centre, y, small, "other", align="centre")
            y += line_height(small)
    else:
        anchor, align = ((canvas.left, "left") if layout.lab_block == "left"
                         else (canvas.right, "right"))
        canvas.line(cert.lab_name, anchor, y, 12.0, "lab_name", bold=True, align=align)
        y += line_height(12.0)
        for text in cert.lab_lines:
            canvas.line(text, anchor, y, small, "other", align=align)
            y += line_height(small)
    return canvas.extent(start)


def _column(canvas: Canvas, items: list[Item], x: float, y: float, width: float,
            layout: Layout) -> float:
    """One column of fields at ``x``, at most ``width`` wide; returns the y below it."""
    size = layout.font_size
    pitch = line_height(size)
    if layout.key_above:
        key_size = size - 1.5
        for key, value, label, extra in items:
            key_entity = _key(canvas, key, x, y, key_size)
            y += line_height(key_size)
            y += canvas.cell(value, x, y, width, size, label, _value(canvas, key_entity)) * pitch
            for text in extra:
                y += canvas.cell(text, x, y, width, size - 1, "other") * line_height(size - 1)
            y += 4.0
        return y
    key_width = max(text_width(key, size) for key, _, _, _ in items)
    value_x = x + key_width + _GAP
    value_width = max(width - key_width - _GAP, 60.0)
    for key, value, label, extra in items:
        key_entity = _key(canvas, key, x, y, size)
        y += canvas.cell(value, value_x, y, value_width, size, label,
                         _value(canvas, key_entity)) * pitch
        for text in extra:
            lines = canvas.cell(text, value_x, y, value_width, size - 1, "other")
            y += lines * line_height(size - 1)
        y += 2.0
    return y


def _natural_width(items: list[Item], layout: Layout) -> float:
    size = layout.font_size
    values = max(text_width(v, size) for _, v, _, extra in items)
    extras = max((text_width(t, size - 1) for *_, extra in items for t in extra), default=0.0)
    keys = max(text_width(k, size) for k, _, _, _ in items)
    return max(values, extras) + (0.0 if layout.key_above else keys + _GAP)


def _strip(canvas: Canvas, items: list[Item], y: float, layout: Layout) -> float:
    """Form-like grid: four cells a row, key above value in each."""
    size = layout.font_size
    per_row = 4
    cell_width = canvas.content_width / per_row
    for start in range(0, len(items), per_row):
        bottom = y
        for offset, (key, value, label, _) in enumerate(items[start:start + per_row]):
            x = canvas.left + offset * cell_width
            key_entity = _key(canvas, key, x, y, size - 1.5)
            top = y + line_height(size - 1.5)
            lines = canvas.cell(value, x, top, cell_width - 8.0, size, label,
                                _value(canvas, key_entity))
            bottom = max(bottom, top + lines * line_height(size))
        y = bottom + (8.0 if layout.ruled else 4.0)
    return y


def _fields(canvas: Canvas, cert: Certificate, layout: Layout, y: float,
            region: tuple[float, float]) -> float:
    items = _items(cert, layout)
    left, right = region
    width = right - left
    if layout.fields == "strip":
        return _strip(canvas, items, y, layout)
    if layout.fields == "two_column":
        half = (width - _COLUMN_GAP) / 2
        split = (len(items) + 1) // 2
        bottom_left = _column(canvas, items[:split], left, y, half, layout)
        bottom_right = _column(canvas, items[split:], left + half + _COLUMN_GAP, y, half, layout)
        return max(bottom_left, bottom_right)
    natural = _natural_width(items, layout)
    if layout.fields == "left":
        block = min(natural, width)
        return _column(canvas, items, left, y, block, layout)
    shares_row = region != (canvas.left, canvas.right)
    block = min(natural, width if shares_row else width / 2)
    return _column(canvas, items, right - block, y, block, layout)


def _title(canvas: Canvas, layout: Layout, y: float) -> float:
    if layout.lab_block == "banner":
        canvas.line(layout.title, PAGE_WIDTH / 2, y, 13.0, "other", bold=True, align="centre")
    else:
        canvas.line(layout.title, canvas.left, y, 13.0, "other", bold=True)
    return y + line_height(13.0) + 6.0


def render_header(canvas: Canvas, cert: Certificate, layout: Layout) -> float:
    """Place the whole header; returns the y where the body may start."""
    lab = _lab_block(canvas, cert, layout)
    full = (canvas.left, canvas.right)
    beside = (layout.lab_block in ("left", "right") and layout.fields in ("left", "right")
              and layout.lab_block != layout.fields)
    if beside:
        region = ((lab[2] + 16.0, canvas.right) if layout.lab_block == "left"
                  else (canvas.left, lab[0] - 16.0))
        if region[1] - region[0] >= _SIDE_MIN:
            bottom = _fields(canvas, cert, layout, canvas.top, region)
            return _title(canvas, layout, max(lab[3], bottom) + 12.0)
    y = _title(canvas, layout, lab[3] + 12.0)
    return _fields(canvas, cert, layout, y, full) + 8.0

