"""PDF text layer import: rendered certificates come back word for word, at their boxes."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from data_synth import generate
from data_synth.render import render_pdf
from dochar.data.importers import import_sources


def iou(a, b) -> float:
    """Intersection over union of two (x0, y0, x1, y1) boxes (common practice)."""
    width = min(a[2], b[2]) - max(a[0], b[0])
    height = min(a[3], b[3]) - max(a[1], b[1])
    if width <= 0 or height <= 0:
        return 0.0
    inter = width * height
    return inter / ((a[2] - a[0]) * (a[3] - a[1]) + (b[2] - b[0]) * (b[3] - b[1]) - inter)


@pytest.fixture(scope="module")
def rendered(tmp_path_factory) -> tuple[pd.DataFrame, Path]:
    folder = tmp_path_factory.mktemp("pdfs")
    truth = generate(4, seed=3)          # document 2 of seed 3 runs to two pages
    for doc_id, document in truth.groupby("doc_id"):
        render_pdf(document, folder / f"{doc_id}.pdf")
    return truth, folder


def test_pdf_import_recovers_the_generated_words_at_their_boxes(rendered) -> None:
    truth, folder = rendered
    table, summary = import_sources([folder], format="pdf")
    assert summary.files == 4 and summary.pages == truth.groupby("doc_id").page.nunique().sum()
    assert set(table.page_width) == {595.0} and set(table.page_height) == {842.0}
    found = 0
    for (doc_id, page), words in truth.groupby(["doc_id", "page"]):
        imported = table[(table.doc_id == doc_id) & (table.page == page)]
        boxes = imported[["x0", "y0", "x1", "y1"]].to_numpy()
        texts = imported.text.tolist()
        for word in words.itertuples():
            box = (word.x0, word.y0, word.x1, word.y1)
            best = max(((iou(box, b), t) for b, t in zip(boxes, texts)), default=(0.0, ""))
            found += best[0] >= 0.9 and best[1] == word.text
    recall = found / len(truth)
    print(f"PDF import: {found} of {len(truth)} words with the same text at IoU >= 0.9 "
          f"({recall:.2%})")
    assert recall >= 0.99


def test_page_without_text_layer_is_reported_and_read_by_ocr_when_asked(tmp_path) -> None:
    """A scanned page saved as PDF: an image, no text. The OCR box must land, in points, on
    the glyphs Pillow drew (their tight box from ImageDraw.textbbox)."""
    pytest.importorskip("pytesseract")
    from tests.data.test_import_ocr import require_tesseract

    require_tesseract()
    import matplotlib
    from PIL import Image, ImageDraw, ImageFont
    from reportlab.lib.utils import ImageReader
    from reportlab.pdfgen.canvas import Canvas

    dpi, page_w, page_h = 200, 300.0, 100.0
    image = Image.new("L", (int(page_w * dpi / 72), int(page_h * dpi / 72)), 255)
    font = ImageFont.truetype(str(Path(matplotlib.get_data_path()) / "fonts/ttf/DejaVuSans.ttf"),
                              60)
    ImageDraw.Draw(image).text((80, 80), "Certificate", font=font, fill=0)
    glyphs = [v * 72 / dpi for v in ImageDraw.Draw(image).textbbox((80, 80), "Certificate",
                                                                   font=font)]
    pdf = Canvas(str(tmp_path / "scan.pdf"), pagesize=(page_w, page_h))
    pdf.drawImage(ImageReader(image), 0, 0, width=page_w, height=page_h)
    pdf.showPage()
    pdf.save()

    with pytest.raises(ValueError, match="no words imported"):
        import_sources([tmp_path / "scan.pdf"])
    from dochar.data.importers.base import ImportSummary
    from dochar.data.importers.pdf import read_pdf

    summary = ImportSummary()
    assert read_pdf(tmp_path / "scan.pdf", "scan", summary) == []
    assert [(p.page, "no text layer" in p.message) for p in summary.problems] == [(1, True)]

    table, summary = import_sources([tmp_path / "scan.pdf"], ocr=True)
    assert table.text.tolist() == ["Certificate"]
    box = table.loc[0, ["x0", "y0", "x1", "y1"]].tolist()
    assert iou(box, glyphs) >= 0.8, (box, glyphs)
    assert table.loc[0, "page_width"] == page_w and "read by OCR" in summary.notes[0]


def test_broken_and_missing_pdfs_are_located_and_skipped(rendered, tmp_path) -> None:
    _, folder = rendered
    whole = (folder / "coa-00000.pdf").read_bytes()
    (tmp_path / "cut.pdf").write_bytes(whole[: len(whole) // 3])
    (tmp_path / "noise.pdf").write_bytes(b"this is not a PDF at all")
    (tmp_path / "gone.pdf").symlink_to(tmp_path / "nowhere.pdf")   # an unreadable file
    table, summary = import_sources([folder / "coa-00001.pdf", tmp_path / "cut.pdf",
                                     tmp_path / "noise.pdf", tmp_path / "gone.pdf"])
    assert set(table.doc_id) == {"coa-00001"}
    reported = {Path(p.source).name: p.message for p in summary.problems}
    assert set(reported) == {"cut.pdf", "noise.pdf", "gone.pdf"}
    assert "not a readable PDF" in reported["noise.pdf"]
    assert "no such file" in reported["gone.pdf"]
