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


P_FLOOR = 0.001   # smaller p-values are written "< 0.001": resampling cannot resolve them finer


def p_value(value: float | None) -> str:
    """A p-value as every dochar output writes it: ``0.012``, or ``< 0.001`` below the floor."""
    if value is None or not math.isfinite(float(value)):
        return MISSING
    value = float(value)
    return f"< {P_FLOOR:g}" if 0 <= value < P_FLOOR else number(value)


def p_phrase(value: float | None) -> str:
    """``p = 0.012`` or ``p < 0.001``: the p-value inside a sentence."""
    shown = p_value(value)
    return f"p {shown}" if shown.startswith("<") else f"p = {shown}"
