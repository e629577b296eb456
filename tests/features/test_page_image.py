"""Page-image features on drawn images whose ink is known, worked out by hand.

The page below is 100 x 60 page units. Its word box (30, 20, 70, 50) covers pixel columns
30..69 and rows 20..49 (a 40 x 30 crop) at one pixel per unit. A black 20 x 10 bar fills columns
40..59 and rows 30..39 inside it, and a one-pixel line runs across the whole page on row 17 (two
blank rows, 18 and 19, between it and the box). By hand:

- ink share 200 / 1200 = 1/6;
- stroke width: 10 horizontal runs of 20 pixels and 20 vertical runs of 10: min(20, 10) = 10;
- text height: rows 30..39 = 10 pixels, 10 / 30 of the crop;
- band b = max(3, ceil(30 / 2)) = 15. Above: rows 5..19 over columns 15..84 (70 wide): the line
  covers all 70, so 70 / 70 = 1. Below: rows 50..59, no ink: 0. Left: columns 15..29 over rows
  5..59 (55 tall): the line crosses each column once, longest vertical run 1, so 1 / 55; right
  the same; enclosed = min = 0.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from PIL import Image

from dochar.data.word_table import Page
from dochar.features import WordFeaturizer
from dochar.features import page_image as module
from dochar.features.page_image import (
    CROP_SIZE,
    PAGE_IMAGE_NAMES,
    PageImageError,
    PageImageReader,
    otsu_threshold,
)

COLUMN = {name: i for i, name in enumerate(PAGE_IMAGE_NAMES)}
BOX = (30.0, 20.0, 70.0, 50.0)


def _page(image: str | None, boxes=(BOX,), size=(100.0, 60.0)) -> Page:
    boxes = np.array(boxes, dtype=np.float64)
    return Page(doc_id="coa-1", page=1, word_ids=np.arange(len(boxes)),
                texts=["Assay"] * len(boxes), boxes=boxes, width=size[0], height=size[1],
                image=image)


def _draw(path, scale: int = 1, grid: bool = False) -> str:
    """The page of the module notes at ``scale`` pixels per page unit, as a PNG."""
    grey = np.full((60 * scale, 100 * scale), 255, dtype=np.uint8)
    grey[30 * scale:40 * scale, 40 * scale:60 * scale] = 0
    grey[20 * scale - 3, :] = 0                          # two blank rows above the box
    if grid:                                             # a drawn cell around the word
        grey[50 * scale + 2, :] = 0
        grey[:, 30 * scale - 3] = 0
        grey[:, 70 * scale + 2] = 0
    Image.fromarray(grey).save(path)
    return str(path)


def _features(image: str | None, **page) -> np.ndarray:
    return PageImageReader(None)(_page(image, **page)).features[0]


def test_features_of_a_drawn_word_match_the_hand_worked_values(tmp_path):
    got = _features(_draw(tmp_path / "page.png"))
    expected = {"ink_share": 200 / 1200, "stroke_width_px": 10, "text_height_px": 10,
                "text_height_share": 10 / 30, "rule_above": 1.0, "rule_below": 0.0,
                "rule_left": 1 / 55, "rule_right": 1 / 55, "enclosed": 0.0,
                "page_image_missing": 0.0}
    assert got == pytest.approx([expected[name] for name in PAGE_IMAGE_NAMES], abs=1e-6)


def test_pixel_columns_scale_with_the_image_and_shares_do_not(tmp_path):
    """Twice the pixels per page unit: the crop is 80 x 60 with a 40 x 20 bar; lengths double
    (stroke 20, text height 20), shares stay; b = 30, so left spans rows 10..119 (110): 1/110."""
    got = _features(_draw(tmp_path / "page.png", scale=2))
    assert got[COLUMN["ink_share"]] == pytest.approx(1 / 6)
    assert got[COLUMN["stroke_width_px"]] == 20
    assert got[COLUMN["text_height_px"]] == 20
    assert got[COLUMN["text_height_share"]] == pytest.approx(1 / 3)
    assert got[COLUMN["rule_above"]] == pytest.approx(1.0)
    assert got[COLUMN["rule_left"]] == pytest.approx(1 / 110)


def test_a_drawn_cell_around_the_word_is_enclosed(tmp_path):
    """Full-length lines two pixels outside every side: each side's run spans its widened
    extent (70 columns above and below, 55 rows left and right), so every rule is 1."""
    got = _features(_draw(tmp_path / "page.png", grid=True))
    for name in ("rule_above", "rule_below", "rule_left", "rule_right", "enclosed"):
        assert got[COLUMN[name]] == pytest.approx(1.0), name
    assert got[COLUMN["ink_share"]] == pytest.approx(1 / 6)   # the lines stay outside the crop


def test_crop_for_the_cnn_keeps_the_ink_share(tmp_path):
    crops = PageImageReader(None)(_page(_draw(tmp_path / "page.png"))).crops
    assert crops.shape == (1, *CROP_SIZE) and crops.dtype == np.uint8
    # bilinear resizing spreads edges but keeps the mean ink (common practice): 1/6 of 255
    assert crops[0].mean() / 255 == pytest.approx(1 / 6, abs=0.03)


def test_otsu_threshold_minimises_the_within_class_variance():
    """Otsu (IEEE SMC 1979): maximising the between-class variance is the same as minimising
    the weighted within-class variance; the oracle tries every threshold by brute force."""
    rng = np.random.default_rng(0)
    grey = np.clip(np.concatenate([rng.normal(60, 20, 3000), rng.normal(190, 30, 7000)]),
                   0, 255).astype(np.uint8)

    def within(t: int) -> float:
        low, high = grey[grey <= t].astype(float), grey[grey > t].astype(float)
        return low.size * low.var() + high.size * high.var()

    candidates = [t for t in range(255) if 0 < (grey <= t).sum() < grey.size]
    best = min(candidates, key=within)
    assert within(otsu_threshold(grey)) == pytest.approx(within(best))
    assert otsu_threshold(np.full((4, 4), 200, dtype=np.uint8)) is None


def test_a_missing_image_gives_zeros_an_indicator_and_a_count(tmp_path):
    (tmp_path / "text.png").write_text("not an image")
    featurizer = WordFeaturizer(groups=["geometry", "page_image"], image_cache=None)
    pages = [_page(None), _page(str(tmp_path / "gone.png")), _page(str(tmp_path / "text.png"))]
    for index, page in enumerate(pages):
        page.doc_id = f"coa-{index}"
    rows = [featurizer.fit(pages).transform(page) for page in pages]
    image_columns = [i for i, n in enumerate(featurizer.feature_names) if n.startswith("image:")]
    for row in rows:
        assert row[0, image_columns].tolist() == [0.0] * (len(PAGE_IMAGE_NAMES) - 1) + [1.0]
    assert featurizer.missing_image_pages == 3
    assert "not readable" in featurizer.images.missing_pages["coa-2#p1"]


def test_strict_mode_names_the_page_without_an_image(tmp_path):
    reader = PageImageReader(None, strict=True)
    with pytest.raises(PageImageError, match=r"page coa-1#p1: page image missing .*gone\.png"):
        reader(_page(str(tmp_path / "gone.png")))


def test_features_are_cached_by_path_and_modification_time(tmp_path, monkeypatch):
    path = _draw(tmp_path / "page.png")
    calls = []
    real = module.page_crops
    monkeypatch.setattr(module, "page_crops", lambda grey, page: calls.append(1) or real(grey, page))
    first = PageImageReader(tmp_path / "cache")
    first(_page(path))
    first(_page(path))
    assert len(calls) == 1                                  # memory
    PageImageReader(tmp_path / "cache")(_page(path))
    assert len(calls) == 1                                  # disk, in a fresh reader
    stat = os.stat(path)
    os.utime(path, ns=(stat.st_atime_ns, stat.st_mtime_ns + 10**9))
    PageImageReader(tmp_path / "cache")(_page(path))
    assert len(calls) == 2                                  # a changed file is read again


def test_a_pdf_page_is_rendered(tmp_path):
    """A PDF page_image is rendered by pdfium (skipped without it): a word drawn in black
    has ink, the blank corner of the page has none."""
    pytest.importorskip("pypdfium2")
    pytest.importorskip("reportlab")
    import pandas as pd

    from data_synth.render import render_pdf

    words = pd.DataFrame({"doc_id": ["coa-1"], "page": [1], "word_id": [0], "text": ["Lead"],
                          "x0": [100.0], "y0": [100.0], "x1": [160.0], "y1": [120.0],
                          "page_width": [300.0], "page_height": [200.0]})
    pdf = render_pdf(words, tmp_path / "coa-1.pdf")
    got = PageImageReader(None)(_page(str(pdf), boxes=[(100, 100, 160, 120), (0, 0, 20, 20)],
                                      size=(300.0, 200.0))).features
    assert got[0, COLUMN["ink_share"]] > 0.1 and got[1, COLUMN["ink_share"]] == 0.0
    assert got[:, COLUMN["page_image_missing"]].tolist() == [0.0, 0.0]
