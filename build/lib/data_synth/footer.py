"""Below the table: conclusion, footnotes, signatures and page numbers (all "other", except
the laboratory name repeated in an on-behalf-of signature line, which is "lab_name")."""

from __future__ import annotations

from data_synth.canvas import MARGIN, PAGE_HEIGHT, Canvas, line_height, wrap
from data_synth.content import Certificate
from data_synth.layouts import Layout

_NOTE_SIZE = 7.0


def _notes(canvas: Canvas, cert: Certificate, layout: Layout, y: float) -> float:
    failed = any(row.verdict == layout.verdicts[1] for row in cert.rows)
    conclusion = ("Conclusion: the sample does not meet all stated limits." if failed
                  else "Conclusion: the sample meets all stated limits.")
    notes = [conclusion, *(f"{i}) {text}" for i, text in enumerate(cert.footnotes, 1))]
    pitch = line_height(_NOTE_SIZE)
    needed = sum(len(wrap(n, canvas.content_width, _NOTE_SIZE)) for n in notes) * pitch
    if y + needed > canvas.bottom:
        y = canvas.new_page()
    for index, note in enumerate(notes):
        size = layout.font_size if index == 0 else _NOTE_SIZE
        y += canvas.cell(note, canvas.left, y, canvas.content_width, size, "other") \
            * line_height(size) + (4.0 if index == 0 else 1.0)
    return y


def _signatures(canvas: Canvas, cert: Certificate, layout: Layout, y: float) -> None:
    size = layout.font_size
    pitch = line_height(size)
    lines = 4 + (2 if layout.sign_on_behalf else 0)
    if y + 16.0 + lines * pitch > canvas.bottom:
        y = canvas.new_page()
    y += 16.0
    column = canvas.content_width / 2
    for index, (name, position) in enumerate(cert.signatories):
        x = canvas.left + index * column
        row = y
        canvas.line("Approved by", x, row, size, "other")
        row += 2 * pitch                       # a blank line where the signature goes
        canvas.line(name, x, row, size, "other", bold=True)
        row += pitch
        canvas.line(position, x, row, size, "other")
        if layout.sign_on_behalf:
            row += pitch
            canvas.line("for and on behalf of", x, row, size - 1, "other")
            canvas.line(cert.lab_name, x, row + line_height(size - 1), size - 1, "lab_name")


def render_footer(canvas: Canvas, cert: Certificate, layout: Layout, y: float) -> None:
    y = _notes(canvas, cert, layout, y + 10.0)
    _signatures(canvas, cert, layout, y)
    pages = canvas.page
    for page in range(1, pages + 1):
        canvas.line(f"Page {page} of {pages}", canvas.right, PAGE_HEIGHT - MARGIN, _NOTE_SIZE,
                    "other", align="right", page=page)
