"""Page overlays drawn over the page itself, with the edges the run kept, as Chromium shows them.

Two real runs of `dochar.experiment`: a demo-like one on generated certificates (no scan exists,
so the run renders each drawn page from its words) and one on FUNSD scans. For each, the report
is opened in headless Chromium: every drawn page shows a picture that decodes, edges, and a
legend naming exactly the edge kinds drawn. The embedded pictures are then checked against the
page itself: the FUNSD scan file, or, for a generated page, where its words' boxes lie.
"""

from __future__ import annotations

import base64
import io
import re

import numpy as np
import pytest
from PIL import Image

from dochar.report import write_report
from tests.helpers import REPO, require_dataset
from tests.helpers.browser import LAUNCH_ARGS, require_chromium

QUICK = ["train.progress=false", "tracking.enabled=false", "evaluation.bootstrap_resamples=50",
         "features=geometry_text", "model=random_forest", "model.options.n_estimators=20"]
FUNSD_FORMS = {"training_data": 6, "testing_data": 3}


def _run(overrides: list[str]):
    from hydra import compose, initialize_config_dir

    from dochar.config import CONFIG_DIR
    from dochar.experiment import run_experiment

    with initialize_config_dir(str(CONFIG_DIR), version_base=None):
        return run_experiment(compose("config", overrides=[*QUICK, *overrides]))[0]


@pytest.fixture(scope="module")
def synth_run():
    return _run(["data.documents=30", "split=seen_and_unseen_layouts"])


@pytest.fixture(scope="module")
def funsd_run(tmp_path_factory):
    """FUNSD's first forms of each official part (symlinks), run on the fixed split."""
    root = require_dataset("funsd")
    small = tmp_path_factory.mktemp("funsd_pictures")
    for part, count in FUNSD_FORMS.items():
        for sub in ("annotations", "images"):
            (small / part / sub).mkdir(parents=True)
        for annotation in sorted((root / part / "annotations").glob("*.json"))[:count]:
            (small / part / "annotations" / annotation.name).symlink_to(annotation)
            (small / part / "images" / f"{annotation.stem}.png").symlink_to(
                root / part / "images" / f"{annotation.stem}.png")
    return _run(["data=funsd", f"data.path={small}", "split=fixed"])


def _shown(report_path, screenshot: str) -> dict:
    """What Chromium shows of each overlay: picture sizes once decoded, drawn box, edge paths
    with their colours, and the legend's edge entries with theirs."""
    chromium = require_chromium()
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(chromium), args=LAUNCH_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 900})
            page.goto(report_path.as_uri(), wait_until="load")
            overlays = page.eval_on_selector_all(".overlay svg.page", """svgs => Promise.all(
                svgs.map(async svg => {
                    const pictures = [...svg.querySelectorAll('image')];
                    const sizes = await Promise.all(pictures.map(async el => {
                        const img = new Image();
                        img.src = el.getAttribute('href');
                        await img.decode();
                        return [img.naturalWidth, img.naturalHeight,
                                el.getBoundingClientRect().width];
                    }));
                    const edges = [...svg.querySelectorAll('path.edge')].map(path =>
                        getComputedStyle(path).stroke);
                    return {sizes, edges, width: svg.getBoundingClientRect().width};
                }))""")
            legend = page.eval_on_selector_all(
                "#pages .legend span", """spans => spans.filter(s => s.textContent.startsWith(
                    'edge: ')).map(s => [s.textContent.slice(6),
                    getComputedStyle(s.querySelector('i')).backgroundColor])""")
            shot = REPO / "test-artifacts" / screenshot
            shot.parent.mkdir(parents=True, exist_ok=True)
            page.locator("#pages").screenshot(path=str(shot))
        finally:
            browser.close()
    return {"overlays": overlays, "legend": legend}


def _check_shown(shown: dict, bundle) -> None:
    overlays = shown["overlays"]
    assert len(overlays) == 3   # the report's default number of pages
    for overlay in overlays:
        # one picture, decoded by the browser, filling the drawn page's width
        (natural_width, natural_height, drawn_width), = overlay["sizes"]
        assert natural_width > 0 and natural_height > 0
        assert drawn_width == pytest.approx(overlay["width"], rel=0.01)   # less its border
        assert overlay["edges"], "a drawn page without edges"
    # the legend names each edge kind drawn, in the colour it is drawn in, and no other
    drawn_colours = {colour for overlay in overlays for colour in overlay["edges"]}
    assert {colour for _, colour in shown["legend"]} == drawn_colours
    assert len(shown["legend"]) == len(drawn_colours)
    assert {name for name, _ in shown["legend"]} <= set(bundle.edges["relation"].astype(str))


def _pictures(html: str) -> list[tuple[str, int, np.ndarray]]:
    """(doc_id, page, grey pixels) of each picture embedded in the report."""
    found = re.findall(r'<div class="overlay" data-doc="([^"]+)" data-page="(\d+)">'
                       r'<svg[^>]*>.*?href="data:image/jpeg;base64,([^"]+)"', html, flags=re.S)
    return [(doc, int(page), np.asarray(Image.open(io.BytesIO(base64.b64decode(data)))
                                        .convert("L"), dtype=float))
            for doc, page, data in found]


@pytest.mark.browser
def test_generated_pages_are_drawn_over_their_rendering_with_edges(synth_run, tmp_path):
    path = write_report([synth_run], tmp_path / "synth.html")
    _check_shown(_shown(path, "overlay-synth.png"), synth_run)
    pictures = _pictures(path.read_text())
    assert len(pictures) == 3
    predictions = synth_run.predictions
    for doc_id, page, grey in pictures:
        words = predictions[(predictions["doc_id"] == doc_id) & (predictions["page"] == page)]
        scale_x = grey.shape[1] / float(words["page_width"].iloc[0])
        scale_y = grey.shape[0] / float(words["page_height"].iloc[0])
        inside = np.zeros(grey.shape, dtype=bool)
        for box in words[["x0", "y0", "x1", "y1"]].to_numpy(dtype=float):
            x0, x1 = int(np.floor(box[0] * scale_x)) - 1, int(np.ceil(box[2] * scale_x)) + 1
            y0, y1 = int(np.floor(box[1] * scale_y)) - 1, int(np.ceil(box[3] * scale_y)) + 1
            inside[max(y0, 0):y1, max(x0, 0):x1] = True
        ink = grey < 128   # dark pixels of a white page (common practice: half the grey range)
        # the picture is this page: its ink lies in the boxes drawn over it (rendering from
        # the words puts each word in its box; another page's words would not fit these boxes)
        assert ink.sum() > 500
        assert (ink & inside).sum() / ink.sum() > 0.95


@pytest.mark.browser
def test_funsd_pages_are_drawn_over_their_scans_with_edges(funsd_run, tmp_path):
    path = write_report([funsd_run], tmp_path / "funsd.html")
    _check_shown(_shown(path, "overlay-funsd.png"), funsd_run)
    pictures = _pictures(path.read_text())
    assert len(pictures) == 3
    root = require_dataset("funsd")
    for doc_id, _, grey in pictures:
        # the scan of this very form, downscaled the same way by Pillow here (the embedded copy
        # is a JPEG: close, not equal); another form's scan differs far more
        (scan,) = root.glob(f"*/images/{doc_id}.png")
        with Image.open(scan) as opened:
            own = np.asarray(opened.convert("L").resize(grey.shape[::-1]), dtype=float)
        others = [p for p in sorted((root / "testing_data" / "images").glob("*.png"))
                  if p.stem != doc_id][:1]
        with Image.open(others[0]) as opened:
            other = np.asarray(opened.convert("L").resize(grey.shape[::-1]), dtype=float)
        assert np.abs(grey - own).mean() < 8
        assert np.abs(grey - other).mean() > 2 * np.abs(grey - own).mean()
