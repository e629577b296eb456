"""Test pages redrawn as inline SVG: word boxes filled by predicted class, errors outlined.

Each word box carries a ``<title>`` (text, true and predicted class) so hovering shows it without
any script. Graph edges, when the run kept them, are drawn underneath as thin lines; under them
lies the page's picture when the run kept one (a JPEG embedded as a data URI, so the report stays
one file), else a blank sheet and a note saying there is no picture.
"""

from __future__ import annotations

import base64
from collections.abc import Sequence

import numpy as np
import pandas as pd

from dochar.report.page import Html, esc, note, number, table
from dochar.runs.bundle import RunBundle
from dochar.runs.frames import pages_to_draw

SVG_WIDTH = 520
ERROR_ROWS = 40
EDGE_COLUMNS = ("doc_id", "page", "source", "target", "relation")
NO_TEXT = Html('<i class="note">(no text)</i>')
# Class fills: Paul Tol's "muted" qualitative scheme, told apart by colour-blind readers
# (P. Tol, "Colour Schemes", SRON technical note SRON/EPS/TN/09-002, scheme "muted"; hex values
# from memory). Classes past the ninth reuse the colours under white diagonal hatching.
PALETTE = ("#CC6677", "#332288", "#DDCC77", "#117733", "#88CCEE", "#882255", "#44AA99",
           "#999933", "#AA4499")
# Edge lines: Okabe & Ito's colour-universal palette ("Color Universal Design: how to make
# figures and presentations that are friendly to colorblind people", 2008), black left out.
EDGE_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9")

OVERLAY_STYLE = """
.overlay .sheet{fill:#fff;stroke:#8a969e;stroke-width:1px;vector-effect:non-scaling-stroke}
.overlay .w{fill-opacity:.62;stroke:#0005;stroke-width:.5px;vector-effect:non-scaling-stroke}
.overlay .on-image .w{fill-opacity:.38}
.overlay .w.err{fill-opacity:.9;stroke:#000;stroke-width:2.4px}
.overlay .w:hover{stroke:#a64b00;stroke-width:2.4px}
.overlay .edge{fill:none;stroke-width:.7px;stroke-opacity:.6;vector-effect:non-scaling-stroke}
.legend .swatch rect{fill-opacity:.62;stroke:#0005;stroke-width:1px}
.legend .swatch rect.err{fill:#fff;fill-opacity:1;stroke:#000;stroke-width:3px}
""".strip()


def _fill(i: int) -> str:
    return PALETTE[i] if i < len(PALETTE) else f"url(#hatch-{i})"


def hatch_patterns(n_labels: int) -> Html:
    """SVG patterns for classes past the palette: its colour under white diagonal lines."""
    patterns = [f'<pattern id="hatch-{i}" width="6" height="6" patternUnits="userSpaceOnUse" '
                f'patternTransform="rotate(45)"><rect width="6" height="6" '
                f'fill="{PALETTE[i % len(PALETTE)]}"/><rect width="2.2" height="6" fill="#fff"/>'
                f"</pattern>" for i in range(len(PALETTE), n_labels)]
    if not patterns:
        return Html("")
    return Html('<svg width="0" height="0" style="position:absolute" aria-hidden="true">'
                f'<defs>{"".join(patterns)}</defs></svg>')


def class_style(labels: Sequence[str]) -> str:
    """CSS fill classes ``.c<i>`` for the ordered labels (hatched past the palette)."""
    return "\n".join(f".c{i}{{fill:{_fill(i)}}}" for i in range(len(labels)))


def _swatch(css: str) -> str:
    return (f'<svg class="swatch" viewBox="0 0 14 14" aria-hidden="true">'
            f'<rect class="{css}" x="1" y="1" width="12" height="12"/></svg>')


def legend(labels: Sequence[str], relations: Sequence[str] = ()) -> Html:
    items = [f"<span>{_swatch(f'c{i}')}{esc(label)}</span>" for i, label in enumerate(labels)]
    items.append(f"<span>{_swatch('err')}wrong prediction</span>")
    for i, relation in enumerate(relations):
        items.append(f'<span><i class="swatch" style="background:'
                     f'{EDGE_COLOURS[i % len(EDGE_COLOURS)]};height:3px"></i>'
                     f"edge: {esc(relation)}</span>")
    return Html(f'<div class="legend">{"".join(items)}</div>')


def _page_size(words: pd.DataFrame) -> tuple[float, float]:
    """The recorded page size; a page without a usable one is drawn around its words."""
    sizes = []
    for size_column, box_columns in (("page_width", ["x0", "x1"]), ("page_height", ["y0", "y1"])):
        size = float(pd.to_numeric(words[size_column], errors="coerce").iloc[0])
        if not (np.isfinite(size) and size > 0):
            size = float(np.nanmax(words[box_columns].to_numpy(dtype=float)))
        sizes.append(max(size, 1.0))
    return sizes[0], sizes[1]


def drawable_edges(words: pd.DataFrame, edges: pd.DataFrame | None) -> tuple[pd.DataFrame, int]:
    """The page's edges between words the predictions hold, and how many others were left out."""
    if edges is None or edges.empty:
        return pd.DataFrame(columns=EDGE_COLUMNS), 0
    ids = set(words["word_id"])
    known = edges["source"].isin(ids) & edges["target"].isin(ids)
    return edges[known], int((~known).sum())


def _edge_paths(words: pd.DataFrame, edges: pd.DataFrame, relations: Sequence[str]) -> list[str]:
    """One SVG path per relation between word centres (``edges`` all drawable)."""
    boxes = words.set_index("word_id")[["x0", "y0", "x1", "y1"]].astype(float)
    centres = pd.DataFrame({"x": (boxes["x0"] + boxes["x1"]) / 2,
                            "y": (boxes["y0"] + boxes["y1"]) / 2})
    paths = []
    for i, relation in enumerate(relations):
        chosen = edges[edges["relation"].astype(str) == relation]
        if chosen.empty:
            continue
        start = centres.loc[chosen["source"]].to_numpy()
        end = centres.loc[chosen["target"]].to_numpy()
        d = " ".join(f"M{a:.1f} {b:.1f}L{c:.1f} {e:.1f}"
                     for (a, b), (c, e) in zip(start, end))
        paths.append(f'<path class="edge" stroke="{EDGE_COLOURS[i % len(EDGE_COLOURS)]}" '
                     f'd="{d}"/>')
    return paths


def page_svg(words: pd.DataFrame, class_index: dict[str, int],
             edges: pd.DataFrame | None = None, relations: Sequence[str] = (),
             picture: bytes = b"") -> Html:
    """The SVG of one page: its picture (JPEG bytes, stretched over the page's own units) or a
    blank sheet, the drawable ``edges``, then the word boxes.

    ``class_index`` must hold every predicted class of the page (its CSS fill class).
    """
    width, height = _page_size(words)
    parts = [f'<rect class="sheet" x="0" y="0" width="{width:.1f}" height="{height:.1f}"/>']
    if picture:
        data = base64.b64encode(picture).decode("ascii")
        parts.append(f'<image class="scan" href="data:image/jpeg;base64,{data}" x="0" y="0" '
                     f'width="{width:.1f}" height="{height:.1f}" preserveAspectRatio="none"/>')
    if edges is not None and not edges.empty:
        parts.extend(_edge_paths(words, edges, relations))
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
    css = "page on-image" if picture else "page"
    svg = (f'<svg class="{css}" width="{SVG_WIDTH}" height="{shown_height:.0f}" '
           f'viewBox="0 0 {width:.1f} {height:.1f}" role="img">{"".join(parts)}</svg>')
    return Html(svg)


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


def _picture(bundle: RunBundle, doc_id: str, page: int) -> tuple[bytes, str]:
    """The page's kept picture and a sentence saying what it is (or why there is none)."""
    pictures = bundle.page_images
    if pictures is None:
        return b"", "No page image: this run kept none (made before runs kept them)."
    row = pictures[(pictures["doc_id"].astype(str) == doc_id) & (pictures["page"] == page)]
    if row.empty:
        return b"", "No page image: the run kept pictures of other pages only."
    image, origin = bytes(row["image"].iloc[0] or b""), str(row["origin"].iloc[0])
    if not image:
        return b"", f"{origin[0].upper()}{origin[1:]}; boxes on a blank page."
    return image, f"Drawn over {origin} (downscaled)."


def overlays(bundle: RunBundle, labels: Sequence[str], n_pages: int) -> list[Html]:
    """Overlay blocks (caption, SVG and error table) for the run's most-wrong test pages; the
    legend lists the edge kinds drawn on these pages, no others."""
    predictions = bundle.predictions.copy()
    predictions["text"] = predictions["text"].fillna("").astype(str)
    class_index = {label: i for i, label in enumerate(labels)}
    edges, blocks = None, []
    if bundle.edges is not None:
        missing = [c for c in EDGE_COLUMNS if c not in bundle.edges.columns]
        if missing:
            blocks.append(note(f"Edges not drawn: the edge table lacks column(s) {missing}."))
        else:
            edges = bundle.edges
    doc_ids = predictions["doc_id"].astype(str)
    pages = []
    for doc_id, page in pages_to_draw(predictions, n_pages):
        words = predictions[(doc_ids == doc_id) & (predictions["page"] == page)]
        words = words.sort_values("word_id", kind="stable")
        page_edges = None
        if edges is not None:
            page_edges = edges[(edges["doc_id"].astype(str) == doc_id) & (edges["page"] == page)]
        drawable, skipped = drawable_edges(words, page_edges)
        pages.append((doc_id, page, words, page_edges, drawable, skipped))
    relations = sorted({str(r) for *_, drawable, _ in pages for r in drawable["relation"]})
    blocks += [hatch_patterns(len(labels)), legend(labels, relations)]
    for doc_id, page, words, page_edges, drawable, skipped in pages:
        picture, about = _picture(bundle, doc_id, page)
        svg = page_svg(words, class_index, drawable, relations, picture)
        wrong = int((words["label"].astype(str) != words["predicted"].astype(str)).sum())
        caption = f"{doc_id}, page {page}: {wrong} of {len(words)} words wrong"
        notes = [note(about).markup]
        if page_edges is not None and page_edges.empty:
            notes.append(note("No edges drawn: the run kept none for this page.").markup)
        if skipped:
            notes.append(note(f"{skipped} edge(s) refer to words missing from the predictions "
                              f"and are not drawn.").markup)
        blocks.append(Html(f'<h3>{esc(caption)}</h3>{"".join(notes)}<div class="overlay" '
                           f'data-doc="{esc(doc_id)}" data-page="{page}">{svg.markup}'
                           f'<div class="errors">{error_table(words).markup}</div></div>'))
    return blocks
