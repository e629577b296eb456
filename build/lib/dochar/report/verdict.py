"""The top of the page: one paragraph that answers, then what the answer rests on.

The paragraph is written from the same paired results the leaderboard (all test documents) and
the seen/unseen section (each side's documents) print, so they can never disagree. It names
each system in words and by its exact run name, and says which documents each figure is about;
on a test set with both seen and unseen layout families the unseen side comes first, since
that is the question a layout-held-out test asks.
"""

from __future__ import annotations

import datetime as dt
from collections import Counter
from collections.abc import Sequence
from importlib import metadata
from typing import Any

import pandas as pd

from dochar.report.leaderboard import Pairing
from dochar.report.page import interval, number
from dochar.report.summaries import (described, document_sides, metric, score_words,
                                     system_words)
from dochar.runs.bundle import RunBundle
from dochar.runs.numbers import p_phrase
from dochar.runs.tracking import LIBRARIES

# Without layout ids nothing tells a seen layout from an unseen one; the sentence says so
# rather than leave the reader to assume either.
NO_FAMILIES = " (no layout families recorded, so seen and unseen layouts cannot be told apart)"


def _plural(n: int, one: str, many: str) -> str:
    return f"{n:,} {one if n == 1 else many}"


def _documents(docs: pd.DataFrame, side: str | None = None) -> str:
    """'60 test documents of 2 layout families unseen in training' for the documents given;
    without layout ids, says that seen and unseen cannot be told apart."""
    text = _plural(len(docs), "test document", "test documents")
    families = docs.loc[docs["layout_id"] != "", "layout_id"].nunique()
    if families == 0:
        return text + NO_FAMILIES
    text += " of " + _plural(families, "layout family", "layout families")
    sides = set(docs["side"]) if side is None else {side}
    if sides == {"unseen"}:
        text += " unseen in training" if side else ", all unseen in training"
    elif sides == {"seen"}:
        text += " also seen in training" if side else ", all seen in training"
    return text


def _clause(challenger: str, reference: str, result: Any, measure: str) -> str:
    """Who wins by how much, how sure: from the paired result (challenger minus reference)."""
    difference, low, high = float(result.difference), float(result.low), float(result.high)
    p = p_phrase(result.p_value)
    if low > 0:
        return f"{challenger} beats {reference} by {difference:+.3f} {measure} " \
               f"{interval(low, high)}, {p}"
    if high < 0:
        return f"{reference} beats {challenger} by {-difference:+.3f} {measure} " \
               f"{interval(-high, -low)}, {p}"
    return (f"no clear difference between {challenger} and {reference}: {difference:+.3f} "
            f"{measure} {interval(low, high)} (the interval covers 0), {p}")


def _capital(text: str) -> str:
    return text[:1].upper() + text[1:]


def _others(bundles: Sequence[RunBundle], names: Sequence[str], order: Sequence[int],
            named: set[int], docs: pd.DataFrame, score: str) -> str:
    """The best run of each system the comparison leaves out (a GNN, templates, ...), with its
    score on each side, so no system a reader ran is missing from the paragraph."""
    systems = {system_words(bundles[i]) for i in named}
    sides = [side for side in ("unseen", "seen") if (docs["side"] == side).any()]
    parts = []
    for i in order:
        bundle = bundles[i]
        if i in named or system_words(bundle) in systems:
            continue
        systems.add(system_words(bundle))
        scores = [f"{number(metric(bundle, f'{side}/{score}'))} on the {side} families"
                  for side in sides if metric(bundle, f"{side}/{score}") is not None]
        if not scores and metric(bundle, score) is not None:
            every = _plural(len(docs), "test document", "test documents")
            scores = [f"{number(metric(bundle, score))} on all {every}"]
        if scores:
            parts.append(f" {_capital(described(bundle, names[i]))}: {score_words(score)} "
                         f"{' and '.join(scores)}.")
    return "".join(parts)


def verdict(bundles: Sequence[RunBundle], names: Sequence[str], order: Sequence[int],
            score: str, pairing: Pairing) -> str:
    """Who wins against the reference, by how much, how sure, and on which documents."""
    best = order[0]
    reference = pairing.reference
    challenger = next((i for i in order if i != reference), None)
    if reference is None or challenger is None or pairing.results is None:
        value = metric(bundles[best], score)
        ranked = interval(metric(bundles[best], f"{score}_low"),
                          metric(bundles[best], f"{score}_high"))
        why = ("no reference run to compare with" if reference is None or challenger is None
               else "no paired comparison available")
        lead = "scores" if len(bundles) == 1 else "ranks first with"
        return (f"{described(bundles[best], names[best])} {lead} {score_words(score)} "
                f"{number(value)}{' ' + ranked if ranked else ''} on "
                f"{_documents(document_sides(bundles[best]))}; {why}.")
    this, that = (described(bundles[i], names[i]) for i in (challenger, reference))
    if challenger in pairing.failures:
        return (f"{this} ranks first among the runs compared, but cannot be paired with the "
                f"reference {that}: {pairing.failures[challenger]}.")
    docs = document_sides(bundles[challenger])
    overall = _clause(this, that, pairing.results[challenger], pairing.measure)
    if not pairing.sides:
        text = f"{_capital(overall)}, on {_documents(docs)}."
    else:
        clauses = [f"On the {_documents(docs[docs['side'] == side], side)}, "
                   f"{_clause(this, that, pairing.sides[side][challenger], pairing.measure)}."
                   for side in ("unseen", "seen")]
        every = _plural(len(docs), "test document", "test documents")
        text = " ".join([*clauses, f"Over all {every}, {overall}."])
    return text + _others(bundles, names, order, {challenger, reference}, docs, score)


def _agreed(values: Sequence[str | None], what: str) -> str:
    """One value when the runs agree; otherwise each value with its number of runs."""
    given = [v for v in values if v]
    if not given:
        return f"not recorded by the runs ({what})"
    counts = Counter(given)
    missing = len(values) - len(given)
    if len(counts) == 1:
        text = given[0]
    else:
        text = "differs between runs: " + ", ".join(f"{v} ({n} run{'s' if n > 1 else ''})"
                                                     for v, n in counts.most_common())
    return text + (f"; {missing} run(s) record none" if missing else "")


# A run records each library's version as tag "version/<name>" (dochar.runs.tracking) or under
# the config key "versions".
def _recorded_version(bundle: RunBundle, library: str) -> str | None:
    versions = bundle.config.get("versions") if isinstance(bundle.config, dict) else None
    value = bundle.tags.get(f"version/{library}") or \
        (versions.get(library) if isinstance(versions, dict) else None)
    return None if value is None else str(value)


def installed_version(library: str) -> str:
    try:
        return metadata.version(library)
    except metadata.PackageNotFoundError:
        return "not installed"


def library_versions(bundles: Sequence[RunBundle]) -> str:
    """Versions the runs recorded, else those installed where the report is written; says which."""
    parts, sources = [], set()
    for library in LIBRARIES:
        recorded = [_recorded_version(b, library) for b in bundles]
        if any(recorded):
            parts.append(f"{library} {_agreed(recorded, 'tag version/' + library)}")
            sources.add("recorded by the runs")
        else:
            parts.append(f"{library} {installed_version(library)}")
            sources.add("installed where this report was written")
    return ", ".join(parts) + " (" + " / ".join(sorted(sources)) + ")"


def provenance(bundles: Sequence[RunBundle], written: dt.date) -> list[tuple[str, str]]:
    """What the verdict rests on: date, data, split, commit and library versions."""
    def tag(key: str) -> list[str | None]:
        return [b.tags.get(key) for b in bundles]

    data = _agreed(tag("data_fingerprint"), "tag data_fingerprint")
    datasets = sorted({d for d in tag("dataset") if d})
    if datasets:
        data = f"{', '.join(datasets)}, fingerprint {data}"
    commits = [c[:12] if c else c for c in tag("git_commit")]
    return [("written", written.isoformat()),
            ("data", data),
            ("split protocol", _agreed(tag("split_protocol"), "tag split_protocol")),
            ("commit", _agreed(commits, "tag git_commit")),
            ("libraries", library_versions(bundles))]
