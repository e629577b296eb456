"""Importer for receipt JSON: one file per receipt, annotated lines of words with a category.

This is the annotation layout of the CORD receipts (Park et al., "CORD: A Consolidated Receipt
Dataset for Post-OCR Parsing", NeurIPS 2019 Document Intelligence Workshop; CC BY 4.0). The
format is named ``receipt_json`` here and is recognised by content (a ``valid_line`` list).

- Words: the text and the envelope box of the word's 4-point ``quad``; a box reaching past the
  image (``meta.image_size``) is clipped to the page (counted), a word without text is dropped
  (counted), a word whose quad is not eight finite numbers is a located problem (file,
  ``valid_line[i].words[j]``) and is skipped.
- Reading order: the printed rows (``row_id``) from top to bottom by their mean top edge, words
  left to right within a row; ``word_id`` follows it.
- Labels: the line's ``category`` (``menu.nm``, ``total.total_price``...), or with
  ``label_map="coarse"`` the names of :data:`COARSE_LABELS`. Words marked ``is_key`` (printed
  keys such as "TOTAL") get the label :data:`KEY_LABEL` and an entity of their own, so a line's
  value words stay apart from its key.
- Entities: one per line, ``l<index>`` (its value words) and ``l<index>.key`` (its key words).
- Row links (kind ``row``): the value entities of the lines of one line item (``menu.*`` and
  ``void_menu.*`` lines sharing a ``group_id``) chained in reading order, first to next; a
  line item of one line has none. Key entities take no part in rows.
- Split column, by receipt id (``meta.image_id``, else the digits of the file name): id % 5 == 0
  test, id % 10 == 1 validation, the rest train (the 600 receipts: 420 / 60 / 120).
"""

from __future__ import annotations

import json
import math
import re
from collections import defaultdict
from collections.abc import Iterable
from pathlib import Path

import pandas as pd

from dochar.data.importers.base import ImportSummary
from dochar.data.links_table import ROW_KIND
from dochar.data.word_table import WordTableError

KEY_LABEL = "key"
ITEM_PREFIXES = ("menu.", "void_menu.")
LABEL_MAPS = ("fine", "coarse")
COARSE_LABELS: dict[str, tuple[str, ...]] = {
    "item_name": ("menu.nm", "menu.sub_nm", "void_menu.nm"),
    "item_count": ("menu.cnt", "menu.sub_cnt"),
    "item_price": ("menu.price", "menu.sub_price", "menu.itemsubtotal", "void_menu.price"),
    "item_unit_price": ("menu.unitprice", "menu.sub_unitprice"),
    "item_discount": ("menu.discountprice",),
    "item_other": ("menu.num", "menu.vatyn", "menu.etc", "menu.sub_etc"),
    "subtotal": ("sub_total.subtotal_price",),
    "tax": ("sub_total.tax_price",),
    "service": ("sub_total.service_price", "sub_total.othersvc_price"),
    "discount": ("sub_total.discount_price",),
    "subtotal_other": ("sub_total.etc",),
    "total": ("total.total_price",),
    "payment": ("total.cashprice", "total.creditcardprice", "total.emoneyprice"),
    "change": ("total.changeprice",),
    "quantity": ("total.menuqty_cnt", "total.menutype_cnt"),
    "total_other": ("total.total_etc",),
}
COARSE_OF = {fine: coarse for coarse, fines in COARSE_LABELS.items() for fine in fines}
QUAD_KEYS = ("x1", "y1", "x2", "y2", "x3", "y3", "x4", "y4")


def is_receipt_json(path: Path) -> bool:
    """A JSON file whose opening holds a ``valid_line`` key (CORD's annotation layout)."""
    try:
        with path.open("rb") as handle:
            return b'"valid_line"' in handle.read(1 << 16)
    except OSError:
        return False


def split_of(receipt_id: int) -> str:
    """The fixed split by receipt id (see the module notes)."""
    if receipt_id % 5 == 0:
        return "test"
    return "val" if receipt_id % 10 == 1 else "train"


def _receipt_id(path: Path, meta: object) -> int | None:
    found = meta.get("image_id") if isinstance(meta, dict) else None
    if isinstance(found, int) and not isinstance(found, bool):
        return found
    digits = re.findall(r"\d+", path.stem)
    return int(digits[-1]) if digits else None


def _quad_box(word: object) -> tuple[float, float, float, float] | None:
    quad = word.get("quad") if isinstance(word, dict) else None
    if not isinstance(quad, dict):
        return None
    try:
        values = [float(quad[key]) for key in QUAD_KEYS]
    except (KeyError, TypeError, ValueError):
        return None
    if not all(math.isfinite(v) for v in values):
        return None
    xs, ys = values[0::2], values[1::2]
    return min(xs), min(ys), max(xs), max(ys)


def _page_size(meta: object, boxes: list[tuple[float, ...]]) -> tuple[float, float] | None:
    size = meta.get("image_size") if isinstance(meta, dict) else None
    if isinstance(size, dict):
        try:
            width, height = float(size["width"]), float(size["height"])
        except (KeyError, TypeError, ValueError):
            width = height = float("nan")
        if math.isfinite(width) and math.isfinite(height) and width > 0 and height > 0:
            return width, height
    if not boxes:
        return None
    return max(1.0, max(b[2] for b in boxes)), max(1.0, max(b[3] for b in boxes))


def _label(category: str, label_map: str) -> str | None:
    return category if label_map == "fine" else COARSE_OF.get(category)


def _read_words(path: Path, lines: list, label_map: str, report: ImportSummary) -> list[dict]:
    """Every readable word with its line, label and entity; the rest located and counted."""
    words = []
    for index, line in enumerate(lines):
        where = f"valid_line[{index}]"
        if not isinstance(line, dict) or not isinstance(line.get("words"), list):
            report.problem(path, "expected a line object with a 'words' list; line skipped",
                           element=where)
            continue
        category = str(line.get("category", ""))
        label = _label(category, label_map)
        for position, word in enumerate(line["words"]):
            report.words_read += 1
            box = _quad_box(word)
            if box is None:
                report.problem(path, "'quad' must hold eight finite numbers x1..y4; word "
                                     "skipped", element=f"{where}.words[{position}]")
                report.dropped["words with an unreadable box"] += 1
                continue
            if label is None:
                report.problem(path, f"category {category!r} has no coarse label; word "
                                     f"skipped", element=f"{where}.words[{position}]")
                report.dropped["words of a category without a coarse label"] += 1
                continue
            text = " ".join(str(word.get("text", "")).split())
            if not text:
                report.dropped["words without text"] += 1
                continue
            key = bool(word.get("is_key"))
            words.append({"line": index, "category": category, "group": line.get("group_id"),
                          "row": word.get("row_id"), "text": text, "box": box,
                          "label": KEY_LABEL if key else label,
                          "entity_id": f"l{index}.key" if key else f"l{index}"})
    return words


def _reading_order(words: list[dict]) -> list[dict]:
    """Printed rows top to bottom (mean top edge), words left to right within a row."""
    tops: dict[object, list[float]] = defaultdict(list)
    for word in words:
        tops[str(word["row"])].append(word["box"][1])
    rank = {row: sum(v) / len(v) for row, v in tops.items()}
    return sorted(words, key=lambda w: (rank[str(w["row"])], str(w["row"]), w["box"][0]))


def row_links(words: list[dict], doc_id: str) -> list[dict]:
    """Chain the value entities of each line item's lines, in reading order (module notes)."""
    members: dict[object, list[str]] = defaultdict(list)
    for word in words:
        if word["category"].startswith(ITEM_PREFIXES) and word["label"] != KEY_LABEL:
            group = members[word["group"]]
            if word["entity_id"] not in group:
                group.append(word["entity_id"])
    return [{"doc_id": doc_id, "page": 1, "source": a, "target": b, "kind": ROW_KIND}
            for group in members.values() for a, b in zip(group, group[1:])]


def read_receipt_file(path: Path, report: ImportSummary, *, label_map: str = "fine"
                      ) -> list[dict]:
    """The rows of one receipt (one page); problems, repairs and row links go into ``report``."""
    try:
        receipt = json.loads(path.read_text(encoding="utf-8"))
        lines = receipt["valid_line"]
        if not isinstance(lines, list):
            raise TypeError(f"'valid_line' is a {type(lines).__name__}, expected a list")
    except (json.JSONDecodeError, KeyError, TypeError, UnicodeDecodeError) as error:
        report.problem(path, f"not a receipt annotation file ({error}); file skipped")
        return []
    except OSError as error:
        report.problem(path, f"cannot read the file ({error}); file skipped")
        return []
    meta = receipt.get("meta")
    receipt_id = _receipt_id(path, meta)
    words = _reading_order(_read_words(path, lines, label_map, report))
    size = _page_size(meta, [w["box"] for w in words])
    if size is None:
        report.problem(path, "no readable word and no image_size; file skipped")
        return []
    width, height = size
    rows: list[dict] = []
    for word in words:
        x0, y0, x1, y1 = word["box"]
        clipped = (min(max(x0, 0.0), width), min(max(y0, 0.0), height),
                   min(max(x1, 0.0), width), min(max(y1, 0.0), height))
        if clipped != (x0, y0, x1, y1):
            report.repairs["boxes clipped to the page"] += 1
        rows.append({"doc_id": path.stem, "page": 1, "word_id": len(rows),
                     "text": word["text"], "x0": clipped[0], "y0": clipped[1],
                     "x1": clipped[2], "y1": clipped[3], "page_width": width,
                     "page_height": height, "label": word["label"],
                     "entity_id": word["entity_id"], "layout_id": "",
                     "split": "" if receipt_id is None else split_of(receipt_id)})
    report.files += 1
    report.pages += 1
    report.words_kept += len(rows)
    report.links += row_links(words, path.stem)
    return rows


def import_receipts(paths: Iterable[str | Path], *, label_map: str = "fine"
                    ) -> tuple[pd.DataFrame, ImportSummary]:
    """Import receipt files or folders of them (searched for ``*.json``, recursively)."""
    if label_map not in LABEL_MAPS:
        raise WordTableError(f"data.label_map={label_map!r}: choose one of {list(LABEL_MAPS)}")
    files: list[Path] = []
    for root in map(Path, paths):
        if not root.exists():
            raise WordTableError(f"{root}: no such file or folder")
        found = [root] if root.is_file() else sorted(root.rglob("*.json"))
        if not found:
            raise WordTableError(f"{root}: no receipt JSON files found")
        files += found
    report = ImportSummary()
    rows: list[dict] = []
    for file in files:
        rows += read_receipt_file(file, report, label_map=label_map)
    return pd.DataFrame(rows), report
