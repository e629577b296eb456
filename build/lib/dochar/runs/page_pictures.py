"""Pictures of the test pages a run's report draws, kept in the run so its report can draw the
predictions over the page itself.

Where a picture comes from, per page:

- the page's ``page_image`` (FUNSD scans, imported PNG/JPEG/TIFF pages, imported PDFs whose
  page is rendered by pdfium, word tables that name their images);
- for generated certificates (``data=synth``), which have no file, the page rendered from its
  own words by the generator's renderer (:func:`data_synth.render.render_pdf`, then pdfium):
  what the certificate would look like printed;
- otherwise none, and the row says why, so the report can say so instead of drawing on white
  as if that were the page.

Each picture is grey, downscaled to at most :data:`PICTURE_WIDTH` pixels wide and stored as JPEG,
so a report embedding three pages stays a file of a few hundred kilobytes.
"""

from __future__ import annotations

import io
import logging
import tempfile
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd

log = logging.getLogger(__name__)

PICTURE_COLUMNS = ["doc_id", "page", "origin", "image"]
PICTURE_WIDTH = 1040   # px: twice the width the report draws a page at, sharp on dense screens
JPEG_QUALITY = 70
SYNTH_DPI = 100.0      # generated pages are rendered at this resolution before downscaling


def page_pictures(table: pd.DataFrame, pages: Sequence[tuple[str, int]], *,
                  synthetic: bool) -> pd.DataFrame:
    """One row per page: ``origin`` says where the picture came from (or why there is none),
    ``image`` holds its JPEG bytes (empty when there is none)."""
    rows = []
    doc_ids = table["doc_id"].astype(str)
    for doc_id, page in pages:
        words = table[(doc_ids == str(doc_id)) & (table["page"] == int(page))]
        try:
            grey, origin = _picture(words, int(page), synthetic)
        except Exception as error:  # Pillow, pdfium and reportlab raise many kinds for bad input
            grey, origin = None, (f"no page image: it could not be read "
                                  f"({type(error).__name__}: {error})")
            log.warning("page %s#p%s: %s", doc_id, page, origin)
        rows.append({"doc_id": str(doc_id), "page": int(page), "origin": origin,
                     "image": b"" if grey is None else jpeg(grey)})
    return pd.DataFrame(rows, columns=PICTURE_COLUMNS)


def _picture(words: pd.DataFrame, page: int, synthetic: bool) -> tuple[np.ndarray | None, str]:
    from dochar.features.page_image import read_grey

    named = ""
    if "page_image" in words.columns:
        named = next((str(v) for v in words["page_image"] if isinstance(v, str) and v), "")
    if named:
        path = Path(named)
        if path.suffix.lower() == ".pdf":
            return read_grey(path, page), f"page {page} of {path.name}, rendered"
        return read_grey(path, page), f"page image {path.name}"
    if synthetic and not words.empty:
        return render_words(words), "the generated certificate rendered from its words"
    return None, "no page image: the data name none for this page (column page_image)"


def render_words(words: pd.DataFrame) -> np.ndarray:
    """One generated page drawn as the generator prints it: its words at their boxes (PDF by
    reportlab), rendered by pdfium at SYNTH_DPI, as uint8 grey."""
    import pypdfium2

    from data_synth.render import render_pdf

    one_page = words.assign(page=1)
    with tempfile.TemporaryDirectory() as scratch:
        pdf_path = render_pdf(one_page, Path(scratch) / "page.pdf")
        pdf = pypdfium2.PdfDocument(str(pdf_path))
        try:
            image = pdf[0].render(scale=SYNTH_DPI / 72.0, grayscale=True).to_pil()
        finally:
            pdf.close()
    return np.asarray(image.convert("L"), dtype=np.uint8)


def jpeg(grey: np.ndarray) -> bytes:
    """The picture at most PICTURE_WIDTH wide (aspect kept), as grey JPEG bytes."""
    from PIL import Image

    image = Image.fromarray(np.asarray(grey, dtype=np.uint8))   # 2-D uint8: mode "L"
    if image.width > PICTURE_WIDTH:
        height = max(1, round(image.height * PICTURE_WIDTH / image.width))
        image = image.resize((PICTURE_WIDTH, height), Image.Resampling.LANCZOS)
    out = io.BytesIO()
    image.save(out, format="JPEG", quality=JPEG_QUALITY, optimize=True)
    return out.getvalue()
