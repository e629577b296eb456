"""Mean ± std over runs that differ only in fold or seed: one row per compared system.

A k-fold or multi-seed score is a small sample, so the spread is the sample standard deviation
(``ddof=1``, pandas' default; undefined — NaN — for a single run) and ``n`` is always shown
beside it.
"""

from __future__ import annotations

from collections.abc import Sequence

import pandas as pd

from dochar.errors import DocharError


class AggregateError(DocharError):
    """Raised when runs cannot be grouped or averaged as asked."""


def aggregate_runs(frame: pd.DataFrame, by: Sequence[str], metrics: Sequence[str]
                   ) -> pd.DataFrame:
    """One row per distinct ``by`` value: ``<metric>_mean``, ``<metric>_std`` and ``n``.

    ``n`` counts the runs of the group; a metric a run did not log (NaN) is left out of that
    metric's mean and std, and ``<metric>_n`` says how many runs it rests on whenever that
    differs from ``n`` for some group.
    """
    by, metrics = list(by), list(metrics)
    if not by:
        raise AggregateError("aggregate_runs needs at least one 'by' column")
    missing = [c for c in (*by, *metrics) if c not in frame.columns]
    if missing:
        raise AggregateError(f"run table has no column(s) {missing}; it has "
                             f"{sorted(map(str, frame.columns))}")
    if frame.empty:
        raise AggregateError("no runs to aggregate")
    values = frame[metrics].apply(pd.to_numeric, errors="coerce")
    bad = [m for m in metrics if values[m].isna().all()]
    if bad:
        raise AggregateError(f"metric column(s) {bad} hold no numbers")
    keys = frame[by].astype("string").fillna("")
    grouped = values.groupby([keys[c] for c in by], sort=True)
    out = pd.concat({"mean": grouped.mean(), "std": grouped.std(ddof=1),
                     "count": grouped.count()}, axis=1)
    result = pd.DataFrame(index=out.index)
    for metric in metrics:
        result[f"{metric}_mean"] = out[("mean", metric)]
        result[f"{metric}_std"] = out[("std", metric)]
    result["n"] = grouped.size()
    for metric in metrics:
        counts = out[("count", metric)]
        if (counts != result["n"]).any():
            result[f"{metric}_n"] = counts
    return result.reset_index()
