"""Importer for form-annotation JSON: one file per form, entities holding words, boxes and labels.

This is the layout of the FUNSD dataset (Jaume et al., ICDAR-OST 2019). Each entity's label is
given to every one of its words and the entity id becomes ``entity_id``. Two real-world defects
get a documented repair rather than a crash or a silent drop, and both are counted:

- words whose text is empty or blank: dropped (``empty_text="drop"``, the usual choice since
  they carry no text to learn from) or kept with empty text (``"keep"``);
- boxes given corner-first the wrong way round (``x1 < x0``): corners swapped;
- boxes reaching past the page image: clipped to the page.

The scan beside the annotations (``../images/<name>.png``) gives the page size and the
``page_image`` column (an absolute path); without it the page size is the extent of the boxes
and ``page_image`` stays empty.

Links: each entity's ``linking`` lists pairs ``[id_a, id_b]`` of entity ids, the same pair on
both entities and in no fixed order. A pair becomes one directed row of the links table
(:mod:`dochar.data.links_table`), kind ``key_value``, oriented by the entities' labels along
``header -> question -> answer`` (FUNSD's field relation: a heading points to its questions, a
question to its answer); two entities of equal rank, or ``other``, keep the order given.
"""

from __future__ import annotations

import json
import math
import struct
from collections.abc import Iterable
from pathlib import Path

import pandas as pd
from tqdm import tqdm

from dochar.data.importers.base import ImportSummary
from dochar.data.word_table import WordTableError

SPLIT_FOLDERS = {"training_data": "train", "testing_data": "test"}
LINK_RANK = {"header": 0, "question": 1, "answer": 2}   # lower rank is the link's source


def png_size(path: Path) -> tuple[int, int]:
    """Width and height from a PNG header (the IHDR chunk), without decoding the image."""
    with path.open("rb") as handle:
        header = handle.read(24)
    if len(header) < 24 or header[:8] != b"\x89PNG\r\n\x1a\n":
        raise WordTableError(f"{path}: not a PNG file")
    width, height = struct.unpack(">II", header[16:24])
    return int(width), int(height)


def _box(word: object) -> tuple[float, float, float, float] | None:
    """Four finite numbers from a word's ``box``, or None."""
    box = word.get("box") if isinstance(word, dict) else None
    if not isinstance(box, (list, tuple)) or len(box) != 4:
        return None
    try:
        values = tuple(float(v) for v in box)
    except (TypeError, ValueError):
        return None
    return values if all(math.isfinite(v) for v in values) else None  # type: ignore[return-value]


def page_image(annotation: Path) -> Path | None:
    """The scan beside an annotation file (FUNSD's ``../images/<name>.png``), if present."""
    image = annotation.parent.parent / "images" / f"{annotation.stem}.png"
    return image.resolve() if image.is_file() else None


def _page_size(image: Path | None, boxes: list[tuple[float, ...]],
               report: ImportSummary) -> tuple[float, float]:
    if image is not None:
        try:
            return png_size(image)
        except (WordTableError, OSError) as error:
            report.problem(image, f"page size not readable ({error}); the words' extent "
                                  f"is used")
    if not boxes:
        return 1.0, 1.0
    return max(1.0, max(b[2] for b in boxes)), max(1.0, max(b[3] for b in boxes))


def _words(path: Path, form: list, report: ImportSummary) -> list[tuple[int, dict, dict, tuple]]:
    """(entity index, entity, word, box) of every readable word; the rest located and counted."""
    found = []
    for index, entity in enumerate(form):
        words = entity.get("words", []) if isinstance(entity, dict) else None
        if not isinstance(words, list):
            report.problem(path, "expected an entity object with a 'words' list; entity "
                                 "skipped", element=f"form[{index}]")
            continue
        for position, word in enumerate(words):
            box = _box(word)
            if box is None:
                shown = word.get("box", "(missing)") if isinstance(word, dict) else word
                report.problem(path, f"'box' must be four finite numbers [x0, y0, x1, y1], "
                                     f"got {shown!r}; word skipped",
                               element=f"form[{index}].words[{position}]")
                report.words_read += 1
                report.dropped["words with an unreadable box"] += 1
                continue
            found.append((index, entity, word, box))
    return found


def read_form_file(path: Path, report: ImportSummary, *, split: str = "",
                   empty_text: str = "drop") -> list[dict]:
    """The rows of one form (one page); problems, repairs and links go into ``report``."""
    try:
        form = json.loads(path.read_text(encoding="utf-8"))["form"]
        if not isinstance(form, list):
            raise TypeError(f"'form' is a {type(form).__name__}, expected a list")
    except (json.JSONDecodeError, KeyError, TypeError, UnicodeDecodeError) as error:
        report.problem(path, f"not a form-annotation file ({error}); file skipped")
        return []
    except OSError as error:
        report.problem(path, f"cannot read the file ({error}); file skipped")
        return []
    words = _words(path, form, report)
    image = page_image(path)
    width, height = _page_size(image, [box for *_, box in words], report)
    rows: list[dict] = []
    for index, entity, word, (x0, y0, x1, y1) in words:
        report.words_read += 1
        text = str(word.get("text", "")).strip()
        if not text:
            if empty_text == "drop":
                report.dropped["words without text"] += 1
                continue
            report.kept_as_given["words without text"] += 1
        if x1 < x0 or y1 < y0:
            report.repairs["boxes with swapped corners put in order"] += 1
            x0, x1 = sorted((x0, x1))
            y0, y1 = sorted((y0, y1))
        clipped = (min(max(x0, 0.0), width), min(max(y0, 0.0), height),
                   min(max(x1, 0.0), width), min(max(y1, 0.0), height))
        if clipped != (x0, y0, x1, y1):
            report.repairs["boxes clipped to the page"] += 1
        rows.append({"doc_id": path.stem, "page": 1, "word_id": len(rows), "text": text,
                     "x0": clipped[0], "y0": clipped[1], "x1": clipped[2],
                     "y1": clipped[3], "page_width": float(width),
                     "page_height": float(height), "label": str(entity.get("label", "")),
                     "entity_id": f"e{entity.get('id', index)}", "layout_id": "",
                     "split": split, "page_image": "" if image is None else str(image)})
    report.files += 1
    report.pages += 1
    report.words_kept += len(rows)
    report.links += form_links(form, path.stem)
    return rows


def form_links(form: list[dict], doc_id: str) -> list[dict]:
    """One directed key -> value row per unordered ``linking`` pair (see the module notes)."""
    labels = {entity.get("id", index): str(entity.get("label", ""))
              for index, entity in enumerate(form)}
    seen: set[frozenset] = set()
    links = []
    for entity in form:
        for pair in entity.get("linking", []) or []:
            if len(pair) != 2 or pair[0] == pair[1] or frozenset(pair) in seen:
                continue
            seen.add(frozenset(pair))
            first, second = pair
            rank = [LINK_RANK.get(labels.get(end, "")) for end in pair]
            flip = None not in rank and rank[1] < rank[0]
            source, target = (second, first) if flip else (first, second)
            links.append({"doc_id": doc_id, "page": 1, "source": f"e{source}",
                          "target": f"e{target}", "kind": "key_value"})
    return links


def import_form_json(paths: Iterable[str | Path], *, empty_text: str = "drop",
                     progress: bool = False) -> tuple[pd.DataFrame, ImportSummary]:
    """Import annotation files or folders; a FUNSD-style root gives the official split column."""
    if empty_text not in {"drop", "keep"}:
        raise WordTableError(f"empty_text must be 'drop' or 'keep', got {empty_text!r}")
    files: list[tuple[Path, str]] = []
    for root in map(Path, paths):
        if not root.exists():
            raise WordTableError(f"{root}: no such file or folder")
        if root.is_file():
            files.append((root, ""))
            continue
        found = [(file, split) for folder, split in SPLIT_FOLDERS.items()
                 for file in sorted((root / folder / "annotations").glob("*.json"))]
        found = found or [(file, "") for file in sorted(root.glob("*.json"))]
        if not found:
            raise WordTableError(f"{root}: no annotation JSON files found")
        files += found
    report = ImportSummary()
    rows: list[dict] = []
    # disable=None: tqdm draws the bar only when its stream is a terminal
    for file, split in tqdm(files, desc="importing", leave=False,
                            disable=None if progress else True):
        rows += read_form_file(file, report, split=split, empty_text=empty_text)
    return pd.DataFrame(rows), report
