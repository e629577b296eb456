"""Page images through Tesseract (Debian's ``tesseract-ocr``, called via pytesseract).

Boxes are in image pixels, origin top-left; the page size is the image size. Every frame of a
multi-frame image (TIFF) is a page. A file named ``NAME_page<N>.<ext>`` is page N of document
NAME (its later frames N+1, ...), so the pages of one document rendered as separate images come back together. Word
confidence (Tesseract's 0-100) is kept as ``confidence`` on a 0-1 scale. A single-frame image
is its page's ``page_image`` (absolute path); frames of a multi-frame file get none.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from pathlib import Path

from dochar.data.importers.base import ImportSummary, PageWords
from dochar.data.word_table import WordTableError

IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff", ".bmp", ".gif", ".webp", ".pnm")
_PAGE_SUFFIX = re.compile(r"^(?P<doc>.+)_page(?P<page>\d+)$")


@dataclass(frozen=True)
class OcrSettings:
    """Tesseract language(s), page segmentation mode (11 = sparse text; 3 = automatic, Tesseract's
    own default) and the least image width: a narrower image (a low-resolution scan) is enlarged
    by the smallest whole factor that reaches it, and the boxes scaled back. Both defaults were
    chosen on three FUNSD training images (word match rate 0.705 unenlarged, 0.735 enlarged,
    segmentation 11), and segmentation 11 over 3 on two rendered certificates."""

    language: str = "eng"
    segmentation: int = 11
    min_width: int = 1000


def document_and_page(path: Path) -> tuple[str, int | None]:
    match = _PAGE_SUFFIX.match(path.stem)
    return (match["doc"], int(match["page"])) if match else (path.stem, None)


def ocr_words(image, settings: OcrSettings) -> list[tuple[str, float, float, float, float, float]]:
    """Tesseract's words on one PIL image: (text, x0, y0, x1, y1, confidence 0-1)."""
    import pytesseract

    os.environ.setdefault("OMP_THREAD_LIMIT", "1")  # Tesseract's own threads fight on 2 cores
    factor = max(1, math.ceil(settings.min_width / max(image.width, 1)))
    if factor > 1:
        from PIL import Image

        image = image.resize((image.width * factor, image.height * factor),
                             Image.Resampling.LANCZOS)
    try:
        data = pytesseract.image_to_data(image, lang=settings.language,
                                         config=f"--psm {settings.segmentation}",
                                         output_type=pytesseract.Output.DICT)
    except pytesseract.TesseractNotFoundError:
        raise WordTableError("Tesseract is not installed (Debian: apt-get install "
                             "tesseract-ocr); page images cannot be read") from None
    words = []
    for level, text, left, top, width, height, conf in zip(
            data["level"], data["text"], data["left"], data["top"], data["width"],
            data["height"], data["conf"]):
        if int(level) == 5:
            words.append((str(text), left / factor, top / factor, (left + width) / factor,
                          (top + height) / factor, max(float(conf), 0.0) / 100.0))
    return words


def add_ocr_words(page: PageWords, image, settings: OcrSettings, scale: float = 1.0) -> None:
    """OCR one image into ``page``; ``scale`` converts pixels to the page's units."""
    for text, x0, y0, x1, y1, confidence in ocr_words(image, settings):
        page.add(text, x0 * scale, y0 * scale, x1 * scale, y1 * scale, confidence=confidence,
                 element=f"word {text!r} at pixel ({x0:.0f}, {y0:.0f})")


def read_image(path: Path, doc_id: str, summary: ImportSummary,
               settings: OcrSettings = OcrSettings()) -> list[dict]:
    from PIL import Image, ImageSequence, UnidentifiedImageError

    named_doc, named_page = document_and_page(path)
    doc_id = named_doc if named_page is not None else doc_id
    try:
        opened = Image.open(path)
    except UnidentifiedImageError:
        summary.problem(path, "not an image Pillow can read; file skipped")
        return []
    except OSError as error:
        summary.problem(path, f"cannot read the file ({error}); file skipped")
        return []
    rows: list[dict] = []
    with opened:
        summary.files += 1
        single = getattr(opened, "n_frames", 1) == 1   # a frame of a TIFF has no path of its own
        for index, frame in enumerate(ImageSequence.Iterator(opened)):
            page_no = (named_page or 1) + index
            try:
                frame.load()
                picture = frame.convert("L")
            except (OSError, ValueError) as error:
                summary.problem(path, f"image data unreadable ({error}); page skipped",
                                page_no, element=f"frame {index + 1}")
                continue
            page = PageWords(summary, path, doc_id, page_no, float(picture.width),
                             float(picture.height))
            add_ocr_words(page, picture, settings)
            for row in page.rows:
                row["page_image"] = str(path.resolve()) if single else ""
            rows += page.rows
    return rows
