"""The report's colours hold up for colour-blind readers and cell labels stay legible, checked
with published models: colour-vision deficiency simulated by Machado, Oliveira & Fernandes
(IEEE TVCG 2009) in colorspacious, distances in CAM02-UCS (Luo, Cui & Li, 2006), and the WCAG 2.1
contrast ratio (W3C, success criterion 1.4.3)."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from matplotlib import colormaps
from matplotlib.colors import to_rgb

from dochar.report.overlay import EDGE_COLOURS, PALETTE
from dochar.report.plots import OKABE_ITO, text_colour

colorspacious = pytest.importorskip("colorspacious", reason="the 'test' extra is not installed")

DEFICIENCIES = ("deuteranomaly", "protanomaly", "tritanomaly")
# Ten CAM02-UCS units: about ten just-noticeable differences (a unit is roughly one, Luo et al.
# 2006); the bar for "clearly different" is our own choice, not a published figure.
CLEARLY_APART = 10.0


def smallest_distance(colours, deficiency: str | None) -> float:
    rgb = np.array([to_rgb(c) for c in colours])
    if deficiency is not None:   # severity 100: complete dichromacy
        rgb = np.clip(colorspacious.cspace_convert(
            rgb, {"name": "sRGB1+CVD", "cvd_type": deficiency, "severity": 100}, "sRGB1"), 0, 1)
    ucs = colorspacious.cspace_convert(rgb, "sRGB1", "CAM02-UCS")
    return min(float(np.linalg.norm(ucs[i] - ucs[j]))
               for i, j in itertools.combinations(range(len(ucs)), 2))


@pytest.mark.parametrize("deficiency", [None, *DEFICIENCIES])
@pytest.mark.parametrize("colours", [PALETTE, EDGE_COLOURS, OKABE_ITO],
                         ids=["class fills", "edge lines", "plot lines"])
def test_categorical_colours_stay_apart_under_colour_blindness(colours, deficiency):
    assert smallest_distance(colours, deficiency) >= CLEARLY_APART


def _luminance(rgb) -> float:
    # WCAG 2.1 relative luminance: linearised sRGB channels weighted 0.2126, 0.7152, 0.0722.
    linear = [c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
    return 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]


@pytest.mark.parametrize("cmap", ["cividis", "cividis_r"])
def test_numbers_on_heatmap_cells_have_readable_contrast(cmap):
    # WCAG 2.1 contrast ratio (L1 + 0.05) / (L2 + 0.05); 4.5:1 is level AA for normal text.
    for value in np.linspace(0, 1, 201):
        cell = _luminance(colormaps[cmap](value)[:3])
        text = _luminance(to_rgb(text_colour(cmap, value)))
        lighter, darker = max(cell, text), min(cell, text)
        assert (lighter + 0.05) / (darker + 0.05) >= 4.5, (cmap, value)


def _cell_colour(data_uri: str) -> np.ndarray:
    """The most frequent colour of a one-cell heatmap that is not paper, ink or white."""
    import base64
    import io

    import matplotlib.image

    pixels = matplotlib.image.imread(io.BytesIO(base64.b64decode(data_uri.split(",", 1)[1])))
    rgb = np.round(pixels[..., :3].reshape(-1, 3) * 255).astype(int)
    grey = np.ptp(rgb, axis=1) < 12   # paper, white, ink, greys of labels and frames
    colours, counts = np.unique(rgb[~grey], axis=0, return_counts=True)
    return colours[counts.argmax()]


def test_every_heatmap_is_darker_where_better():
    # One reading for the whole page: a high F1 and a large share of a true class (the
    # diagonal of a confusion matrix: words labelled right) are dark, low values light.
    from dochar.report.plots import confusion_panels, f1_heatmap

    def f1_cell(value: float) -> np.ndarray:
        return _cell_colour(f1_heatmap(["run"], ["class"], np.array([[value]])))

    def confusion_cell(value: float) -> np.ndarray:
        return _cell_colour(confusion_panels([("run", ["class"], np.array([[value]]))]))

    for value in (0.3, 0.9):   # the same value, the same colour on both kinds of map
        assert np.abs(f1_cell(value) - confusion_cell(value)).max() <= 2
    assert _luminance(f1_cell(0.9) / 255) < _luminance(f1_cell(0.3) / 255)
