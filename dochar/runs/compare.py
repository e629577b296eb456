"""`dochar compare`: is run A better than run B on the same test documents, or is it noise?"""

from __future__ import annotations

import pandas as pd

from dochar import tasks
from dochar.metrics.evaluate import has_entity_ids, headline_scorers
from dochar.metrics.intervals import PairedResult, paired_comparison
from dochar.metrics.record_run import PREFIXES, RECORD_TABLES
from dochar.metrics.records import record_scorers
from dochar.metrics.seen_unseen import SIDE_COLUMN, SIDES
from dochar.runs.bundle import RunBundle
from dochar.runs.numbers import p_phrase


def compare_runs(run_a: RunBundle, run_b: RunBundle, *, score: str | None = None,
                 method: str = "bootstrap", resamples: int = 2000, seed: int = 0
                 ) -> PairedResult:
    if run_a.labels != run_b.labels:
        raise ValueError(f"runs {run_a.name!r} and {run_b.name!r} use different label sets; "
                         "they cannot be compared word for word")
    ignore = run_a.config.get("evaluation", {}).get("entity_ignore", ["other"])
    task = tasks.from_config(run_a.config.get("task"))
    scorers = headline_scorers(run_a.labels, ignore, task=task,
                               entities=has_entity_ids(run_a.predictions))
    score = score or run_a.headline
    frames = (run_a.predictions, run_b.predictions)
    records = _record_scores(run_a, run_b)
    if score in records:
        (frames, scorer) = records[score]
    elif score in scorers:
        scorer = scorers[score]
    else:
        raise ValueError(f"--score {score!r}: choose one of {sorted([*scorers, *records])}")
    return paired_comparison(*frames, scorer, n_resamples=resamples, seed=seed, method=method)


def _record_scores(run_a: RunBundle, run_b: RunBundle) -> dict:
    """Record scores both runs carry (their per-document record tables): ``straight_through``
    on raw values, ``normalised/straight_through`` on normalised ones, and so on; where run A's
    predictions give each test document its layout side, also ``seen/straight_through`` and
    ``unseen/straight_through`` (raw values), paired over that side's documents only."""
    found = {}
    for how, table in RECORD_TABLES.items():
        if table in run_a.tables and table in run_b.tables:
            frames = tuple(run.tables[table].rename_axis("doc_id").reset_index()
                           for run in (run_a, run_b))
            prefix = PREFIXES[how].removeprefix("records/")
            found.update({f"{prefix}{name}": (frames, scorer)
                          for name, scorer in record_scorers().items()})
            if prefix == "":
                found.update(_side_scores(run_a.predictions, frames))
    return found


def _side_scores(predictions: pd.DataFrame, frames: tuple[pd.DataFrame, pd.DataFrame]) -> dict:
    """``seen/...`` and ``unseen/...`` record scores: ``frames`` cut to one side's documents."""
    if SIDE_COLUMN not in predictions:
        return {}
    sides = predictions.drop_duplicates("doc_id").set_index("doc_id")[SIDE_COLUMN]
    found = {}
    for side in SIDES:
        docs = set(sides.index[sides.astype(str) == side].astype(str))
        if docs:
            on_side = tuple(f[f["doc_id"].astype(str).isin(docs)] for f in frames)
            found.update({f"{side}/{name}": (on_side, scorer)
                          for name, scorer in record_scorers().items()})
    return found


def format_comparison(run_a: RunBundle, run_b: RunBundle, result: PairedResult,
                      score: str) -> str:
    verdict = ("A is better" if result.low > 0 else "B is better" if result.high < 0
               else "no clear difference")
    test = ("exact randomisation" if result.exact else
            "approximate randomisation" if result.method == "randomisation"
            else "paired bootstrap")
    return "\n".join([
        f"A  {run_a.name}  ({run_a.run_id})  {score} = {result.score_a:.4f}",
        f"B  {run_b.name}  ({run_b.run_id})  {score} = {result.score_b:.4f}",
        f"A - B = {result.difference:+.4f}   95% interval [{result.low:+.4f}, "
        f"{result.high:+.4f}]   {p_phrase(result.p_value)}   ({test}, "
        f"{result.n_documents} test documents)",
        f"verdict: {verdict}",
    ])
