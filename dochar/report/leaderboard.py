"""The ranking table: score with interval, entity F1, paired difference to a reference, cost."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

from dochar.report.page import Html, amount, count, interval, note, number, table
from dochar.report.summaries import ReportInputError, class_order, metric
from dochar.runs.bundle import RunBundle

PairedFn = Callable[[Any, Any], Any]
REFERENCE_MODEL = "random_forest"
TUNING_BUDGET = "tuning_budget"


def resolve_reference(bundles: Sequence[RunBundle], names: Sequence[str],
                      reference: str | None) -> int | None:
    """Index of the reference run: the named one, else the first random-forest run, else None."""
    if reference is not None:
        for i, (bundle, name) in enumerate(zip(bundles, names)):
            if reference in (name, bundle.name, bundle.run_id):
                return i
        raise ReportInputError(f"reference run '{reference}' is not among the runs {list(names)}")
    for i, bundle in enumerate(bundles):
        if bundle.tags.get("model") == REFERENCE_MODEL:
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


def p_value(value: float) -> str:
    value = float(value)
    return "< 0.001" if 0 <= value < 0.0005 else number(value)


def _cost(bundle: RunBundle, key: str) -> float | None:
    value = bundle.cost.get(key)
    return None if value is None else float(value)


def _paired_cells(paired: PairedFn, run: RunBundle, reference: RunBundle,
                  failures: list[str], name: str) -> list[str]:
    try:
        result = paired(run.predictions, reference.predictions)
    except ValueError as error:   # e.g. the two runs were tested on different documents
        failures.append(f"No paired difference for {name}: {error}")
        return ["n/a", "", ""]
    return [f"{float(result.difference):+.3f}", interval(result.low, result.high),
            p_value(result.p_value)]


def leaderboard(bundles: Sequence[RunBundle], names: Sequence[str], order: Sequence[int],
                score: str, reference_index: int | None, paired: PairedFn | None,
                paired_note: str) -> list[Html]:
    """The table (best run first) and the notes that explain or qualify it."""
    show_paired = paired is not None and reference_index is not None
    headers = ["#", "run", "model", score, "95% interval", "entity F1"]
    titles = [f"rank by {score}", "", "tags: model", "test score used for ranking",
              f"from metrics {score}_low / {score}_high", "entity-level F1"]
    if show_paired:
        headers += ["vs reference", "95% interval", "p"]
        titles += ["this run minus the reference run, same test words", "of the difference",
                   "two-sided p-value for no difference"]
    headers += ["train (s)", "pages/s", "parameters"]
    titles += ["training wall-clock seconds", "test pages per second", "as recorded by the run"]
    tuned = any(TUNING_BUDGET in bundle.tags for bundle in bundles)
    if tuned:
        headers.append("tuning budget")
        titles.append("Optuna trials this system was given (tag tuning_budget), each scored on "
                      "validation words only")
    rows, classes, failures = [], [], []
    for rank, i in enumerate(order, start=1):
        bundle = bundles[i]
        row = [str(rank), names[i], bundle.tags.get("model", ""), number(metric(bundle, score)),
               interval(metric(bundle, f"{score}_low"), metric(bundle, f"{score}_high")),
               number(metric(bundle, "entity_f1"))]
        if show_paired:
            row += (["reference", "", ""] if i == reference_index else
                    _paired_cells(paired, bundle, bundles[reference_index], failures, names[i]))
        row += [amount(_cost(bundle, "train_seconds")), amount(_cost(bundle, "pages_per_second")),
                count(_cost(bundle, "parameters"))]
        if tuned:
            budget = bundle.tags.get(TUNING_BUDGET)
            row.append(f"{budget} trials" if budget else "not tuned")
        rows.append(row)
        classes.append(" ".join(c for c, on in (("best", rank == 1),
                                                ("reference", i == reference_index)) if on))
    numeric = [0, 3, 4, 5, *range(6, len(headers))]
    parts = [Html('<div class="scroll">'),
             table(headers, rows, numeric=numeric, nowrap=[1, 2], table_id="leaderboard-table",
                   row_classes=classes, titles=titles),
             Html("</div>")]
    if show_paired:
        parts.append(note(f"Reference run: {names[reference_index]}. {paired_note}"))
    elif paired is None:
        parts.append(note(paired_note))
    else:
        parts.append(note("Paired differences are not shown: no reference run was named and no "
                          f"run is tagged model={REFERENCE_MODEL}."))
    return parts + [note(text) for text in failures]
