"""Terminal tables: one run's scores, and a ranked comparison of many (rich)."""

from __future__ import annotations

from collections.abc import Sequence

import pandas as pd
from rich.console import Console
from rich.table import Table

from dochar.runs.bundle import RunBundle
from dochar.runs.numbers import interval, mean_std, number

console = Console(width=160)


def _interval(metrics: dict[str, float], key: str) -> str:
    text = number(metrics.get(key))
    band = interval(metrics.get(f"{key}_low"), metrics.get(f"{key}_high"))
    return f"{text} {band}" if band else text


def score_title(name: str) -> str:
    """A score's column heading: ``macro_f1`` -> ``macro-F1``, ``link_f1`` -> ``link F1``."""
    if name in ("macro_f1", "micro_f1"):
        return name.replace("_f1", "-F1")
    return name.replace("_f1", " F1").replace("_", " ")


def score_names(bundles: Sequence[RunBundle]) -> list[str]:
    """The scores the runs' tasks name, in task order, headline of the first run first."""
    return list(dict.fromkeys(name for b in bundles for name in b.task.scores))


def ranking_table(bundles: Sequence[RunBundle], title: str | None = None) -> Table:
    names = score_names(bundles)
    headline = bundles[0].headline if bundles else "macro_f1"
    table = Table(title=title or f"runs ranked by {score_title(headline)}", title_justify="left")
    for column in ("#", "run", *(f"{score_title(n)} [95% CI]" for n in names), "train s",
                   "params", "run id"):
        table.add_column(column, justify="left" if column in {"run", "run id"} else "right")
    ranked = sorted(bundles, key=lambda b: -b.metrics.get(headline, float("-inf")))
    for rank, bundle in enumerate(ranked, start=1):
        m = bundle.metrics
        table.add_row(str(rank), bundle.name, *(_interval(m, n) for n in names),
                      number(bundle.cost.get("train_seconds"), 1),
                      f"{int(bundle.cost.get('parameters', 0)):,}", (bundle.run_id or "")[:12])
    return table


def per_class_table(bundles: Sequence[RunBundle]) -> Table:
    """Classes as rows, runs as columns: the side-by-side view of where each system fails."""
    ranked = sorted(bundles, key=lambda b: -b.metrics.get("macro_f1", float("-inf")))
    table = Table(title="per-class F1 (test words)", title_justify="left")
    table.add_column("class")
    for bundle in ranked:
        table.add_column(bundle.name, justify="right")
    labels = list(dict.fromkeys(label for b in ranked for label in b.labels))
    for label in labels:
        table.add_row(label, *(number(b.metrics.get(f"f1/{label}")) for b in ranked))
    table.add_row("macro-F1", *(number(b.metrics.get("macro_f1")) for b in ranked), style="bold")
    return table


def has_sides(bundles: Sequence[RunBundle]) -> bool:
    return any(f"{side}/macro_f1" in b.metrics for b in bundles for side in ("seen", "unseen"))


def seen_unseen_table(bundles: Sequence[RunBundle]) -> Table:
    """Scores on test documents whose layout was / was not in training, each with its interval
    over that side's documents; the gap is seen − unseen macro-F1."""
    table = Table(title="seen and unseen layouts (test documents)", title_justify="left")
    for column in ("run", "seen docs", "seen macro-F1 [95% CI]", "seen entity F1 [95% CI]",
                   "unseen docs", "unseen macro-F1 [95% CI]", "unseen entity F1 [95% CI]",
                   "gap"):
        table.add_column(column, justify="left" if column == "run" else "right")
    ranked = sorted(bundles, key=lambda b: -b.metrics.get("macro_f1", float("-inf")))
    for bundle in ranked:
        m = bundle.metrics
        seen, unseen = m.get("seen/macro_f1"), m.get("unseen/macro_f1")
        gap = seen - unseen if seen is not None and unseen is not None else None
        table.add_row(bundle.name, number(m.get("seen/test_documents"), 0),
                      _interval(m, "seen/macro_f1"), _interval(m, "seen/entity_f1"),
                      number(m.get("unseen/test_documents"), 0), _interval(m, "unseen/macro_f1"),
                      _interval(m, "unseen/entity_f1"), number(gap))
    return table


def print_comparison(bundles: Sequence[RunBundle]) -> None:
    console.print(ranking_table(bundles))
    if has_sides(bundles):
        console.print(seen_unseen_table(bundles))
    console.print(per_class_table(bundles))


def aggregate_table(repeats: pd.DataFrame) -> Table:
    """Systems repeated over seeds or folds: mean ± sample std and the number of runs."""
    table = Table(title="systems over seeds / folds (mean ± std)", title_justify="left")
    scores = [c[:-len("_mean")] for c in repeats.columns
              if c.endswith("_mean") and c != "cost/train_seconds_mean"]
    for column in ("system", "n", *map(score_title, scores), "train s"):
        table.add_column(column, justify="left" if column == "system" else "right")
    for row in repeats.itertuples(index=False):
        values = row._asdict()

        def cell(metric: str, digits: int = 3) -> str:
            mean = values.get(f"{metric}_mean")
            return "–" if mean is None else mean_std(mean, values[f"{metric}_std"], digits)
        table.add_row(str(row.system), str(row.n), *map(cell, scores),
                      cell("cost/train_seconds", 1))
    return table


def runs_table(frame: pd.DataFrame) -> None:
    """`dochar runs`: one line per tracked run, oldest first."""
    table = Table(title=f"{len(frame)} run(s)", title_justify="left")
    for column in frame.columns:
        table.add_column(column, justify="right" if column.endswith("_f1") else "left")
    for row in frame.itertuples(index=False):
        table.add_row(*[number(v) if isinstance(v, float) or v is None else str(v) for v in row])
    console.print(table)
