"""Reading the report's opening sentence back and checking it against the leaderboard's cells
and against scores recomputed with scikit-learn."""

from __future__ import annotations

import re
from dataclasses import dataclass
from html import unescape

from sklearn.metrics import f1_score

from dochar.runs.bundle import RunBundle
from tests.helpers.report_runs import table_cells

NUMBER = r"-?\d+\.\d{3}"
TAIL = (r" word macro-F1 \[(?P<low>{n}), (?P<high>{n})\](?: \(the interval covers 0\))?, "
        r"p (?P<p>< 0\.001|= \d\.\d{{3}}), on (?P<documents>[\d,]+) test documents?"
        r"(?: of (?P<families>\d+) layout famil(?:y|ies) unseen in training)?\.").format(n=NUMBER)
BEATS = re.compile(rf"(?P<winner>.+) beats (?P<loser>.+) by \+(?P<by>{NUMBER})" + TAIL)
TIE = re.compile(r"No clear difference between (?P<a>.+) and (?P<b>.+): "
                 r"(?P<difference>[+-]\d+\.\d{3})" + TAIL)


@dataclass(frozen=True)
class Said:
    """What the sentence claims, as challenger minus reference."""

    form: str
    challenger: str
    difference: float
    low: float
    high: float
    documents: int
    families: int | None


def verdict_text(html: str) -> str:
    return unescape(re.search(r'<p class="verdict" id="verdict">(.*?)</p>', html,
                              flags=re.S).group(1))


def _interval(cell: str) -> tuple[float, float]:
    low, high = cell.strip("[]").split(", ")
    return float(low), float(high)


def check_verdict(html: str, runs: list[RunBundle], reference: str, measure: str) -> Said:
    """Parse the verdict, check it against the leaderboard and recomputed scores, return it."""
    assert measure == "macro_f1"
    sentence = verdict_text(html)
    # The run described is the best one that is not the reference, by sklearn's macro-F1
    # (ties keep the input order, as the ranking does).
    scores = {r.name: f1_score(r.predictions["label"], r.predictions["predicted"],
                               average="macro") for r in runs}
    others = [r.name for r in runs if r.name != reference]
    challenger = max(others, key=lambda name: (scores[name], -others.index(name)))
    if match := BEATS.fullmatch(sentence):
        pair = {match["winner"], match["loser"]}
        assert pair == {challenger, reference}, (sentence, challenger, reference)
        sign = 1.0 if match["winner"] == challenger else -1.0
        form = "challenger beats" if sign > 0 else "reference beats"
        difference = sign * float(match["by"])
        low, high = sorted(sign * float(v) for v in (match["low"], match["high"]))
    else:
        match = TIE.fullmatch(sentence)
        assert match is not None, f"verdict not in any expected form: {sentence!r}"
        assert (match["a"], match["b"]) == (challenger, reference)
        form = "no clear difference"
        difference, low, high = (float(match[k]) for k in ("difference", "low", "high"))
    # The leaderboard's cells for the same pair say the same.
    header, rows = table_cells(html, "leaderboard-table")
    column = header.index("vs reference")
    by_name = {row[1]: row for row in rows}
    assert by_name[reference][column] == "reference"
    cell_difference, cell_interval, cell_p = by_name[challenger][column:column + 3]
    assert float(cell_difference) == difference
    assert _interval(cell_interval) == (low, high)
    assert match["p"].removeprefix("= ") == cell_p
    # The form follows from the interval: a winner only when it excludes 0.
    expected = ("challenger beats" if low > 0 else "reference beats" if high < 0
                else "no clear difference")
    assert form == expected or (low == 0 or high == 0), (form, low, high)
    # The difference is the plain difference of the two runs' scores (rounded to 3 places).
    assert abs(difference - (scores[challenger] - scores[reference])) <= 5e-4 + 1e-12
    run = next(r for r in runs if r.name == challenger)
    documents = int(match["documents"].replace(",", ""))
    assert documents == run.predictions["doc_id"].nunique()
    families = None if match["families"] is None else int(match["families"])
    return Said(form, challenger, difference, low, high, documents, families)


def facts_of(html: str) -> dict[str, str]:
    block = re.search(r'<dl class="facts" id="facts">(.*?)</dl>', html, flags=re.S).group(1)
    pairs = re.findall(r"<dt>(.*?)</dt><dd>(.*?)</dd>", block, flags=re.S)
    return {unescape(term): unescape(value) for term, value in pairs}
