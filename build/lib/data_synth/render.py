"""Render generated certificates as PDFs and page images, so import can be tested with known truth.

PDF: every word is drawn at its own box in the generator's page units (points, origin top-left).
Its font size is the box height and its horizontal scale stretches the glyphs to the box width;
the baseline sits at ``y0 + size * (1 + descent)`` (descent < 0, as a fraction of the size, from
the font's own metrics), which is where a PDF text extractor that takes a glyph box to be one
font size tall, starting at the descent below the baseline (pdfminer's convention), puts its top.

Page images are the PDF rendered by pdfium at ``dpi``; their truth boxes are the word boxes in
image pixels (``points * dpi / 72``) and their ``page_image`` names the PNG, relative to the
folder of ``truth_images.parquet`` beside it. Optional scan noise: Gaussian blur, a small skew
(the truth boxes become the axis-aligned hull of their rotated corners) and salt-and-pepper
speckle.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from pathlib import Path

import numpy as np
import pandas as pd

POINTS_PER_INCH = 72.0
_FONT_NAME = "DejaVuSans"


@dataclass(frozen=True)
class ScanNoise:
    """blur: Gaussian radius in pixels; skew: largest rotation in degrees (drawn uniformly in
    [-skew, skew] per page); speckle: fraction of pixels set to black or white."""

    blur: float = 0.0
    skew: float = 0.0
    speckle: float = 0.0

    def __post_init__(self) -> None:
        for spec in fields(self):
            value = getattr(self, spec.name)
            if not np.isfinite(value) or value < 0:
                raise ValueError(f"ScanNoise.{spec.name} must be a finite number >= 0, "
                                 f"got {value!r}")
        if self.speckle > 1:
            raise ValueError(f"ScanNoise.speckle is a fraction of pixels, got {self.speckle!r}")


def _register_font() -> tuple[str, float]:
    """DejaVu Sans (shipped with matplotlib, so always present) covers µ, ° and ≤."""
    import matplotlib
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont

    if _FONT_NAME not in pdfmetrics.getRegisteredFontNames():
        font_file = Path(matplotlib.get_data_path()) / "fonts" / "ttf" / "DejaVuSans.ttf"
        pdfmetrics.registerFont(TTFont(_FONT_NAME, str(font_file)))
    _, descent = pdfmetrics.getAscentDescent(_FONT_NAME, 1000.0)
    return _FONT_NAME, descent / 1000.0


def render_pdf(document: pd.DataFrame, path: str | Path) -> Path:
    """Write one document's words (a word-table slice in points) as a PDF, one PDF page per page."""
    from reportlab.pdfbase.pdfmetrics import stringWidth
    from reportlab.pdfgen.canvas import Canvas

    font, descent = _register_font()
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    first = document.iloc[0]
    pdf = Canvas(str(path), pagesize=(float(first.page_width), float(first.page_height)),
                 invariant=1)
    for _, words in document.sort_values(["page", "word_id"]).groupby("page", sort=True):
        width, height = float(words.page_width.iloc[0]), float(words.page_height.iloc[0])
        pdf.setPageSize((width, height))
        for word in words.itertuples(index=False):
            size = float(word.y1 - word.y0)
            natural = stringWidth(str(word.text), font, size)
            if not word.text or size <= 0 or natural <= 0:
                continue
            text = pdf.beginText()
            text.setFont(font, size)
            text.setHorizScale(100.0 * float(word.x1 - word.x0) / natural)
            text.setTextOrigin(float(word.x0), height - (float(word.y0) + size * (1 + descent)))
            text.textOut(str(word.text))
            pdf.drawText(text)
        pdf.showPage()
    pdf.save()
    return path


def _skew_boxes(boxes: np.ndarray, degrees: float, size: tuple[int, int]) -> np.ndarray:
    """Where Pillow's counter-clockwise ``rotate`` about the image centre moves each box:
    the hull of its four rotated corners (y grows downwards, so the matrix signs flip)."""
    cx, cy = size[0] / 2.0, size[1] / 2.0
    theta = np.deg2rad(degrees)
    cos, sin = np.cos(theta), np.sin(theta)
    xs = boxes[:, [0, 2, 2, 0]] - cx
    ys = boxes[:, [1, 1, 3, 3]] - cy
    new_x = cx + xs * cos + ys * sin
    new_y = cy - xs * sin + ys * cos
    hull = np.column_stack([new_x.min(1), new_y.min(1), new_x.max(1), new_y.max(1)])
    return np.clip(hull, 0, [size[0], size[1], size[0], size[1]])


def _scan(image, noise: ScanNoise, rng: np.random.Generator):
    from PIL import Image, ImageFilter

    angle = float(rng.uniform(-noise.skew, noise.skew)) if noise.skew else 0.0
    if angle:
        image = image.rotate(angle, resample=Image.Resampling.BICUBIC, fillcolor=255)
    if noise.blur:
        image = image.filter(ImageFilter.GaussianBlur(noise.blur))
    if noise.speckle:
        pixels = np.asarray(image).copy()
        hits = rng.random(pixels.shape) < noise.speckle
        pixels[hits] = np.where(rng.random(int(hits.sum())) < 0.5, 0, 255)
        image = Image.fromarray(pixels)
    return image, angle


def render_page_images(pdf_path: str | Path, document: pd.DataFrame, out_dir: str | Path, *,
                       dpi: float = 150.0, noise: ScanNoise | None = None,
                       rng: np.random.Generator | None = None) -> pd.DataFrame:
    """Write ``<doc_id>_page<N>.png`` per page of the PDF; return the truth boxes in pixels."""
    import pypdfium2

    if not 50 <= dpi <= 600:
        raise ValueError(f"dpi must be between 50 and 600, got {dpi!r}")
    noise = noise or ScanNoise()
    rng = rng or np.random.default_rng(0)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    scale = dpi / POINTS_PER_INCH
    truth = []
    pdf = pypdfium2.PdfDocument(str(pdf_path))
    try:
        for page_no, words in document.groupby("page", sort=True):
            image = pdf[int(page_no) - 1].render(scale=scale, grayscale=True).to_pil()
            image = image.convert("L")
            image, angle = _scan(image, noise, rng)
            name = f"{words.doc_id.iloc[0]}_page{int(page_no)}.png"
            image.save(out_dir / name, dpi=(dpi, dpi))
            boxes = words[["x0", "y0", "x1", "y1"]].to_numpy(dtype=float) * scale
            if angle:
                boxes = _skew_boxes(boxes, angle, image.size)
            page = words.copy()
            page[["x0", "y0", "x1", "y1"]] = np.round(boxes, 2)
            page["page_width"], page["page_height"] = float(image.width), float(image.height)
            page["page_image"] = name   # relative: resolved against the truth table's folder
            truth.append(page)
    finally:
        pdf.close()
    return pd.concat(truth, ignore_index=True)


def render_documents(table: pd.DataFrame, out_dir: str | Path, formats: set[str], *,
                     dpi: float = 150.0, noise: ScanNoise | None = None,
                     seed: int = 0) -> dict[str, int]:
    """Render every document of a generated table; image truth goes to ``truth_images.parquet``.

    Images are rendered from the PDFs, so asking for ``png`` alone still writes the PDFs.
    """
    from dochar.data.word_table import write_word_table

    unknown = formats - {"pdf", "png"}
    if unknown:
        raise ValueError(f"unknown render format(s) {sorted(unknown)}; choose pdf and/or png")
    out_dir = Path(out_dir)
    counts = {"pdf": 0, "png": 0}
    truths = []
    for index, (doc_id, document) in enumerate(table.groupby("doc_id", sort=True)):
        pdf_path = render_pdf(document, out_dir / f"{doc_id}.pdf")
        counts["pdf"] += 1
        if "png" in formats:
            truths.append(render_page_images(pdf_path, document, out_dir, dpi=dpi, noise=noise,
                                             rng=np.random.default_rng([seed, index, 2])))
            counts["png"] += document["page"].nunique()
    if truths:
        write_word_table(pd.concat(truths, ignore_index=True), out_dir / "truth_images.parquet")
    return counts
