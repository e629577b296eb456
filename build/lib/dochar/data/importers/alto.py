"""ALTO XML (Library of Congress, loc.gov/standards/alto; schema versions 2, 3 and 4) into word rows.

Pages are the ``Layout/Page`` elements in document order; words are their ``String`` elements:
``CONTENT`` the text, ``HPOS``/``VPOS`` the top-left corner and ``WIDTH``/``HEIGHT`` the size,
all in the file's ``Description/MeasurementUnit``; ``WC`` (0-1) is kept as ``confidence``.

Units: ``pixel`` coordinates stay pixels; ``mm10`` (tenths of a millimetre) and ``inch1200``
(1/1200 inch) are converted to PDF points (1/72 inch): mm10 x 72/254, inch1200 x 72/1200. A file
without a MeasurementUnit is read as pixels (counted). The page size is the Page's WIDTH and
HEIGHT; without them, for pixel files the size of ``sourceImageInformation/fileName`` (which
must lie inside the ALTO file's folder), else the extent of the page's words (counted).
"""

from __future__ import annotations

from pathlib import Path

from dochar.data.importers.base import (
    ImportSummary,
    PageWords,
    element_name,
    inside_folder,
    page_size_ok,
    parse_xml,
)

NAMESPACES: dict[str, str] = {
    "http://www.loc.gov/standards/alto/ns-v2#": "2",
    "http://www.loc.gov/standards/alto/ns-v3#": "3",
    "http://www.loc.gov/standards/alto/ns-v4#": "4",
}
UNIT_TO_PAGE_UNITS: dict[str, float] = {"pixel": 1.0, "mm10": 72.0 / 254.0,
                                        "inch1200": 72.0 / 1200.0}


def _number(element, name: str) -> float | None:
    try:
        return float(element.get(name))
    except (TypeError, ValueError):
        return None


def _image_size(path: Path, root, ns: str, summary: ImportSummary):
    name = root.findtext(f"{{{ns}}}Description/{{{ns}}}sourceImageInformation/{{{ns}}}fileName")
    if not name:
        return None
    image = inside_folder(path.parent, name.strip())
    if image is None:
        summary.problem(path, f"image {name.strip()!r} lies outside the file's folder; "
                              "not opened", element="<fileName>")
        return None
    if not image.exists():
        return None
    from PIL import Image, UnidentifiedImageError

    try:
        with Image.open(image) as opened:
            return float(opened.width), float(opened.height)
    except (UnidentifiedImageError, OSError) as error:
        summary.problem(path, f"page image {name.strip()!r} unreadable ({error})",
                        element="<fileName>")
        return None


def read_alto(path: Path, doc_id: str, summary: ImportSummary) -> list[dict]:
    root = parse_xml(path, summary)
    if root is None:
        return []
    ns = root.tag[1:].split("}")[0] if root.tag.startswith("{") else ""
    if root.tag.split("}")[-1] != "alto" or ns not in NAMESPACES:
        summary.problem(path, f"root element {root.tag!r} is not ALTO v2-v4 "
                              f"(namespaces {sorted(NAMESPACES)}); file skipped",
                        element=element_name(root))
        return []
    unit = (root.findtext(f"{{{ns}}}Description/{{{ns}}}MeasurementUnit") or "").strip()
    if not unit:
        summary.repairs["ALTO files without a MeasurementUnit read as pixel"] += 1
        unit = "pixel"
    if unit not in UNIT_TO_PAGE_UNITS:
        summary.problem(path, f"MeasurementUnit {unit!r} is not one of "
                              f"{sorted(UNIT_TO_PAGE_UNITS)}; file skipped",
                        element="<MeasurementUnit>")
        return []
    scale = UNIT_TO_PAGE_UNITS[unit]
    pages = root.findall(f"{{{ns}}}Layout/{{{ns}}}Page")
    if not pages:
        summary.problem(path, "no Layout/Page element; file skipped")
        return []
    summary.files += 1
    rows: list[dict] = []
    for page_no, page_el in enumerate(pages, start=1):
        strings = list(page_el.iter(f"{{{ns}}}String"))
        width, height = _number(page_el, "WIDTH"), _number(page_el, "HEIGHT")
        if width is None or height is None:
            size = _image_size(path, root, ns, summary) if unit == "pixel" else None
            if size is None:
                summary.repairs["page sizes taken from the extent of their words"] += 1
                ends = [(_number(s, "HPOS") or 0) + (_number(s, "WIDTH") or 0) for s in strings]
                bottoms = [(_number(s, "VPOS") or 0) + (_number(s, "HEIGHT") or 0)
                           for s in strings]
                size = (max(ends, default=0.0), max(bottoms, default=0.0))
            width, height = size
        if not page_size_ok(summary, path, page_no, width * scale, height * scale,
                            element_name(page_el)):
            continue
        page = PageWords(summary, path, doc_id, page_no, width * scale, height * scale)
        for string in strings:
            box = [_number(string, name) for name in ("HPOS", "VPOS", "WIDTH", "HEIGHT")]
            if any(v is None for v in box):
                summary.words_read += 1
                summary.dropped["words without a readable HPOS/VPOS/WIDTH/HEIGHT"] += 1
                summary.problem(path, "HPOS, VPOS, WIDTH and HEIGHT must all be numbers",
                                page_no, element_name(string))
                continue
            hpos, vpos, w, h = (v * scale for v in box)  # type: ignore[operator]
            confidence = _number(string, "WC")
            page.add(string.get("CONTENT", ""), hpos, vpos, hpos + w, vpos + h,
                     confidence=confidence, element=element_name(string))
        # the file names one image: the picture of its page when it has only one
        image = _existing_image(path, root, ns) if len(pages) == 1 else ""
        rows += [{**row, "page_image": image} for row in page.rows]
    return rows


def _existing_image(path: Path, root, ns: str) -> str:
    """The ``sourceImageInformation/fileName`` (absolute path) when it names a file inside the
    ALTO file's folder, else ""."""
    name = root.findtext(f"{{{ns}}}Description/{{{ns}}}sourceImageInformation/{{{ns}}}fileName")
    image = inside_folder(path.parent, name.strip()) if name and name.strip() else None
    return str(image.resolve()) if image is not None and image.is_file() else ""
