"""Synthetic certificates of analysis as a word table.

Document i gets layout i mod the number of chosen layouts, so every layout appears once
n_documents reaches that number. Each document draws its content from its own generator seeded
with (seed, i, 0) and its noise from (seed, i, 1): documents are independent of each other, and
noise settings never change the clean content underneath.

Beside the words, each document has links between its entities from the generator's own truth
(key phrase -> value, column heading -> cell; :class:`data_synth.canvas.Link`), as rows of the
links table (``doc_id, page, source, target, kind``). Noise can merge away a value's only word;
such a link then points to an entity the word table lacks, and the links validator drops and
counts it.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence

import numpy as np
import pandas as pd

from data_synth.canvas import PAGE_HEIGHT, PAGE_WIDTH, Canvas, Link, Word
from data_synth.content import draw_certificate
from data_synth.footer import render_footer
from data_synth.header import render_header
from data_synth.layouts import Layout, resolve_layouts
from data_synth.noise import NoiseConfig, apply_noise, clip
from data_synth.table import render_table

LABELS: tuple[str, ...] = ("lab_name", "client", "cert_no", "sample_id", "date", "key",
                           "column_header", "analyte", "method", "result", "unit", "limit",
                           "verdict", "other")
COLUMNS: tuple[str, ...] = ("doc_id", "page", "word_id", "text", "x0", "y0", "x1", "y1",
                            "page_width", "page_height", "label", "entity_id", "layout_id")
LINK_COLUMNS: tuple[str, ...] = ("doc_id", "page", "source", "target", "kind")
_CONTENT_STREAM, _NOISE_STREAM = 0, 1


def render_document(layout: Layout, rng: np.random.Generator) -> list[Word]:
    """Clean words of one certificate in reading order (header, table, footer)."""
    return _render(layout, rng).words


def _render(layout: Layout, rng: np.random.Generator) -> Canvas:
    canvas = Canvas()
    cert = draw_certificate(rng, layout)
    y = render_header(canvas, cert, layout)
    y = render_table(canvas, cert, layout, y)
    render_footer(canvas, cert, layout, y)
    clip(canvas.words)
    return canvas


def _links_frame(doc_id: str, links: list[Link]) -> pd.DataFrame:
    return pd.DataFrame({"doc_id": doc_id, "page": np.array([k.page for k in links], np.int64),
                         "source": [k.source for k in links], "target": [k.target for k in links],
                         "kind": [k.kind for k in links]}, columns=list(LINK_COLUMNS))


def _frame(doc_id: str, layout_id: str, words: list[Word]) -> pd.DataFrame:
    order = sorted(range(len(words)), key=lambda i: (words[i].page, i))
    pages = np.array([words[i].page for i in order], dtype=np.int64)
    word_ids = np.zeros(len(order), dtype=np.int64)
    for page in np.unique(pages):
        mask = pages == page
        word_ids[mask] = np.arange(int(mask.sum()))
    boxes = np.round(np.array([[words[i].x0, words[i].y0, words[i].x1, words[i].y1]
                               for i in order], dtype=float).reshape(-1, 4), 2)
    return pd.DataFrame({
        "doc_id": doc_id, "page": pages, "word_id": word_ids,
        "text": [words[i].text for i in order],
        "x0": boxes[:, 0], "y0": boxes[:, 1], "x1": boxes[:, 2], "y1": boxes[:, 3],
        "page_width": PAGE_WIDTH, "page_height": PAGE_HEIGHT,
        "label": [words[i].label for i in order],
        "entity_id": [words[i].entity for i in order], "layout_id": layout_id,
    }, columns=list(COLUMNS))


def iter_documents(n_documents: int, seed: int = 0, *, layouts: Sequence[str] | None = None,
                   noise: NoiseConfig | None = None) -> Iterator[pd.DataFrame]:
    """One word-table frame per document (what ``generate`` concatenates).

    Arguments are checked here, before the first document, so a bad call fails at once.
    """
    return (words for words, _ in iter_documents_with_links(n_documents, seed, layouts=layouts,
                                                            noise=noise))


def iter_documents_with_links(n_documents: int, seed: int = 0, *,
                              layouts: Sequence[str] | None = None,
                              noise: NoiseConfig | None = None
                              ) -> Iterator[tuple[pd.DataFrame, pd.DataFrame]]:
    """(word table, links table) per document; the words are those of ``iter_documents``.

    Arguments are checked here, before the first document, so a bad call fails at once.
    """
    if isinstance(n_documents, bool) or not isinstance(n_documents, (int, np.integer)) \
            or n_documents < 0:
        raise ValueError(f"n_documents must be a non-negative integer, got {n_documents!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer, got {seed!r}")
    if noise is not None and not isinstance(noise, NoiseConfig):
        raise TypeError(f"noise must be a NoiseConfig, got {type(noise).__name__}")
    chosen = resolve_layouts(layouts)
    return _documents(int(n_documents), int(seed), chosen, noise)


def _documents(n_documents: int, seed: int, layouts: tuple[Layout, ...],
               noise: NoiseConfig | None) -> Iterator[tuple[pd.DataFrame, pd.DataFrame]]:
    for index in range(n_documents):
        layout = layouts[index % len(layouts)]
        canvas = _render(layout, np.random.default_rng([seed, index, _CONTENT_STREAM]))
        words = canvas.words
        if noise is not None and not noise.is_clean:
            words = apply_noise(words, noise, np.random.default_rng([seed, index, _NOISE_STREAM]))
        doc_id = f"coa-{index:05d}"
        yield _frame(doc_id, layout.layout_id, words), _links_frame(doc_id, canvas.links)


def generate(n_documents: int, seed: int = 0, *, layouts: Sequence[str] | None = None,
             noise: NoiseConfig | None = None) -> pd.DataFrame:
    """A word table of ``n_documents`` synthetic certificates (A4 in points, origin top-left)."""
    frames = list(iter_documents(n_documents, seed, layouts=layouts, noise=noise))
    if not frames:
        return _empty()
    return pd.concat(frames, ignore_index=True)


def _empty() -> pd.DataFrame:
    kinds = {"page": "int64", "word_id": "int64", **{c: "float64" for c in
             ("x0", "y0", "x1", "y1", "page_width", "page_height")}}
    return pd.DataFrame({c: pd.Series(dtype=kinds.get(c, "str")) for c in COLUMNS})
