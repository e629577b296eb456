"""Word placement on an A4 page in points, with text width estimated from character count.

No font is rendered: a word of n characters at size s is taken as n * 0.5 * s wide (bold 0.55),
about the mean advance of a proportional Latin font (common practice for layout estimates), and
its box is one font size tall.
"""

from __future__ import annotations

from dataclasses import dataclass

PAGE_WIDTH = 595.0
PAGE_HEIGHT = 842.0
MARGIN = 42.0
LINE_SPACING = 1.3   # line pitch as a multiple of the font size
_ADVANCE = {False: 0.5, True: 0.55}


@dataclass
class Word:
    page: int
    text: str
    x0: float
    y0: float
    x1: float
    y1: float
    label: str
    entity: str


@dataclass(frozen=True)
class Link:
    """A directed link between two entities of one page, from the generator's own truth."""

    page: int
    source: str
    target: str
    kind: str      # "key_value" (key phrase -> its value), "column_cell" (heading -> cell) or
                   # "row" (a table cell -> the next cell of its row)


def text_width(text: str, size: float, bold: bool = False) -> float:
    return len(text) * _ADVANCE[bold] * size


def line_height(size: float) -> float:
    return LINE_SPACING * size


def wrap(text: str, width: float, size: float, bold: bool = False) -> list[str]:
    """Greedy word wrap; a single word wider than ``width`` keeps its own line."""
    lines: list[str] = []
    current = ""
    for word in text.split():
        candidate = f"{current} {word}" if current else word
        if current and text_width(candidate, size, bold) > width:
            lines.append(current)
            current = word
        else:
            current = candidate
    if current:
        lines.append(current)
    return lines


class Canvas:
    """Collects the words of one document page by page; entity ids count up per document."""

    def __init__(self) -> None:
        self.words: list[Word] = []
        self.page = 1
        self._entities = 0
        self.links: list[Link] = []
        self.left = MARGIN
        self.right = PAGE_WIDTH - MARGIN
        self.top = MARGIN
        self.bottom = PAGE_HEIGHT - MARGIN - 14.0   # room kept for the page-number line

    @property
    def content_width(self) -> float:
        return self.right - self.left

    def entity(self) -> str:
        self._entities += 1
        return f"e{self._entities}"

    def link(self, source: str, target: str, kind: str) -> None:
        """Record that entity ``source`` points to entity ``target`` on the current page."""
        self.links.append(Link(self.page, source, target, kind))

    def new_page(self) -> float:
        self.page += 1
        return self.top

    def line(self, text: str, x: float, y: float, size: float, label: str,
             entity: str | None = None, *, bold: bool = False, align: str = "left",
             page: int | None = None) -> float:
        """Place one line; ``x`` is its left edge, centre or right edge by ``align``.

        Returns the right edge of the placed text.
        """
        entity = entity or self.entity()
        width = text_width(text, size, bold)
        start = {"left": x, "centre": x - width / 2, "right": x - width}[align]
        advance = _ADVANCE[bold] * size
        cursor = start
        for word in text.split(" "):
            if word:
                end = cursor + len(word) * advance
                self.words.append(Word(page or self.page, word, cursor, y, end, y + size,
                                       label, entity))
            cursor += (len(word) + 1) * advance
        return start + width

    def cell(self, text: str, x: float, y: float, width: float, size: float, label: str,
             entity: str | None = None, *, bold: bool = False, align: str = "left") -> int:
        """Place wrapped text in a box of ``width`` (one entity); returns the line count."""
        entity = entity or self.entity()
        lines = wrap(text, width, size, bold)
        anchor = {"left": x, "right": x + width, "centre": x + width / 2}[align]
        for index, line in enumerate(lines):
            self.line(line, anchor, y + index * line_height(size), size, label, entity,
                      bold=bold, align=align)
        return len(lines)

    def extent(self, first_word: int) -> tuple[float, float, float, float]:
        """Bounding box of the words placed since index ``first_word`` on the current page."""
        words = [w for w in self.words[first_word:] if w.page == self.page]
        if not words:
            return (self.left, self.top, self.left, self.top)
        return (min(w.x0 for w in words), min(w.y0 for w in words),
                max(w.x1 for w in words), max(w.y1 for w in words))
