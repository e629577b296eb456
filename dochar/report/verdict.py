"""The top of the page: one sentence that answers, then what the answer rests on.

The sentence is written from the same paired result the leaderboard prints for the best run
that is not the reference, so the two can never disagree.
"""

from __future__ import annotations

import datetime as dt
from collections import Counter
from collections.abc import Sequence
from importlib import metadata

from dochar.report.leaderboard import Pairing, p_value
from dochar.report.page import interval, number
from dochar.report.summaries import has_layouts, metric, score_words
from dochar.runs.bundle import RunBundle
from dochar.runs.tracking import LIBRARIES
from dochar.splits.protocols import LAYOUT_PROTOCOLS

# A run records each library's version as tag "version/<name>" (dochar.runs.tracking) or under
# the config key "versions".


def _scope(bundle: RunBundle, n_documents: int) -> str:
    """'60 test documents of 2 layout families unseen in training', as far as the run says."""
    text = f"{n_documents:,} test document{'s' if n_documents != 1 else ''}"
    if has_layouts(bundle) and bundle.tags.get("split_protocol") in LAYOUT_PROTOCOLS:
        layouts = bundle.predictions["layout_id"].fillna("").astype(str).str.strip()
        families = layouts[layouts != ""].nunique()
        text += f" of {families} layout famil{'ies' if families != 1 else 'y'} unseen in training"
    return text


def _p_phrase(value: float) -> str:
    shown = p_value(value)
    return f"p {shown}" if shown.startswith("<") else f"p = {shown}"


def verdict(bundles: Sequence[RunBundle], names: Sequence[str], order: Sequence[int],
            score: str, pairing: Pairing) -> str:
    """One sentence: who wins against the reference, by how much, how sure, on what."""
    best = order[0]
    reference = pairing.reference
    challenger = next((i for i in order if i != reference), None)
    if reference is None or challenger is None or pairing.results is None:
        value = metric(bundles[best], score)
        n_docs = bundles[best].predictions["doc_id"].nunique()
        ranked = interval(metric(bundles[best], f"{score}_low"),
                          metric(bundles[best], f"{score}_high"))
        why = ("no reference run to compare with" if reference is None or challenger is None
               else "no paired comparison available")
        lead = "scores" if len(bundles) == 1 else "ranks first with"
        return (f"{names[best]} {lead} {score_words(score)} {number(value)}"
                f"{' ' + ranked if ranked else ''} on {_scope(bundles[best], n_docs)}; {why}.")
    if challenger in pairing.failures:
        return (f"{names[challenger]} ranks first among the runs compared, but cannot be paired "
                f"with the reference {names[reference]}: {pairing.failures[challenger]}.")
    result = pairing.results[challenger]
    difference, low, high = float(result.difference), float(result.low), float(result.high)
    n_docs = getattr(result, "n_documents", None) or \
        bundles[challenger].predictions["doc_id"].nunique()
    tail = f"{_p_phrase(result.p_value)}, on {_scope(bundles[challenger], int(n_docs))}."
    if low > 0:
        return (f"{names[challenger]} beats {names[reference]} by {difference:+.3f} "
                f"{pairing.measure} {interval(low, high)}, {tail}")
    if high < 0:
        return (f"{names[reference]} beats {names[challenger]} by {-difference:+.3f} "
                f"{pairing.measure} {interval(-high, -low)}, {tail}")
    return (f"No clear difference between {names[challenger]} and {names[reference]}: "
            f"{difference:+.3f} {pairing.measure} {interval(low, high)} (the interval covers 0), "
            f"{tail}")


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
