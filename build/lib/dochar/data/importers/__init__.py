"""Importers: documents in open formats -> the word table, with a summary of what was read.

One module per format (``pdf``, ``hocr``, ``alto``, ``image``; form-annotation JSON through
``dochar.data.importers.form_json``, receipt JSON through ``dochar.data.importers.cord``; a
``.json`` file is told apart by content), one registry (``READERS``), one entry point (``import_sources``) shared
by ``dochar import`` and the ``data=pdf|hocr|alto|images`` sources of ``dochar run``.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from dochar.data.importers.alto import read_alto
from dochar.data.importers.base import WORD_COLUMNS, ImportSummary
from dochar.data.importers.hocr import read_hocr
from dochar.data.importers.image import IMAGE_SUFFIXES, OcrSettings, read_image
from dochar.data.importers.label_transfer import TransferSettings, transfer_labels
from dochar.data.importers.pdf import read_pdf
from dochar.data.word_table import WordTableError, read_word_table, validate_word_table

log = logging.getLogger(__name__)
Reader = Callable[[Path, str, ImportSummary, bool, OcrSettings], list[dict]]
SUFFIXES: dict[str, tuple[str, ...]] = {
    "pdf": (".pdf",), "hocr": (".hocr", ".html", ".htm", ".xhtml"), "alto": (".xml", ".alto"),
    "image": IMAGE_SUFFIXES, "form_json": (".json",), "receipt_json": (".json",),
}
FUNSD_STYLE_FOLDERS = ("training_data", "testing_data")


def _read_form_json(path: Path, doc_id: str, summary: ImportSummary, ocr: bool,
                    settings: OcrSettings) -> list[dict]:
    from dochar.data.importers.form_json import read_form_file

    return read_form_file(path, summary)


def _read_receipt_json(path: Path, doc_id: str, summary: ImportSummary, ocr: bool,
                       settings: OcrSettings) -> list[dict]:
    from dochar.data.importers.cord import read_receipt_file

    return read_receipt_file(path, summary)


READERS: dict[str, Reader] = {
    "pdf": lambda path, doc, summary, ocr, settings: read_pdf(path, doc, summary, ocr=ocr,
                                                              settings=settings),
    "hocr": lambda path, doc, summary, ocr, settings: read_hocr(path, doc, summary),
    "alto": lambda path, doc, summary, ocr, settings: read_alto(path, doc, summary),
    "image": lambda path, doc, summary, ocr, settings: read_image(path, doc, summary, settings),
    "form_json": _read_form_json,
    "receipt_json": _read_receipt_json,
}
FORMATS = ("auto", *READERS)


def detect_format(path: Path) -> str | None:
    """By suffix; an ``.xml`` or ``.html`` file holding ``ocr_page`` is hOCR, else ALTO/hOCR;
    a ``.json`` file holding ``valid_line`` is receipt JSON, else form JSON."""
    suffix = path.suffix.lower()
    if suffix == ".json":
        from dochar.data.importers.cord import is_receipt_json

        return "receipt_json" if is_receipt_json(path) else "form_json"
    if suffix in (".xml", ".html", ".htm", ".xhtml"):
        try:
            head = path.read_bytes()[:4096]
        except OSError:
            return "alto" if suffix == ".xml" else "hocr"
        return "hocr" if b"ocr_page" in head else ("alto" if b"alto" in head.lower() else None)
    return next((name for name, suffixes in SUFFIXES.items() if suffix in suffixes), None)


def _files(paths: Sequence[str | Path], fmt: str,
           summary: ImportSummary) -> list[tuple[Path, str]]:
    found: list[tuple[Path, str]] = []
    for path in map(Path, paths):
        if not path.exists():
            summary.problem(path, "no such file or folder")
        elif path.is_dir() and fmt in ("auto", "form_json") and any(
                (path / name).is_dir() for name in FUNSD_STYLE_FOLDERS):
            found.append((path, "form_json"))   # keeps the official split column
        elif path.is_dir():
            skipped = []
            for file in sorted(p for p in path.rglob("*") if p.is_file()):
                kind = detect_format(file) if fmt == "auto" else (
                    fmt if file.suffix.lower() in SUFFIXES[fmt] else None)
                if kind:
                    found.append((file, kind))
                else:
                    skipped.append(file.name)
            if skipped:
                summary.notes.append(f"{path}: {len(skipped)} files of no {fmt} format "
                                     f"skipped ({', '.join(skipped[:5])}"
                                     f"{', ...' if len(skipped) > 5 else ''})")
        else:
            kind = detect_format(path) if fmt == "auto" else fmt
            if kind is None:
                summary.problem(path, f"unknown format (suffix {path.suffix!r}); give --format")
            else:
                found.append((path, kind))
    return found


def _unique_documents(rows: list[dict], seen: set[tuple[str, int]],
                      summary: ImportSummary) -> None:
    """A second file with an already-used (doc_id, page) gets ``doc_id~2``, ``~3``... (counted)."""
    keys = {(r["doc_id"], r["page"]) for r in rows}
    if keys & seen:
        base = rows[0]["doc_id"]
        suffix = 2
        while {(f"{base}~{suffix}", p) for _, p in keys} & seen:
            suffix += 1
        for row in rows:
            row["doc_id"] = f"{row['doc_id']}~{suffix}"
        summary.repairs["document ids made unique (same file name twice)"] += 1
    seen.update((r["doc_id"], r["page"]) for r in rows)


def import_sources(paths: Sequence[str | Path], format: str = "auto", ocr: bool = False,
                   labels_from: str | Path | pd.DataFrame | None = None, *,
                   transfer: TransferSettings = TransferSettings(),
                   ocr_settings: OcrSettings = OcrSettings()) -> tuple[pd.DataFrame,
                                                                      ImportSummary]:
    """Read every file (folders are searched), optionally move labels on; never half a file."""
    if format not in FORMATS:
        raise WordTableError(f"unknown import format {format!r}; choose one of {list(FORMATS)}")
    summary = ImportSummary()
    rows: list[dict] = []
    seen: set[tuple[str, int]] = set()
    for path, kind in _files(paths, format, summary):
        file_rows = READERS[kind](path, path.stem, summary, ocr, ocr_settings)
        if file_rows:
            _unique_documents(file_rows, seen, summary)
        rows += file_rows
    if not rows:
        shown = "\n  ".join(str(p) for p in summary.problems[:20]) or "no input files"
        raise WordTableError(f"no words imported from {[str(p) for p in paths]}:\n  {shown}")
    table = pd.DataFrame(rows)
    table = table[[*WORD_COLUMNS, *(c for c in table.columns if c not in WORD_COLUMNS)]]
    if labels_from is not None:
        labelled = (labels_from if isinstance(labels_from, pd.DataFrame)
                    else read_word_table(labels_from))
        checked = validate_word_table(labelled)
        for problem in checked.problems:
            summary.problem(problem.source, f"labelled table: {problem.message}",
                            element=f"row {problem.row}, column {problem.column}")
        table, summary.transfer = transfer_labels(table, checked.table, transfer)
    return table.reset_index(drop=True), summary


def load_for_run(data_cfg: Mapping[str, Any]) -> tuple[pd.DataFrame, dict[str, float]]:
    """A ``data=pdf|hocr|alto|images`` source: import at run time, log the summary, keep counts."""
    paths = data_cfg["path"]
    paths = [paths] if isinstance(paths, (str, Path)) else list(paths)
    for path in paths:
        if not Path(path).exists():
            raise WordTableError(f"data.path={path}: no such file or folder (relative paths "
                                 f"start at {Path.cwd()})")
    transfer = TransferSettings(**dict(data_cfg.get("label_transfer") or {}))
    labels_from = data_cfg.get("labels_from") or None
    table, summary = import_sources(paths, format=str(data_cfg["source"]),
                                    ocr=bool(data_cfg.get("ocr", False)),
                                    labels_from=labels_from, transfer=transfer)
    table.attrs["source"] = ", ".join(map(str, paths))
    for line in summary.lines():
        log.info("import: %s", line)
    notes = {"import_files": summary.files, "import_pages": summary.pages,
             "import_words_read": summary.words_read, "import_words_kept": summary.words_kept,
             "import_problems": len(summary.problems)}
    if summary.transfer is not None:
        notes["label_transfer_recall"] = summary.transfer.recall
    return table, notes
