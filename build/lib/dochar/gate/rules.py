"""When a score counts as fallen: tolerances per metric kind and the comparison itself.

Gated metrics are the headline scores named in the gate's tolerances (any score a run carries
with an interval: ``macro_f1``, ``entity_f1``, ``link_f1`` ..., and on data with a record shape
``records/straight_through`` and the other record scores; see
:func:`dochar.metrics.evaluate.headline_names`) and every class's word F1 (``f1/<class>``). A new
headline score is gated by its scorer plus one tolerance line. Two modes:

* ``absolute``: a metric fails when ``now < baseline - tolerance``.
* ``interval``: a metric fails when ``now < baseline_low - tolerance``, where ``baseline_low``
  is the low end of the baseline's percentile bootstrap interval over test documents. The
  interval is the noise a rerun on other documents would show, so only a drop beyond it and
  the tolerance fails. A baseline metric without an interval falls back to its value.

Nothing here runs a model: the inputs are two ``metric -> Score`` maps, the output one
:class:`Check` per metric, so the rule can be tested on hand-made numbers.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from dochar.errors import DocharError
from dochar.tasks.base import ENTITY_F1, MACRO_F1

MODES = ("interval", "absolute")
DEFAULT_HEADLINE = (MACRO_F1, ENTITY_F1)   # gated when the tolerances name none
CLASS_PREFIX = "f1/"
# Scores equal up to float round-off are equal (a rerun must not fail on the last bit).
_SLACK = 1e-12


class GateConfigError(DocharError):
    """A gate setting that cannot be used as given (names the key and the value)."""


@dataclass(frozen=True)
class Score:
    """A metric's point value and, when known, its bootstrap interval and test support."""

    value: float
    low: float | None = None
    high: float | None = None
    support: float | None = None

    def to_dict(self) -> dict[str, float]:
        out = {"value": self.value}
        out.update({k: v for k, v in (("low", self.low), ("high", self.high),
                                      ("support", self.support)) if v is not None})
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any], where: str) -> Score:
        if not isinstance(data, Mapping) or "value" not in data:
            raise GateConfigError(f"{where}: expected a mapping with at least 'value', "
                                  f"got {data!r}")
        values = {}
        for key in ("value", "low", "high", "support"):
            if data.get(key) is None:
                continue
            try:
                values[key] = float(data[key])
            except (TypeError, ValueError):
                raise GateConfigError(f"{where}.{key}: not a number: {data[key]!r}") from None
        return cls(**values)


def _tolerance(value: Any, where: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise GateConfigError(f"{where}: tolerance must be a number, got {value!r}") from None
    if not math.isfinite(number) or number < 0:
        raise GateConfigError(f"{where}: tolerance must be a finite number >= 0, got {value!r}")
    return number


class Tolerances:
    """Allowed drop per gated metric: one per headline score, by the scorer's name
    (``macro_f1=0.02``), ``class_f1`` for every class and ``classes`` for named ones."""

    def __init__(self, mode: str = "interval", class_f1: float = 0.0,
                 classes: Mapping[str, float] | None = None, **headline: float) -> None:
        self.mode = mode
        self.class_f1 = float(class_f1)
        self.classes = dict(classes or {})
        self.headline = {name: float(value) for name, value in headline.items()} or \
            dict.fromkeys(DEFAULT_HEADLINE, 0.0)

    @classmethod
    def from_config(cls, data: Mapping[str, Any], where: str = "tolerance") -> Tolerances:
        from dochar.metrics.evaluate import headline_names

        if not isinstance(data, Mapping):
            raise GateConfigError(f"{where}: expected a mapping, got {data!r}")
        known = {"mode", "class_f1", "classes", *headline_names()}
        unknown = sorted(set(data) - known)
        if unknown:
            raise GateConfigError(f"{where}: unknown key(s) {unknown}; known keys: {sorted(known)}")
        mode = data.get("mode", "interval")
        if mode not in MODES:
            raise GateConfigError(f"{where}.mode: expected one of {list(MODES)}, got {mode!r}")
        classes = data.get("classes") or {}
        if not isinstance(classes, Mapping):
            raise GateConfigError(f"{where}.classes: expected a mapping class -> tolerance, "
                                  f"got {classes!r}")
        headline = {k: _tolerance(v, f"{where}.{k}") for k, v in data.items()
                    if k not in {"mode", "class_f1", "classes"}}
        return cls(mode=mode, class_f1=_tolerance(data.get("class_f1", 0.0), f"{where}.class_f1"),
                   classes={str(k): _tolerance(v, f"{where}.classes.{k}")
                            for k, v in classes.items()}, **headline)

    def for_metric(self, metric: str) -> float:
        if metric in self.headline:
            return self.headline[metric]
        if metric.startswith(CLASS_PREFIX):
            return self.classes.get(metric[len(CLASS_PREFIX):], self.class_f1)
        raise GateConfigError(f"metric {metric!r} is not gated (gated: {list(self.headline)} "
                              f"and '{CLASS_PREFIX}<class>')")

    def order(self, metric: str) -> tuple[int, str]:
        """Headline scores first, in the order the scorers are listed, then classes by name."""
        from dochar.metrics.evaluate import headline_names

        canonical = headline_names()
        if metric in self.headline:
            return (canonical.index(metric) if metric in canonical else len(canonical), metric)
        return (len(canonical) + 1, metric)

    def to_dict(self) -> dict[str, Any]:
        return {"mode": self.mode, **self.headline, "class_f1": self.class_f1,
                "classes": dict(self.classes)}


@dataclass(frozen=True)
class Check:
    """One metric's verdict: ok, better, regression, missing (gone from the run) or new."""

    metric: str
    baseline: Score | None
    now: Score | None
    tolerance: float
    threshold: float | None      # the run fails below this value
    verdict: str
    note: str = ""

    @property
    def failed(self) -> bool:
        return self.verdict in ("regression", "missing")

    @property
    def change(self) -> float | None:
        if self.baseline is None or self.now is None:
            return None
        return self.now.value - self.baseline.value


def check_metric(metric: str, baseline: Score, now: Score | None, rules: Tolerances) -> Check:
    tolerance = rules.for_metric(metric)
    use_interval = rules.mode == "interval" and baseline.low is not None
    reference = baseline.low if use_interval else baseline.value
    note = "" if use_interval or rules.mode == "absolute" else "baseline has no interval"
    threshold = reference - tolerance
    if now is None:
        return Check(metric, baseline, None, tolerance, threshold, "missing",
                     "the run reports no such metric")
    if now.value < threshold - _SLACK:
        verdict = "regression"
    elif now.value > (baseline.high if use_interval and baseline.high is not None
                      else baseline.value + tolerance) + _SLACK:
        verdict = "better"
    else:
        verdict = "ok"
    return Check(metric, baseline, now, tolerance, threshold, verdict, note)


def compare(baseline: Mapping[str, Score], now: Mapping[str, Score],
            rules: Tolerances) -> list[Check]:
    """One check per baseline metric (headline first, then classes), then metrics new in ``now``."""
    checks = [check_metric(m, baseline[m], now.get(m), rules) for m in sorted(baseline, key=rules.order)]
    checks += [Check(m, None, now[m], rules.for_metric(m), None, "new", "not in the baseline")
               for m in sorted(set(now) - set(baseline), key=rules.order)]
    return checks
