"""Matplotlib figures of the report, each returned as a base64 PNG data URI.

Figures are built with the object API (``matplotlib.figure.Figure``, rendered by the Agg canvas),
so nothing touches pyplot's global state or the user's backend and each figure is freed as
soon as its bytes are taken. DPI stays at or below 100 to keep the page small.

Colours are chosen for colour-blind readers: heatmaps use cividis, a colormap made to be
perceptually uniform and read alike by people with and without red-green colour-vision
deficiency (Nuñez, Anderton & Renslow, PLoS ONE 13(7): e0199239, 2018); line series use the
Okabe & Ito palette ("Color Universal Design", 2008) and differ in marker shape too. Every
heatmap reads the same way: the darker a cell, the higher its value (F1, or the share of a
true class), so dark is better on the F1 map and on a confusion matrix's diagonal.
"""

from __future__ import annotations

import base64
import io
from collections.abc import Sequence

import numpy as np
import pandas as pd
from matplotlib import colormaps, rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from dochar.report.summaries import Reliability

DPI = 100
NAME_LIMIT = 42
INK, SOFT, RULE = "#1b2631", "#4f5d6b", "#b8c4cc"       # the page's colours (page.STYLE)
MISSING = "#ffffff"                                     # cells without a value stay blank
HEATMAP = "cividis_r"                                   # dark = high, on every heatmap
OKABE_ITO = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000",
             "#F0E442")
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
FIGURE_STYLE = {"font.family": "DejaVu Sans", "font.size": 9, "text.color": INK,
                "axes.edgecolor": SOFT, "axes.labelcolor": INK, "xtick.color": SOFT,
                "ytick.color": SOFT, "xtick.labelcolor": INK, "ytick.labelcolor": INK,
                "axes.spines.top": False, "axes.spines.right": False, "grid.color": RULE,
                "figure.facecolor": "#fcfcf9", "savefig.facecolor": "#fcfcf9"}


def plain(text: str, limit: int = NAME_LIMIT) -> str:
    """Text safe for matplotlib (no mathtext from ``$``), shortened for axis labels."""
    text = str(text)
    if len(text) > limit:
        text = text[: limit - 1] + "…"
    return text.replace("$", r"\$")


def to_data_uri(figure: Figure) -> str:
    FigureCanvasAgg(figure)
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=DPI, bbox_inches="tight",
                   metadata={"Software": None})
    figure.clear()
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def text_colour(cmap_name: str, value: float, top: float = 1.0) -> str:
    """Black on light cells, white on dark ones, by the cell colour's relative luminance
    (WCAG 2.x definition, sRGB linearised)."""
    red, green, blue, _ = colormaps[cmap_name](min(max(value / top, 0.0), 1.0))
    linear = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4
              for c in (red, green, blue)]
    luminance = 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]
    return "black" if luminance > 0.18 else "white"


def _cell_text(axes, values: np.ndarray, cmap_name: str) -> None:
    for (row, col), value in np.ndenumerate(values):
        if np.isfinite(value):
            axes.text(col, row, f"{value:.2f}", ha="center", va="center", fontsize=8,
                      color=text_colour(cmap_name, value))


def f1_heatmap(runs: Sequence[str], labels: Sequence[str], values: np.ndarray) -> str:
    """Runs (rows) by classes (columns), darker the higher the F1; a class a run has no score
    for stays blank."""
    width = min(16.0, max(6.0, 0.62 * len(labels) + 3.0))
    height = max(2.2, 0.42 * len(runs) + 1.6)
    with rc_context(FIGURE_STYLE):
        figure = Figure(figsize=(width, height))
        axes = figure.add_subplot()
        axes.set_facecolor(MISSING)
        shown = axes.imshow(np.ma.masked_invalid(values), cmap=HEATMAP, vmin=0, vmax=1,
                            aspect="auto")
        _cell_text(axes, values, HEATMAP)
        axes.set_xticks(range(len(labels)), [plain(x, 24) for x in labels], rotation=40,
                        ha="right", fontsize=9)
        axes.set_yticks(range(len(runs)), [plain(r) for r in runs], fontsize=9)
        figure.colorbar(shown, ax=axes, fraction=0.03, pad=0.02, label="F1")
        return to_data_uri(figure)


def confusion_panels(panels: Sequence[tuple[str, Sequence[str], np.ndarray]], *,
                     counts: bool = False) -> str:
    """Confusion matrices side by side (rows true class, columns predicted): row-normalised
    shares by default, raw word counts with ``counts=True``. Reversed cividis, so the darker a
    cell the more words; cells with no words stay blank."""
    n_labels = max(len(labels) for _, labels, _ in panels)
    side = min(7.5, max(3.6, 0.42 * n_labels + 1.8))
    cmap = HEATMAP
    with rc_context(FIGURE_STYLE):
        figure = Figure(figsize=(side * len(panels) + 0.6, side))
        axes_list = figure.subplots(1, len(panels), squeeze=False)[0]
        top = max(float(np.nanmax(m)) for _, _, m in panels) if counts else 1.0
        top = max(top, 1.0)
        shown = None
        for index, (axes, (name, labels, matrix)) in enumerate(zip(axes_list, panels)):
            axes.set_facecolor(MISSING)
            shown = axes.imshow(np.ma.masked_where(~(matrix > 0), matrix), cmap=cmap, vmin=0,
                                vmax=top)
            if len(labels) <= 16:
                for (row, col), value in np.ndenumerate(matrix):
                    if np.isfinite(value) and value >= (1 if counts else 0.005):
                        axes.text(col, row, f"{value:.0f}" if counts else f"{value:.2f}",
                                  ha="center", va="center", fontsize=7,
                                  color=text_colour(cmap, value, top))
            ticks = [plain(x, 20) for x in labels]
            axes.set_xticks(range(len(labels)), ticks, rotation=50, ha="right", fontsize=8)
            axes.set_yticks(range(len(labels)), ticks, fontsize=8)
            axes.set_xlabel("predicted class")
            if index == 0:
                axes.set_ylabel("true class")
            axes.set_title(plain(name), fontsize=10)
        figure.colorbar(shown, ax=list(axes_list), fraction=0.025, pad=0.02,
                        label="words" if counts else "share of the true class")
        return to_data_uri(figure)


def _series_styles(n: int) -> list[dict]:
    return [dict(color=OKABE_ITO[i % len(OKABE_ITO)], marker=MARKERS[i % len(MARKERS)])
            for i in range(n)]


def calibration_plot(curves: Sequence[tuple[str, Reliability]]) -> str:
    with rc_context(FIGURE_STYLE):
        figure = Figure(figsize=(5.4, 4.4))
        axes = figure.add_subplot()
        axes.plot([0, 1], [0, 1], color=SOFT, linestyle="--", linewidth=1,
                  label="perfect calibration")
        for style, (name, curve) in zip(_series_styles(len(curves)), curves):
            ece = curve.expected_calibration_error
            axes.plot(curve.confidence, curve.accuracy, markersize=4, **style,
                      label=f"{plain(name)} (ECE {ece:.3f})")
        axes.set_xlim(0, 1)
        axes.set_ylim(0, 1.02)
        axes.set_xlabel("mean confidence in bin")
        axes.set_ylabel("share of words correct")
        axes.grid(alpha=0.6)
        axes.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False)
        return to_data_uri(figure)


def training_plot(curves: Sequence[tuple[str, pd.DataFrame]]) -> str:
    """The validation score early stopping watched (left: the task's, e.g. macro-F1 or link F1)
    and training loss (right) per epoch; a ring marks the epoch whose weights were kept."""
    with rc_context(FIGURE_STYLE):
        figure = Figure(figsize=(8.6, 3.6))
        score_axes, loss_axes = figure.subplots(1, 2)
        for style, (name, curve) in zip(_series_styles(len(curves)), curves):
            style = {**style, "marker": None}
            kept = curve[curve["kept"].astype(bool)]
            for score in [c for c in curve.columns if c.startswith("val_")][:1]:
                score_axes.plot(curve.index, curve[score], **style, label=plain(name))
                score_axes.plot(kept.index, kept[score], "o", markersize=8,
                                fillstyle="none", color=style.get("color"))
            loss_axes.plot(curve.index, curve["train_loss"], **style, label=plain(name))
        score_axes.set_ylabel("validation score")
        loss_axes.set_ylabel("training loss")
        for axes in (score_axes, loss_axes):
            axes.set_xlabel("epoch")
            axes.grid(alpha=0.6)
        loss_axes.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False)
        return to_data_uri(figure)


def learning_plot(curves: Sequence[tuple[str, list[tuple[float, float]]]], score: str) -> str:
    """``score`` is the axis label, in words."""
    with rc_context(FIGURE_STYLE):
        figure = Figure(figsize=(5.4, 3.8))
        axes = figure.add_subplot()
        for style, (name, points) in zip(_series_styles(len(curves)), curves):
            n_docs, values = zip(*points)
            axes.plot(n_docs, values, markersize=4, **style, label=plain(name))
        axes.set_xlabel("training documents")
        axes.set_ylabel(plain(score))
        axes.grid(alpha=0.6)
        axes.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False)
        return to_data_uri(figure)
