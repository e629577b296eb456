"""The ranking table: score with interval, entity F1, paired difference to a reference, cost."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

from dochar.report.page import Html, amount, count, interval, note, number, table
from dochar.report.summaries import (ReportInputError, class_order, document_sides, metric,
                                     score_words, size_unit, system_words)
from dochar.runs.bundle import RunBundle
from dochar.runs.numbers import p_value
from dochar.splits.protocols import SIDES

PairedFn = Callable[[Any, Any], Any]
REFERENCE_MODEL = "random_forest"   # default of `dochar report --reference-model`
TUNING_BUDGET = "tuning_budget"


def resolve_reference(bundles: Sequence[RunBundle], names: Sequence[str],
                      reference: str | None,
                      reference_model: str = REFERENCE_MODEL) -> int | None:
    """Index of the reference run: the named one, else the first run of ``reference_model``
    (the tag ``model``: a layer or an estimator), else None."""
    if reference is not None:
        for i, (bundle, name) in enumerate(zip(bundles, names)):
            if reference in (name, bundle.name, bundle.run_id):
                return i
        raise ReportInputError(f"reference run '{reference}' is not among the runs {list(names)}")
    for i, bundle in enumerate(bundles):
        if bundle.tags.get("model") == reference_model:
            return i
    return None


def default_paired(bundles: Sequence[RunBundle]) -> tuple[PairedFn | None, str]:
    """The project's paired bootstrap on word macro-F1, or None and the reason it is missing."""
    try:
        from dochar.metrics.intervals import paired_comparison
        from dochar.metrics.scorers import WordF1
    except ImportError as error:
        return None, ("Paired differences are not shown: the comparison code is unavailable "
                      f"({error}).")
    score_fn = WordF1(class_order(bundles), "macro")

    def paired(frame_a: Any, frame_b: Any) -> Any:
        return paired_comparison(frame_a, frame_b, score_fn)

    return paired, ("Difference: this run's word macro-F1 minus the reference run's on the same "
                    "test documents, with a paired bootstrap 95% interval over documents and a "
                    "two-sided p-value.")


def _cost(bundle: RunBundle, key: str) -> float | None:
    value = bundle.cost.get(key)
    return None if value is None else float(value)


@dataclass
class Pairing:
    """Each run's paired result against the reference, computed once for table and verdict.

    ``results`` is None when no comparison is available; ``failures`` holds why a run could
    not be paired (e.g. it was tested on other documents).
    """

    reference: int | None
    results: dict[int, Any] | None
    note: str
    measure: str = "word macro-F1"
    failures: dict[int, str] = field(default_factory=dict)
    # the same comparison on each side's test documents: side -> run -> result (only when the
    # reference's test set holds both seen and unseen layout families)
    sides: dict[str, dict[int, Any]] = field(default_factory=dict)


def pair_with_reference(bundles: Sequence[RunBundle], reference: int | None,
                        paired: PairedFn | None, paired_note: str,
                        measure: str = "word macro-F1") -> Pairing:
    if paired is None or reference is None:
        return Pairing(reference, None, paired_note, measure)
    pairing = Pairing(reference, {}, paired_note, measure)
    for i, bundle in enumerate(bundles):
        if i == reference:
            continue
        try:
            pairing.results[i] = paired(bundle.predictions, bundles[reference].predictions)
        except ValueError as error:   # e.g. the two runs were tested on different documents
            pairing.failures[i] = str(error)
    sides = document_sides(bundles[reference])["side"]
    if all((sides == side).any() for side in SIDES):
        for side in SIDES:
            documents = set(sides.index[sides == side])
            pairing.sides[side] = {
                i: paired(*(frame[frame["doc_id"].astype(str).isin(documents)] for frame in
                            (bundles[i].predictions, bundles[reference].predictions)))
                for i in pairing.results}
    return pairing


def _paired_cells(pairing: Pairing, i: int) -> list[str]:
    if i == pairing.reference:
        return ["reference", "", ""]
    if i in pairing.failures:
        return ["n/a", "", ""]
    result = pairing.results[i]
    return [f"{float(result.difference):+.3f}", interval(result.low, result.high),
            p_value(result.p_value)]


def leaderboard(bundles: Sequence[RunBundle], names: Sequence[str], order: Sequence[int],
                score: str, pairing: Pairing) -> list[Html]:
    """The table (best run first) and the notes that explain or qualify it."""
    show_paired = pairing.results is not None
    words = score_words(score)
    headers = ["#", "run", "system", words, "95% interval", "entity F1"]
    titles = [f"rank by {words}", "the run's name: its exact configuration", "tags: model",
              "test score used for ranking", f"from metrics {score}_low / {score}_high",
              "entity-level F1"]
    if show_paired:
        headers += ["vs reference", "95% interval", "p"]
        titles += [f"this run minus the reference run, {pairing.measure}, same test documents",
                   "of the difference", "two-sided p-value for no difference"]
    headers += ["training time (s)", "speed (test pages/s)"]
    titles += ["training wall-clock seconds", "test pages labelled per second"]
    units = list(dict.fromkeys(size_unit(bundles[i]) for i in order
                               if _cost(bundles[i], "parameters") is not None))
    headers += [f"size ({unit})" for unit in units]
    titles += [f"what the fitted model holds, counted in {unit}" for unit in units]
    tuned = any(TUNING_BUDGET in bundle.tags for bundle in bundles)
    if tuned:
        headers.append("tuning budget")
        titles.append("Optuna trials this system was given (tag tuning_budget), each scored on "
                      "validation words only")
    rows, classes = [], []
    for rank, i in enumerate(order, start=1):
        bundle = bundles[i]
        row = [str(rank), names[i], system_words(bundle), number(metric(bundle, score)),
               interval(metric(bundle, f"{score}_low"), metric(bundle, f"{score}_high")),
               number(metric(bundle, "entity_f1"))]
        if show_paired:
            row += _paired_cells(pairing, i)
        row += [amount(_cost(bundle, "train_seconds")), amount(_cost(bundle, "pages_per_second"))]
        row += [count(_cost(bundle, "parameters")) if size_unit(bundle) == unit else ""
                for unit in units]
        if tuned:
            budget = bundle.tags.get(TUNING_BUDGET)
            row.append(f"{budget} trials" if budget else "not tuned")
        rows.append(row)
        classes.append(" ".join(c for c, on in (("best", rank == 1),
                                                ("reference", i == pairing.reference)) if on))
    numeric = [0, 3, 4, 5, *range(6, len(headers))]
    parts = [Html('<div class="scroll">'),
             table(headers, rows, numeric=numeric, wrap=[1], table_id="leaderboard-table",
                   row_classes=classes, titles=titles),
             Html("</div>")]
    if show_paired:
        parts.append(note(f"Reference run: {names[pairing.reference]}. {pairing.note}"))
    elif pairing.reference is not None:
        parts.append(note(pairing.note))
    else:
        parts.append(note("Paired differences are not shown: no reference run was named and no "
                          f"run is tagged model={REFERENCE_MODEL}."))
    return parts + [note(f"No paired difference for {names[i]}: {pairing.failures[i]}")
                    for i in order if i in pairing.failures]
