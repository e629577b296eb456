"""hOCR (the open OCR output format, hOCR 1.2 spec: kba.github.io/hocr-spec/1.2/) into word rows.

Pages are the ``ocr_page`` elements in document order (page 1, 2, ...); words are their
``ocrx_word`` descendants. Properties come from the ``title`` attribute: ``bbox x0 y0 x1 y1``
(pixels, origin top-left), ``x_wconf`` (0-100, kept as ``confidence`` on a 0-1 scale). The page
size is the ``ocr_page`` bbox; without one, the size of the page's ``image`` (which must lie
inside the hOCR file's folder), else the extent of its words (a counted repair).

The file must be well-formed XML (XHTML, as OCR engines write it); a malformed or truncated
file is reported with the parser's line and column and skipped.
"""

from __future__ import annotations

import re
from pathlib import Path

from dochar.data.importers.base import (
    ImportSummary,
    PageWords,
    element_name,
    inside_folder,
    page_size_ok,
    parse_xml,
)

_PROPERTY = re.compile(r'\s*([A-Za-z_][\w]*)\s+((?:"[^"]*"|[^;"])*)\s*(?:;|$)')


def title_properties(title: str) -> dict[str, str]:
    """``'bbox 0 0 10 10; image "a.png"'`` -> ``{'bbox': '0 0 10 10', 'image': 'a.png'}``."""
    found = {}
    for match in _PROPERTY.finditer(title or ""):
        value = match.group(2).strip()
        found[match.group(1)] = value[1:-1] if value.startswith('"') and value.endswith('"') \
            else value
    return found


def _classes(name: str):
    return f"descendant-or-self::*[contains(concat(' ', normalize-space(@class), ' '), ' {name} ')]"


def _bbox(value: str | None) -> tuple[float, float, float, float] | None:
    try:
        numbers = [float(v) for v in (value or "").split()]
    except ValueError:
        return None
    return tuple(numbers) if len(numbers) == 4 else None  # type: ignore[return-value]


def _page_size(path: Path, page_el, page_no: int, words: list, summary: ImportSummary):
    props = title_properties(page_el.get("title", ""))
    box = _bbox(props.get("bbox"))
    if box is not None:
        return box[2], box[3]
    if "image" in props:
        image = inside_folder(path.parent, props["image"])
        if image is None:
            summary.problem(path, f"image {props['image']!r} lies outside the file's folder; "
                                  "not opened", page_no, element_name(page_el))
        elif image.exists():
            from PIL import Image, UnidentifiedImageError

            try:
                with Image.open(image) as opened:
                    return float(opened.width), float(opened.height)
            except (UnidentifiedImageError, OSError) as error:
                summary.problem(path, f"page image {props['image']!r} unreadable ({error})",
                                page_no, element_name(page_el))
    boxes = [b for b in (_bbox(title_properties(w.get("title", "")).get("bbox")) for w in words)
             if b is not None]
    summary.repairs["page sizes taken from the extent of their words"] += 1
    return (max((b[2] for b in boxes), default=0.0), max((b[3] for b in boxes), default=0.0))


def read_hocr(path: Path, doc_id: str, summary: ImportSummary) -> list[dict]:
    root = parse_xml(path, summary)
    if root is None:
        return []
    pages = root.xpath(_classes("ocr_page"))
    if not pages:
        summary.problem(path, "no ocr_page element: not an hOCR file; file skipped")
        return []
    summary.files += 1
    rows: list[dict] = []
    for page_no, page_el in enumerate(pages, start=1):
        words = page_el.xpath(_classes("ocrx_word"))
        width, height = _page_size(path, page_el, page_no, words, summary)
        if not page_size_ok(summary, path, page_no, width, height, element_name(page_el)):
            continue
        page = PageWords(summary, path, doc_id, page_no, float(width), float(height))
        for word in words:
            props = title_properties(word.get("title", ""))
            box = _bbox(props.get("bbox"))
            if box is None:
                summary.words_read += 1
                summary.dropped["words without a readable bbox"] += 1
                summary.problem(path, f"no readable bbox in title {word.get('title')!r}",
                                page_no, element_name(word))
                continue
            confidence = None
            if "x_wconf" in props:
                try:
                    confidence = float(props["x_wconf"]) / 100.0
                except ValueError:
                    summary.problem(path, f"x_wconf {props['x_wconf']!r} is not a number; "
                                          "confidence left empty", page_no, element_name(word))
            page.add("".join(word.itertext()), *box, confidence=confidence,
                     element=element_name(word))
        image = _existing_image(path, page_el)
        rows += [{**row, "page_image": image} for row in page.rows]
    return rows


def _existing_image(path: Path, page_el) -> str:
    """The page's ``image`` (absolute path) when it names a file inside the hOCR file's folder,
    else "": the page picture a report draws the predictions over."""
    name = title_properties(page_el.get("title", "")).get("image")
    image = inside_folder(path.parent, name) if name else None
    return str(image.resolve()) if image is not None and image.is_file() else ""
