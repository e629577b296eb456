"""``dochar import SRC... --out TABLE``: documents in open formats -> one word table on disk.

Prints what was read, repaired and skipped (with the file, page and element of each problem),
and exits 2 with one located message when nothing could be imported.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from dochar.errors import SuggestingParser
from dochar.data.importers import FORMATS, import_sources
from dochar.data.importers.image import OcrSettings
from dochar.data.importers.label_transfer import MATCHING, TransferSettings
from dochar.data.word_table import (WordTableError, table_name_problem, validate_word_table,
                                    write_word_table)


def _parser() -> argparse.ArgumentParser:
    parser = SuggestingParser(
        prog="dochar import",
        description="Read PDFs, hOCR, ALTO, page images or form JSON into a word table.")
    parser.add_argument("sources", nargs="+", type=Path, metavar="SRC",
                        help="files or folders (folders are searched)")
    parser.add_argument("--out", type=Path, required=True,
                        help="word table to write; .parquet or .csv decides the format")
    parser.add_argument("--format", choices=FORMATS, default="auto",
                        help="input format (default: by file suffix)")
    parser.add_argument("--ocr", action="store_true",
                        help="read PDF pages without a text layer by OCR (Tesseract)")
    parser.add_argument("--ocr-language", default="eng", help="Tesseract language(s)")
    parser.add_argument("--labels-from", type=Path, metavar="TABLE",
                        help="labelled word table of the same pages: labels move by box IoU")
    parser.add_argument("--min-iou", type=float, default=0.5,
                        help="least IoU for a label to move (default 0.5)")
    parser.add_argument("--matching", choices=MATCHING, default="hungarian",
                        help="one-to-one word pairing for label transfer")
    parser.add_argument("--unmatched-label", metavar="LABEL",
                        help="label for imported words no labelled word matches "
                             "(default: drop them, counted)")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = _parser()
    args = parser.parse_args(argv)
    if (problem := table_name_problem(args.out, "--out")) is not None:
        parser.error(problem)
    try:
        transfer = TransferSettings(args.min_iou, args.matching, args.unmatched_label)
        table, summary = import_sources(args.sources, format=args.format, ocr=args.ocr,
                                        labels_from=args.labels_from, transfer=transfer,
                                        ocr_settings=OcrSettings(language=args.ocr_language))
        checked = validate_word_table(table, source=str(args.out))
    except (WordTableError, ValueError) as error:
        print(f"dochar import: error: {error}", file=sys.stderr)
        return 2
    for line in summary.lines():
        print(line)
    for problem in checked.problems:
        print(f"set aside: {problem}")
    path = write_word_table(checked.table, args.out)
    print(f"wrote {path}: {checked.documents_used} documents, "
          f"{checked.table.groupby('doc_id')['page'].nunique().sum()} pages, "
          f"{len(checked.table)} words")
    return 0
