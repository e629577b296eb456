"""What every importer shares: located problems, counted repairs and the rows of one page.

An importer never raises for one bad file, page or element: it records an ``ImportProblem``
naming the file, the page and the element, skips that part, and goes on. Repairs that keep a
word (a box clipped to its page, corners swapped) or drop one (no text) are counted by kind, so
``words read = words kept + words dropped`` can be checked in every summary.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

WORD_COLUMNS: tuple[str, ...] = ("doc_id", "page", "word_id", "text", "x0", "y0", "x1", "y1",
                                 "page_width", "page_height")


@dataclass(frozen=True)
class ImportProblem:
    """One thing that could not be read, and where: file, page (1-based), element."""

    source: str
    message: str
    page: int | None = None
    element: str | None = None

    def __str__(self) -> str:
        where = self.source
        if self.page is not None:
            where += f", page {self.page}"
        if self.element is not None:
            where += f", {self.element}"
        return f"{where}: {self.message}"


@dataclass
class ImportSummary:
    """Files, pages and words read; repairs by kind; everything skipped, with its reason; the
    links the files carried (form JSON's ``linking``), as rows of the links table."""

    files: int = 0
    pages: int = 0
    words_read: int = 0
    words_kept: int = 0
    repairs: Counter = field(default_factory=Counter)
    dropped: Counter = field(default_factory=Counter)
    kept_as_given: Counter = field(default_factory=Counter)   # e.g. blank words, when asked to
    problems: list[ImportProblem] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    links: list[dict] = field(default_factory=list)
    transfer: object | None = None   # the label transfer's report, when labels were moved

    def problem(self, source: str | Path, message: str, page: int | None = None,
                element: str | None = None) -> None:
        self.problems.append(ImportProblem(str(source), message, page, element))

    def links_frame(self):
        """The links read, as a links table (empty when the files carried none)."""
        import pandas as pd

        from dochar.data.links_table import LINK_COLUMNS, empty_links

        if not self.links:
            return empty_links()
        return pd.DataFrame(self.links, columns=list(LINK_COLUMNS))

    def summary(self) -> str:
        """Everything :meth:`lines` says, on one line (for a log)."""
        return "; ".join(self.lines())

    def lines(self) -> list[str]:
        lines = [f"{self.files} files, {self.pages} pages, {self.words_read} words read, "
                 f"{self.words_kept} kept"]
        for kind, count in sorted(self.repairs.items()):
            lines.append(f"repaired: {count} {kind}")
        for kind, count in sorted(self.dropped.items()):
            lines.append(f"dropped: {count} {kind}")
        for kind, count in sorted(self.kept_as_given.items()):
            lines.append(f"kept as given: {count} {kind}")
        lines += [f"note: {note}" for note in self.notes]
        lines += [f"skipped: {problem}" for problem in self.problems]
        if self.transfer is not None:
            lines += self.transfer.lines()
        return lines


def element_name(element) -> str:
    """``<String ID="s3"> at line 14``: how a problem names an XML element."""
    tag = element.tag.split("}")[-1] if isinstance(element.tag, str) else "element"
    ident = element.get("ID") or element.get("id")
    label = f"<{tag} id={ident!r}>" if ident else f"<{tag}>"
    return f"{label} at line {element.sourceline}" if element.sourceline else label


def inside_folder(folder: Path, name: str) -> Path | None:
    """A file named inside an input file, only if it stays inside that file's folder."""
    candidate = Path(name)
    if candidate.is_absolute():
        return None
    resolved = (folder / candidate).resolve()
    return resolved if resolved.is_relative_to(folder.resolve()) else None


class PageWords:
    """The rows of one page, with the shared repairs applied as words are added."""

    def __init__(self, summary: ImportSummary, source: str | Path, doc_id: str, page: int,
                 width: float, height: float) -> None:
        self.summary, self.source = summary, str(source)
        self.doc_id, self.page, self.width, self.height = doc_id, page, width, height
        self.rows: list[dict] = []
        summary.pages += 1

    def add(self, text: str, x0: float, y0: float, x1: float, y1: float, *,
            confidence: float | None = None, element: str | None = None) -> None:
        self.summary.words_read += 1
        text = " ".join(str(text).split())
        if not text:
            self.summary.dropped["words without text"] += 1
            return
        if not all(math.isfinite(v) for v in (x0, y0, x1, y1)):
            self.summary.problem(self.source, "box is not four finite numbers", self.page,
                                 element)
            self.summary.dropped["words with an unreadable box"] += 1
            return
        if x1 < x0 or y1 < y0:
            self.summary.repairs["boxes with swapped corners put in order"] += 1
            x0, x1 = sorted((x0, x1))
            y0, y1 = sorted((y0, y1))
        clipped = (min(max(x0, 0.0), self.width), min(max(y0, 0.0), self.height),
                   min(max(x1, 0.0), self.width), min(max(y1, 0.0), self.height))
        if clipped != (x0, y0, x1, y1):
            if clipped[2] <= clipped[0] or clipped[3] <= clipped[1]:
                self.summary.dropped["words whose box lies outside the page"] += 1
                return
            self.summary.repairs["boxes clipped to the page"] += 1
        row = {"doc_id": self.doc_id, "page": self.page, "word_id": len(self.rows),
               "text": text, "x0": clipped[0], "y0": clipped[1], "x1": clipped[2],
               "y1": clipped[3], "page_width": self.width, "page_height": self.height}
        if confidence is not None:
            row["confidence"] = confidence
        self.rows.append(row)
        self.summary.words_kept += 1


def page_size_ok(summary: ImportSummary, source: str | Path, page: int, width: float,
                 height: float, element: str | None = None) -> bool:
    if math.isfinite(width) and math.isfinite(height) and width > 0 and height > 0:
        return True
    summary.problem(source, f"page size {width} x {height} is not positive; page skipped",
                    page, element)
    return False


def parse_xml(path: Path, summary: ImportSummary):
    """The root element, or None with the parser's line and column recorded as a problem.

    Entities are not resolved and nothing is fetched from the network (no XXE)."""
    from lxml import etree

    parser = etree.XMLParser(resolve_entities=False, no_network=True, load_dtd=False)
    try:
        return etree.parse(str(path), parser).getroot()
    except etree.XMLSyntaxError as error:
        line, column = error.position
        summary.problem(path, f"malformed XML ({error.msg}); file skipped",
                        element=f"line {line}, column {column}")
    except OSError as error:
        summary.problem(path, f"cannot read the file ({error}); file skipped")
    return None
