"""The tables a run keeps of its test pages: one row per word with its prediction, and edges."""

from __future__ import annotations

from collections.abc import Collection, Mapping, Sequence

import numpy as np
import pandas as pd

from dochar.data.word_table import Page
from dochar.models.inputs import PageSet
from dochar.models.pairs import PageCandidates
from dochar.runs.bundle import PROBABILITY_PREFIX
from dochar.tasks.links import LINK, NO_LINK, LinkPage

EDGE_COLUMNS = ["doc_id", "page", "source", "target", "relation"]


def prediction_frame(pages: Sequence[Page], probabilities: Sequence[np.ndarray],
                     labels: Sequence[str], sides: Mapping[str, str] | None = None
                     ) -> pd.DataFrame:
    """One row per test word; ``layout_side`` is its document's side (seen / unseen layout,
    ``""`` when not known), so scores per side resample whole documents."""
    sides = sides or {}
    frames = []
    for page, proba in zip(pages, probabilities):
        frame = pd.DataFrame({
            "doc_id": page.doc_id, "page": page.page, "word_id": page.word_ids,
            "text": page.texts, "x0": page.boxes[:, 0], "y0": page.boxes[:, 1],
            "x1": page.boxes[:, 2], "y1": page.boxes[:, 3], "page_width": page.width,
            "page_height": page.height, "layout_id": page.layout_id or "",
            "layout_side": sides.get(page.doc_id, ""),
            "entity_id": page.entity_ids or [""] * len(page), "label": page.labels,
            "predicted": [labels[i] for i in proba.argmax(axis=1)],
            "confidence": proba.max(axis=1)})
        for i, label in enumerate(labels):
            frame[f"{PROBABILITY_PREFIX}{label}"] = proba[:, i]
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def pair_frame(pages: Sequence[LinkPage], candidates: Sequence[PageCandidates],
               probabilities: Sequence[np.ndarray], threshold: float,
               sides: Mapping[str, str] | None = None) -> pd.DataFrame:
    """One row per candidate pair of the test pages plus one per true link that was no
    candidate (columns: :data:`dochar.metrics.links.PAIR_COLUMNS`), labelled ``link`` /
    ``none``, so the run folder, tracking, the sweep table and ``dochar compare`` read it like any
    run. For page views each row carries the union box of its two nodes and the text
    ``source -> target``; ``word_id`` is the row's number on its page."""
    sides = sides or {}
    frames = []
    for page, found, prob in zip(pages, candidates, probabilities):
        pairs = np.hstack([found.pairs, found.missed])
        p_link = np.concatenate([prob, np.zeros(found.missed.shape[1])])
        truth = np.concatenate([found.y, np.ones(found.missed.shape[1], bool)])
        entities = np.asarray(page.entities, dtype=object)
        node_ids = np.asarray(page.nodes.entity_ids if page.segments else
                              page.nodes.word_ids, dtype=object)
        predicted = p_link >= threshold
        boxes = page.nodes.boxes
        union = np.column_stack([np.minimum(boxes[pairs[0], :2], boxes[pairs[1], :2]),
                                 np.maximum(boxes[pairs[0], 2:], boxes[pairs[1], 2:])])
        texts = np.asarray(page.nodes.texts, dtype=object)
        frames.append(pd.DataFrame({
            "doc_id": page.nodes.doc_id, "page": page.nodes.page,
            "word_id": np.arange(pairs.shape[1]),    # the pair's row on its page
            "text": [f"{a[:40]} -> {b[:40]}" for a, b in zip(texts[pairs[0]], texts[pairs[1]])],
            "x0": union[:, 0], "y0": union[:, 1], "x1": union[:, 2], "y1": union[:, 3],
            "page_width": page.nodes.width, "page_height": page.nodes.height,
            "source": pairs[0], "target": pairs[1],
            "source_id": node_ids[pairs[0]].astype(str), "target_id": node_ids[pairs[1]].astype(str),
            "source_entity": entities[pairs[0]].astype(str),
            "target_entity": entities[pairs[1]].astype(str),
            "candidate": np.arange(pairs.shape[1]) < found.pairs.shape[1],
            "page_nodes": len(page.nodes), "layout_id": page.nodes.layout_id or "",
            "layout_side": sides.get(page.nodes.doc_id, ""),
            "label": np.where(truth, LINK, NO_LINK), "predicted": np.where(predicted, LINK, NO_LINK),
            "confidence": np.where(predicted, p_link, 1 - p_link),
            f"{PROBABILITY_PREFIX}{NO_LINK}": 1 - p_link, f"{PROBABILITY_PREFIX}{LINK}": p_link}))
    return pd.concat(frames, ignore_index=True)


def pages_to_draw(predictions: pd.DataFrame, n_pages: int) -> list[tuple[str, int]]:
    """The test pages a report draws: most wrong words first, ties broken by document id, then
    page. Decided here, in the run, so the run keeps the edges of exactly these pages."""
    frame = predictions.assign(_wrong=predictions["label"].astype(str)
                               != predictions["predicted"].astype(str),
                               _doc=predictions["doc_id"].astype(str))
    wrong = frame.groupby(["_doc", "page"])["_wrong"].sum().reset_index()
    wrong = wrong.sort_values(["_wrong", "_doc", "page"], ascending=[False, True, True],
                              kind="stable")
    return [(str(d), int(p)) for d, p in zip(wrong["_doc"], wrong["page"])][:max(n_pages, 0)]


def edge_frame(page_set: PageSet, pages: Collection[tuple[str, int]]) -> pd.DataFrame:
    """The edges of the given (doc_id, page) pages, by word id and relation name (overlays)."""
    wanted = {(str(doc_id), int(page)) for doc_id, page in pages}
    rows = []
    for page, edges in zip(page_set.pages, page_set.edges):
        if (str(page.doc_id), int(page.page)) not in wanted:
            continue
        source, target = page.word_ids[edges.edge_index[0]], page.word_ids[edges.edge_index[1]]
        rows.append(pd.DataFrame({"doc_id": page.doc_id, "page": page.page, "source": source,
                                  "target": target,
                                  "relation": [page_set.relations[t] for t in edges.edge_type]}))
    return pd.concat(rows, ignore_index=True) if rows else pd.DataFrame(columns=EDGE_COLUMNS)
