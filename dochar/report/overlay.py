"""Test pages redrawn as inline SVG: word boxes filled by predicted class, errors outlined.

Each word box carries a ``<title>`` (text, true and predicted class) so hovering shows it without
any script. Graph edges, when the run kept them, are drawn underneath as thin lines.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from matplotlib import colormaps

from dochar.report.page import Html, esc, note, number, table
from dochar.runs.bundle import RunBundle

SVG_WIDTH = 520
ERROR_ROWS = 40
EDGE_COLUMNS = ("doc_id", "page", "source", "target", "relation")
NO_TEXT = Html('<i class="note">(no text)</i>')
# tab20 reordered so the first ten classes get the ten saturated colours.
_TAB20 = [colormaps["tab20"](i) for i in range(20)]
PALETTE = [f"#{int(r * 255):02x}{int(g * 255):02x}{int(b * 255):02x}"
           for r, g, b, _ in _TAB20[0::2] + _TAB20[1::2]]
EDGE_COLOURS = ("#4a5a6a", "#b5651d", "#2e7d32", "#6a1b9a", "#00838f", "#ad1457")

OVERLAY_STYLE = """
.overlay .sheet{fill:#fff;stroke:#888;stroke-width:1px;vector-effect:non-scaling-stroke}
.overlay .w{fill-opacity:.62;stroke:#0005;stroke-width:.5px;vector-effect:non-scaling-stroke}
.overlay .w.err{fill-opacity:.9;stroke:#000;stroke-width:2.4px}
.overlay .w:hover{stroke:#d00;stroke-width:2.4px}
.overlay .edge{fill:none;stroke-width:.7px;stroke-opacity:.6;vector-effect:non-scaling-stroke}
""".strip()


def class_style(labels: Sequence[str]) -> str:
    """CSS fill classes ``.c<i>`` for the ordered labels (colours repeat past twenty)."""
    return "\n".join(f".c{i}{{fill:{PALETTE[i % len(PALETTE)]}}}" for i in range(len(labels)))


def legend(labels: Sequence[str], relations: Sequence[str] = ()) -> Html:
    items = [f'<span><i class="swatch" style="background:{PALETTE[i % len(PALETTE)]}"></i>'
             f"{esc(label)}</span>" for i, label in enumerate(labels)]
    items.append('<span><i class="swatch error"></i>wrong prediction</span>')
    for i, relation in enumerate(relations):
        items.append(f'<span><i class="swatch" style="background:'
                     f'{EDGE_COLOURS[i % len(EDGE_COLOURS)]};height:3px"></i>'
                     f"edge: {esc(relation)}</span>")
    return Html(f'<div class="legend">{"".join(items)}</div>')


def choose_pages(predictions: pd.DataFrame, n_pages: int) -> list[tuple[str, int]]:
    """Pages with the most wrong words first; ties broken by document id, then page."""
    frame = predictions.assign(_wrong=predictions["label"].astype(str)
                               != predictions["predicted"].astype(str),
                               _doc=predictions["doc_id"].astype(str))
    wrong = frame.groupby(["_doc", "page"])["_wrong"].sum().reset_index()
    wrong = wrong.sort_values(["_wrong", "_doc", "page"], ascending=[False, True, True],
                              kind="stable")
    return [(str(d), int(p)) for d, p in zip(wrong["_doc"], wrong["page"])][:max(n_pages, 0)]


def _page_size(words: pd.DataFrame) -> tuple[float, float]:
    """The recorded page size; a page without a usable one is drawn around its words."""
    sizes = []
    for size_column, box_columns in (("page_width", ["x0", "x1"]), ("page_height", ["y0", "y1"])):
        size = float(pd.to_numeric(words[size_column], errors="coerce").iloc[0])
        if not (np.isfinite(size) and size > 0):
            size = float(np.nanmax(words[box_columns].to_numpy(dtype=float)))
        sizes.append(max(size, 1.0))
    return sizes[0], sizes[1]


def _edge_paths(words: pd.DataFrame, edges: pd.DataFrame,
                relations: Sequence[str]) -> tuple[list[str], int]:
    """One SVG path per relation between word centres; also the count of edges not drawn."""
    boxes = words.set_index("word_id")[["x0", "y0", "x1", "y1"]].astype(float)
    centres = pd.DataFrame({"x": (boxes["x0"] + boxes["x1"]) / 2,
                            "y": (boxes["y0"] + boxes["y1"]) / 2})
    known = edges["source"].isin(centres.index) & edges["target"].isin(centres.index)
    paths = []
    for i, relation in enumerate(relations):
        chosen = edges[known & (edges["relation"].astype(str) == relation)]
        if chosen.empty:
            continue
        start = centres.loc[chosen["source"]].to_numpy()
        end = centres.loc[chosen["target"]].to_numpy()
        d = " ".join(f"M{a:.1f} {b:.1f}L{c:.1f} {e:.1f}"
                     for (a, b), (c, e) in zip(start, end))
        paths.append(f'<path class="edge" stroke="{EDGE_COLOURS[i % len(EDGE_COLOURS)]}" '
                     f'd="{d}"/>')
    return paths, int((~known).sum())


def page_svg(words: pd.DataFrame, class_index: dict[str, int],
             edges: pd.DataFrame | None = None,
             relations: Sequence[str] = ()) -> tuple[Html, int]:
    """The SVG of one page and the number of its edges that could not be drawn.

    ``class_index`` must hold every predicted class of the page (its CSS fill class).
    """
    width, height = _page_size(words)
    parts = [f'<rect class="sheet" x="0" y="0" width="{width:.1f}" height="{height:.1f}"/>']
    skipped = 0
    if edges is not None and not edges.empty:
        paths, skipped = _edge_paths(words, edges, relations)
        parts.extend(paths)
    for row in words.itertuples(index=False):
        x0, x1 = sorted((float(row.x0), float(row.x1)))
        y0, y1 = sorted((float(row.y0), float(row.y1)))
        truth, predicted = str(row.label), str(row.predicted)
        css = f"w c{class_index[predicted]}"
        if truth != predicted:
            css += " err"
        text = row.text if row.text.strip() else "(no text)"
        hover = (f"{text}\ntrue: {truth}\npredicted: {predicted} "
                 f"(confidence {number(row.confidence)})")
        parts.append(f'<rect class="{css}" x="{x0:.1f}" y="{y0:.1f}" width="{x1 - x0:.1f}" '
                     f'height="{y1 - y0:.1f}"><title>{esc(hover)}</title></rect>')
    shown_height = SVG_WIDTH * height / width
    svg = (f'<svg class="page" width="{SVG_WIDTH}" height="{shown_height:.0f}" '
           f'viewBox="0 0 {width:.1f} {height:.1f}" role="img">{"".join(parts)}</svg>')
    return Html(svg), skipped


def error_table(words: pd.DataFrame) -> Html:
    wrong = words[words["label"].astype(str) != words["predicted"].astype(str)]
    if wrong.empty:
        return note("No wrong predictions on this page.")
    rows = [(r.text if r.text.strip() else NO_TEXT, r.label, r.predicted, number(r.confidence))
            for r in wrong.head(ERROR_ROWS).itertuples(index=False)]
    parts = [table(["word", "true", "predicted", "confidence"], rows, numeric=[3]).markup]
    if len(wrong) > ERROR_ROWS:
        more = len(wrong) - ERROR_ROWS
        parts.append(note(f"… and {more} more wrong words on this page.").markup)
    return Html("".join(parts))


def overlays(bundle: RunBundle, labels: Sequence[str], n_pages: int) -> list[Html]:
    """Overlay blocks (caption, SVG and error table) for the run's most-wrong test pages."""
    predictions = bundle.predictions.copy()
    predictions["text"] = predictions["text"].fillna("").astype(str)
    class_index = {label: i for i, label in enumerate(labels)}
    edges, relations, blocks = None, [], []
    if bundle.edges is not None:
        missing = [c for c in EDGE_COLUMNS if c not in bundle.edges.columns]
        if missing:
            blocks.append(note(f"Edges not drawn: the edge table lacks column(s) {missing}."))
        else:
            edges = bundle.edges
            relations = sorted(edges["relation"].astype(str).unique())
    blocks.append(legend(labels, relations))
    doc_ids = predictions["doc_id"].astype(str)
    for doc_id, page in choose_pages(predictions, n_pages):
        words = predictions[(doc_ids == doc_id) & (predictions["page"] == page)]
        words = words.sort_values("word_id", kind="stable")
        page_edges = None
        if edges is not None:
            page_edges = edges[(edges["doc_id"].astype(str) == doc_id) & (edges["page"] == page)]
        svg, skipped = page_svg(words, class_index, page_edges, relations)
        wrong = int((words["label"].astype(str) != words["predicted"].astype(str)).sum())
        caption = f"{doc_id}, page {page}: {wrong} of {len(words)} words wrong"
        extra = (note(f"{skipped} edge(s) refer to words missing from the predictions and are "
                      f"not drawn.").markup if skipped else "")
        blocks.append(Html(f'<h3>{esc(caption)}</h3>{extra}<div class="overlay" '
                           f'data-doc="{esc(doc_id)}" data-page="{page}">{svg.markup}'
                           f'<div class="errors">{error_table(words).markup}</div></div>'))
    return blocks
