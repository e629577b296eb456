"""How dochar writes a number, the same in the terminal, the report and the gate's files."""

from __future__ import annotations

import math

MISSING = "–"


def number(value: float | None, digits: int = 3) -> str:
    """Fixed-decimal text; a missing or non-finite value shows as an en dash."""
    if value is None:
        return MISSING
    value = float(value)
    if not math.isfinite(value):
        return MISSING
    return f"{value:.{digits}f}"


def interval(low: float | None, high: float | None, digits: int = 3) -> str:
    """``[0.950, 0.961]``; nothing when the run has no interval."""
    if low is None or high is None:
        return ""
    return f"[{number(low, digits)}, {number(high, digits)}]"


def mean_std(mean: float, std: float, digits: int = 3) -> str:
    """``0.612 ± 0.014``; a single run (no spread) shows the mean alone."""
    if not math.isfinite(float(std)):
        return number(mean, digits)
    return f"{number(mean, digits)} ± {number(std, digits)}"
