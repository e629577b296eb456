"""A run's record scores on its test documents: predicted records against true ones.

The words of the test documents carry the task's decoded word labels (``predicted``, with
``confidence`` and, where the task groups words, ``entity``); true records come from the word
table's labels, entity ids and the links table's ``row`` links
(:func:`dochar.records.assemble.true_records`). Predicted records use the same rules as
``dochar predict``: the task's groups where it has them, runs of words otherwise, rows by the
layout rule or the shape's anchor column (:mod:`dochar.records.rows`). Scores are logged raw as
``records/<score>`` and on normalised values as ``records/normalised/<score>``, each with a
bootstrap interval over documents (``..._low``/``..._high``), and the per-field accuracy as ``records/field/<label>``. On a split
with seen and unseen layouts the raw scores are also given per side,
``records/<side>/<score>``, each side resampling its own documents
(:func:`dochar.metrics.seen_unseen.side_metrics`).

Tables: ``records`` and ``records_normalised`` (one row per document: the counts of
:func:`dochar.metrics.records.record_frame`, what ``dochar compare`` resamples), and
``record_pairs`` (per document: the predicted and the true record as JSON, raw values, for the
report's side-by-side view).
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

import pandas as pd

from dochar.metrics.intervals import bootstrap_interval
from dochar.metrics.records import field_accuracy, record_frame, record_scorers
from dochar.metrics.seen_unseen import SIDE_COLUMN, side_metrics
from dochar.records.assemble import assemble_records, parses, true_records
from dochar.records.normalise import NORMALISATIONS, NORMALISED, RAW
from dochar.records.shape import RecordShape

RECORD_TABLES = {RAW: "records", NORMALISED: "records_normalised"}
PREFIXES = {RAW: "records/", NORMALISED: "records/normalised/"}


def scored_words(table: pd.DataFrame, decoded: pd.DataFrame, documents: set[str]
                 ) -> pd.DataFrame:
    """The test documents' words (text, boxes, truth) with the task's decoded labels."""
    base = table[table["doc_id"].astype(str).isin(documents)].copy()
    base["doc_id"] = base["doc_id"].astype(str)
    keep = [c for c in ("predicted", "confidence", "entity") if c in decoded]
    guesses = decoded[["doc_id", "page", "word_id", *keep]].assign(
        doc_id=decoded["doc_id"].astype(str))
    merged = base.merge(guesses, on=["doc_id", "page", "word_id"], how="inner",
                        validate="one_to_one")
    return merged.rename(columns={"confidence": "probability"})


def record_evaluation(words: pd.DataFrame, shape: RecordShape, links: pd.DataFrame | None,
                      cfg: Mapping[str, Any], *, seed: int, sides: Mapping[str, str] | None = None
                      ) -> tuple[dict[str, float], dict[str, pd.DataFrame]]:
    """(metrics, tables) of the module docstring; ``cfg`` is the run's ``evaluation`` section,
    ``sides`` each test document's layout side (seen / unseen / blank)."""
    truth = true_records(words, shape, links)
    guessed = assemble_records(words, shape, label_col="predicted",
                               group_col="entity" if "entity" in words else None)
    labels = list(shape.labels)
    metrics: dict[str, float] = {}
    tables: dict[str, pd.DataFrame] = {}
    for how in NORMALISATIONS:
        frame = record_frame(parses(guessed, shape, how), parses(truth, shape, how), labels,
                             shape.items_name)
        prefix = PREFIXES[how]
        for name, scorer in record_scorers().items():
            point, low, high = (bootstrap_interval(
                frame, scorer, n_resamples=int(cfg["bootstrap_resamples"]),
                confidence=float(cfg["confidence"]), seed=seed) if len(frame) > 1
                else (scorer(frame), float("nan"), float("nan")))
            metrics.update({f"{prefix}{name}": point, f"{prefix}{name}_low": low,
                            f"{prefix}{name}_high": high})
        if how == RAW:
            metrics.update({f"records/field/{label}": value
                            for label, value in field_accuracy(frame).items()})
            if sides:
                by_side = frame.assign(**{SIDE_COLUMN: frame["doc_id"].map(sides).fillna("")})
                metrics.update({f"{prefix}{key}": value for key, value in
                                side_metrics(by_side, record_scorers(), cfg, seed=seed).items()})
        tables[RECORD_TABLES[how]] = frame.set_index("doc_id")
    true_raw, guessed_raw = parses(truth, shape), parses(guessed, shape)
    tables["record_pairs"] = pd.DataFrame({
        "doc_id": list(true_raw),
        "predicted": [json.dumps(guessed_raw.get(d, {}), ensure_ascii=False) for d in true_raw],
        "truth": [json.dumps(t, ensure_ascii=False) for t in true_raw.values()],
    }).set_index("doc_id")
    return metrics, tables
