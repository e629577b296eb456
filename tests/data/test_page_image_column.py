"""The optional ``page_image`` column: one value per page, paths relative to the table's folder,
filled by the importers that know the page's image."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from data_synth import generate
from data_synth.render import render_documents, render_pdf
from dochar.data.importers import import_sources
from dochar.data.importers.form_json import import_form_json
from dochar.data.word_table import (
    WordTableError,
    iter_pages,
    read_word_table,
    validate_word_table,
    write_word_table,
)
from dochar.features.page_image import PAGE_IMAGE_NAMES, PageImageReader
from dochar.tasks.segment_labels import segment_page


def _words(images: list[str]) -> pd.DataFrame:
    return pd.DataFrame([{"doc_id": "coa-7", "page": 1, "word_id": i, "text": "Zinc",
                          "x0": 1.0, "y0": 1.0, "x1": 2.0, "y1": 2.0, "page_width": 10.0,
                          "page_height": 10.0, "page_image": image}
                         for i, image in enumerate(images)])


def test_two_images_on_one_page_are_located_and_the_document_skipped():
    report = validate_word_table(_words(["a.png", "a.png", "b.png"]), source="coa.csv")
    assert report.documents_used == 0
    [problem] = report.problems
    assert (problem.row, problem.column, problem.doc_id) == (3, "page_image", "coa-7")
    assert "page 1: page_image 'b.png' differs from 'a.png'" in str(problem)
    with pytest.raises(WordTableError, match="coa.csv, row 2, column 'page_image'"):
        validate_word_table(_words(["a.png", "b.png"]), source="coa.csv", strict=True)


def test_relative_paths_start_at_the_tables_folder(tmp_path):
    folder = tmp_path / "tables"
    write_word_table(_words(["scans/p1.png"] * 2), folder / "words.csv")
    write_word_table(_words(["/srv/scans/p1.png"] * 2), folder / "absolute.parquet")
    write_word_table(_words([""] * 2), folder / "none.csv")
    pages = [next(iter_pages(validate_word_table(read_word_table(folder / name)).table))
             for name in ("words.csv", "absolute.parquet", "none.csv")]
    assert [page.image for page in pages] == [str(folder / "scans" / "p1.png"),
                                              "/srv/scans/p1.png", None]
    assert segment_page(pages[0], ["e1", "e1"], None).image == pages[0].image


def test_funsd_pages_name_their_scans(funsd_root):
    frame, _ = import_form_json([funsd_root / "testing_data" / "annotations"])
    images = frame.groupby("doc_id")["page_image"].agg(set)
    assert (images.map(len) == 1).all() and len(images) == 50      # FUNSD: 50 test forms
    for doc_id, (image,) in images.items():
        assert Path(image) == (funsd_root / "testing_data" / "images" / f"{doc_id}.png").resolve()


def test_pdf_pages_name_their_pdf(tmp_path):
    truth = generate(1, seed=0)
    pdf = render_pdf(truth, tmp_path / "coa.pdf")
    table, _ = import_sources([pdf], format="pdf")
    assert set(table.page_image) == {str(pdf.resolve())}


def test_rendered_certificates_name_their_png_and_it_has_ink_under_the_words(tmp_path):
    """The generator's page images: the truth table names each PNG relative to its own folder;
    read back, every word's crop holds ink (its text is drawn there) and no page is missing."""
    truth = generate(1, seed=0)
    render_documents(truth, tmp_path / "render", {"png"}, dpi=100)
    table = validate_word_table(read_word_table(tmp_path / "render" / "truth_images.parquet"))
    pages = list(iter_pages(table.table))
    assert all(Path(page.image).is_file() for page in pages)
    features = np.concatenate([PageImageReader(None)(page).features for page in pages])
    assert (features[:, PAGE_IMAGE_NAMES.index("ink_share")] > 0).mean() > 0.99
    assert features[:, PAGE_IMAGE_NAMES.index("page_image_missing")].sum() == 0


def test_a_single_frame_image_is_its_pages_image_and_a_tiff_frame_is_not(tmp_path, monkeypatch):
    """Tesseract is replaced by one fixed word, so the test needs no OCR engine."""
    from PIL import Image

    from dochar.data.importers import image as image_importer

    monkeypatch.setattr(image_importer, "ocr_words",
                        lambda picture, settings: [("Lead", 1.0, 1.0, 5.0, 5.0, 0.9)])
    Image.new("L", (20, 10), 255).save(tmp_path / "scan.png")
    frames = [Image.new("L", (20, 10), 255), Image.new("L", (20, 10), 0)]
    frames[0].save(tmp_path / "stack.tif", save_all=True, append_images=frames[1:])
    table, _ = import_sources([tmp_path / "scan.png", tmp_path / "stack.tif"], format="image")
    images = table.groupby(["doc_id", "page"])["page_image"].first().to_dict()
    assert images == {("scan", 1): str((tmp_path / "scan.png").resolve()),
                      ("stack", 1): "", ("stack", 2): ""}
