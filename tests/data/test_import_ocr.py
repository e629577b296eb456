"""Page images through Tesseract: rendered certificates (known truth) and FUNSD scans (real).

Few and small on purpose: each page costs Tesseract about a second on one core.
"""

from __future__ import annotations

import os
import shutil

import pytest

from data_synth import generate
from data_synth.render import ScanNoise, render_documents
from dochar.data.importers import import_sources
from dochar.data.importers.form_json import import_form_json
from dochar.data.importers.label_transfer import box_iou, match_boxes

FUNSD_TEST_PAGES = ("82092117", "82200067_0069", "82250337_0338")


def require_tesseract() -> None:
    """Skip without Tesseract, except in CI (``DOCHAR_REQUIRE_DATASETS=1``), which installs it."""
    if shutil.which("tesseract") is None:
        if os.environ.get("DOCHAR_REQUIRE_DATASETS") == "1":
            pytest.fail("tesseract is not installed (apt-get install tesseract-ocr)")
        pytest.skip("tesseract is not installed")


def test_rendered_scan_through_tesseract_takes_its_labels_back(tmp_path) -> None:
    """Truth boxes in pixels from the renderer; labels move to Tesseract's words by IoU >= 0.5.
    The recall floor is a regression pin on Tesseract, not a correctness check of dochar: it was
    measured on this page (seed 0, document 1, 205 words, 150 dpi, blur 0.5 px, skew up to
    0.3 degrees, speckle 0.1%) with Tesseract 5.3.0: recall 0.927 (190 of 205, 2026-12-02);
    the floor 0.85 leaves room for other Tesseract versions. The correctness checks are the
    rest: every truth word paired, labels only from the truth, confidences in [0, 1]."""
    require_tesseract()
    truth = generate(2, seed=0)
    render_documents(truth[truth.doc_id == "coa-00001"], tmp_path, {"png"}, dpi=150,
                     noise=ScanNoise(blur=0.5, skew=0.3, speckle=0.001))
    pixel_truth = tmp_path / "truth_images.parquet"
    table, summary = import_sources([tmp_path / "coa-00001_page1.png"],
                                    labels_from=pixel_truth)
    report = summary.transfer
    print("\n".join(report.lines(shown=5)))
    assert report.pages_paired == 1 and report.labelled_words == (truth.doc_id == "coa-00001").sum()
    assert report.recall >= 0.85
    assert set(table.label) <= set(truth.label) and (table.label != "").all()
    assert table.confidence.between(0, 1).all()


def test_tesseract_on_funsd_scans_matches_funsd_word_boxes(funsd_root) -> None:
    """FUNSD (Jaume et al., 2019) test images against their own annotated word boxes,
    one-to-one at IoU >= 0.5. The floor is a regression pin on Tesseract's reading, not a
    correctness check: measured with Tesseract 5.3.0 on these three pages (2026-12-02),
    0.690 (417 of 604); the floor 0.6 sits below it. Low-resolution scans (754 px wide) of
    typewriter and fax text: one page alone matched 80 of 167."""
    require_tesseract()
    root = funsd_root / "testing_data"
    matched = total = 0
    for name in FUNSD_TEST_PAGES:
        words, _ = import_form_json([root / "annotations" / f"{name}.json"])
        table, _ = import_sources([root / "images" / f"{name}.png"])
        assert table.page_width.iloc[0] == words.page_width.iloc[0]   # both the PNG size
        iou = box_iou(words[["x0", "y0", "x1", "y1"]].to_numpy(float),
                      table[["x0", "y0", "x1", "y1"]].to_numpy(float))
        pairs = match_boxes(iou, 0.5, "hungarian")
        print(f"{name}: {len(pairs)} of {len(words)} FUNSD words matched")
        matched, total = matched + len(pairs), total + len(words)
    print(f"FUNSD, Tesseract word match rate: {matched / total:.3f} ({matched} of {total})")
    assert matched / total >= 0.6
