"""The gate guards the straight-through rate like any headline score (interval rule by hand)."""

from __future__ import annotations

from dochar.gate.rules import Score, Tolerances, check_metric


def test_straight_through_falls_only_below_its_interval_less_the_tolerance():
    rules = Tolerances.from_config({"records/straight_through": 0.05})
    baseline = Score(0.60, 0.50, 0.70)
    # interval mode: fails when now < low - tolerance = 0.50 - 0.05 = 0.45
    assert check_metric("records/straight_through", baseline, Score(0.44), rules).failed
    assert not check_metric("records/straight_through", baseline, Score(0.46), rules).failed
