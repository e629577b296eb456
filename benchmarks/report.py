"""Figures, verdicts and the Markdown table ``make bench`` writes."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass


@dataclass
class Figure:
    """One measured figure; ``threshold`` and ``comparison`` make it a target, or None (shown
    for context only). ``value`` is what the target judges: the measurement or a ratio."""

    name: str
    measured: str
    reference: str = "–"
    ratio: float | None = None
    comparison: str | None = None      # "<=" or ">="
    threshold: float | None = None
    judged: bool = True                # False in smoke mode: computed, not judged
    number: float | None = None        # judged when there is no ratio

    @property
    def value(self) -> float | None:
        return self.ratio if self.ratio is not None else self.number

    @property
    def target(self) -> str:
        if self.threshold is None:
            return "–"
        return f"{'≤' if self.comparison == '<=' else '≥'} {self.threshold:g}"

    @property
    def met(self) -> bool | None:
        if self.threshold is None or not self.judged or self.value is None:
            return None
        return (self.value <= self.threshold if self.comparison == "<="
                else self.value >= self.threshold)

    @property
    def verdict(self) -> str:
        if self.threshold is None:
            return "context"
        if not self.judged:
            return "not judged (smoke)"
        return "met" if self.met else "MISSED"


def timed(work: Callable[[], object], repeats: int = 1) -> float:
    """Least CPU time of ``repeats`` runs: on a shared machine, waiting for a core is not work."""
    best = float("inf")
    for _ in range(repeats):
        started = time.process_time()
        work()
        best = min(best, time.process_time() - started)
    return best


def markdown(figures: list[Figure], header: str) -> str:
    lines = [header, "", "| figure | measured | reference | ratio | target | verdict |",
             "|---|---|---|---|---|---|"]
    for f in figures:
        ratio = "–" if f.ratio is None else f"{f.ratio:.3g}"
        lines.append(f"| {f.name} | {f.measured} | {f.reference} | {ratio} | {f.target} | "
                     f"{f.verdict} |")
    return "\n".join(lines) + "\n"
