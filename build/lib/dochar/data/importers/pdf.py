"""The text layer of born-digital PDFs (pdfplumber, on pdfminer.six) into word rows.

Units are PDF points (1/72 inch) with the origin moved to the page's top-left corner; the page
size is the page box. A glyph box is one font size tall, from the font's descent below the
baseline (pdfminer's convention), and a word is a run of glyphs on one line whose gaps are under
0.2 of the glyph size (``x_tolerance_ratio``) and not a space.

A page with no text layer (a scan saved as PDF) is listed in the summary; with ``ocr=True`` it
is rendered at ``OCR_DPI`` by pdfium and read by Tesseract, and its boxes come back in points.
Every page's ``page_image`` is the PDF itself (absolute path): the page-image features render
page ``page`` of it with pdfium when they need pixels.
"""

from __future__ import annotations

from pathlib import Path

from dochar.data.importers.base import ImportSummary, PageWords, page_size_ok
from dochar.data.importers.image import OcrSettings, add_ocr_words

OCR_DPI = 300.0
WORD_GAP_RATIO = 0.2


def _ocr_page(path: Path, index: int, page: PageWords, settings: OcrSettings) -> None:
    import pypdfium2

    pdf = pypdfium2.PdfDocument(str(path))
    try:
        image = pdf[index].render(scale=OCR_DPI / 72.0, grayscale=True).to_pil().convert("L")
    finally:
        pdf.close()
    add_ocr_words(page, image, settings, scale=72.0 / OCR_DPI)


def read_pdf(path: Path, doc_id: str, summary: ImportSummary, *, ocr: bool = False,
             settings: OcrSettings = OcrSettings()) -> list[dict]:
    import pdfplumber

    try:
        document = pdfplumber.open(path)
        pages = list(document.pages)
    except Exception as error:  # pdfminer raises many kinds for a broken file
        summary.problem(path, f"not a readable PDF ({type(error).__name__}: {error}); "
                              "file skipped")
        return []
    rows: list[dict] = []
    with document:
        summary.files += 1
        for index, plumber_page in enumerate(pages):
            page_no = index + 1
            left, top = float(plumber_page.bbox[0]), float(plumber_page.bbox[1])
            width, height = float(plumber_page.width), float(plumber_page.height)
            if not page_size_ok(summary, path, page_no, width, height):
                continue
            try:
                words = plumber_page.extract_words(x_tolerance_ratio=WORD_GAP_RATIO,
                                                   use_text_flow=False, keep_blank_chars=False)
            except Exception as error:  # a damaged content stream
                summary.problem(path, f"page content unreadable ({type(error).__name__}: "
                                      f"{error}); page skipped", page_no)
                continue
            page = PageWords(summary, path, doc_id, page_no, width, height)
            if not words:
                if ocr:
                    summary.notes.append(f"{path}, page {page_no}: no text layer, read by OCR")
                    _ocr_page(path, index, page, settings)
                else:
                    summary.problem(path, "no text layer (a scanned page?); use OCR to read "
                                          "it", page_no)
            for word in words:
                page.add(word["text"], word["x0"] - left, word["top"] - top,
                         word["x1"] - left, word["bottom"] - top,
                         element=f"word {word['text']!r} at ({word['x0']:.1f}, "
                                 f"{word['top']:.1f})")
            for row in page.rows:
                row["page_image"] = str(path.resolve())   # rendered on use (page_image.py)
            rows += page.rows
    return rows
