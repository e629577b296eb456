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
P = r"p (?P<p>< 0\.001|= \d\.\d{3})"
BEATS = re.compile(rf"(?P<winner>.+) beats (?P<loser>.+) by \+(?P<by>{NUMBER}) word macro-F1 "
                   rf"\[(?P<low>{NUMBER}), (?P<high>{NUMBER})\], {P}")
TIE = re.compile(rf"no clear difference between (?P<a>.+) and (?P<b>.+): "
                 rf"(?P<difference>[+-]\d+\.\d{{3}}) word macro-F1 \[(?P<low>{NUMBER}), "
                 rf"(?P<high>{NUMBER})\] \(the interval covers 0\), {P}")
DOCUMENTS = (r"(?P<documents>[\d,]+) test documents?(?: of (?P<families>\d+) layout "
             r"famil(?:y|ies)(?P<side>, all unseen in training|, all seen in training| unseen "
             r"in training| also seen in training)?|(?P<unknown> \(no layout families recorded, "
             r"so seen and unseen layouts cannot be told apart\)))?")
PLAIN = re.compile(rf"(?P<clause>.+), on {DOCUMENTS}\.(?P<rest>.*)")
SIDED = re.compile(rf"On the {DOCUMENTS}, (?P<clause>.+?)\. (?P<rest>(?:On the|Over all) .*)")
OVERALL = re.compile(r"Over all (?P<documents>[\d,]+) test documents?, (?P<clause>.+?)\."
                     r"(?P<rest>(?: [A-Z].*)?)")
SYSTEMS = {"decision_tree": "decision tree", "random_forest": "random forest",
           "relational": "R-GCN", "layout_template": "per-layout templates",
           "logistic_regression": "logistic regression"}


@dataclass(frozen=True)
class Clause:
    """One comparison the paragraph states, as challenger minus reference."""

    form: str
    challenger: str
    difference: float
    low: float
    high: float
    p: str


@dataclass(frozen=True)
class Said:
    """What the paragraph claims: the comparison over all test documents, its documents, and
    (on a test set with both sides) the comparison on each side with its documents."""

    form: str
    challenger: str
    difference: float
    low: float
    high: float
    documents: int
    families: int | None
    scope: str | None = None
    sides: dict[str, tuple[int, int, Clause]] | None = None
    rest: str = ""


def shown_name(run: RunBundle) -> str:
    """The system in words beside the exact run name, as a reader should see it."""
    model = run.tags.get("model", "")
    system = SYSTEMS.get(model, model.replace("_", " "))
    return run.name if system in ("", run.name) else f"{system} ({run.name})"


def verdict_text(html: str) -> str:
    return unescape(re.search(r'<p class="verdict" id="verdict">(.*?)</p>', html,
                              flags=re.S).group(1))


def _interval(cell: str) -> tuple[float, float]:
    low, high = cell.strip("[]").split(", ")
    return float(low), float(high)


def _same(text: str, name: str) -> bool:
    return text[:1].lower() + text[1:] == name[:1].lower() + name[1:]


def parse_clause(text: str, challenger: str, reference: str) -> Clause:
    """The clause read back, as ``challenger`` minus ``reference`` (shown names)."""
    text = text[:1].lower() + text[1:] if text.startswith("No clear") else text
    if match := BEATS.fullmatch(text):
        winner, loser = match["winner"], match["loser"]
        assert {_same(winner, challenger), _same(loser, reference)} == {True} or \
            {_same(winner, reference), _same(loser, challenger)} == {True}, (text, challenger)
        sign = 1.0 if _same(winner, challenger) else -1.0
        low, high = sorted(sign * float(v) for v in (match["low"], match["high"]))
        return Clause("challenger beats" if sign > 0 else "reference beats", challenger,
                      sign * float(match["by"]), low, high, match["p"].removeprefix("= "))
    match = TIE.fullmatch(text)
    assert match is not None, f"clause not in any expected form: {text!r}"
    assert _same(match["a"], challenger) and _same(match["b"], reference), text
    return Clause("no clear difference", challenger, float(match["difference"]),
                  float(match["low"]), float(match["high"]), match["p"].removeprefix("= "))


def _form_follows(clause: Clause) -> None:
    # The form follows from the interval: a winner only when it excludes 0.
    expected = ("challenger beats" if clause.low > 0 else "reference beats" if clause.high < 0
                else "no clear difference")
    assert clause.form == expected or 0 in (clause.low, clause.high), clause


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
    by_run = {r.name: r for r in runs}
    this, that = shown_name(by_run[challenger]), shown_name(by_run[reference])
    sides = None
    if sentence.startswith("On the "):
        sides = {}
        rest = sentence
        while match := SIDED.fullmatch(rest):
            side = "unseen" if "unseen" in match["side"] else "seen"
            sides[side] = (int(match["documents"].replace(",", "")), int(match["families"]),
                           parse_clause(match["clause"], this, that))
            rest = match["rest"]
        match = OVERALL.fullmatch(rest)
        assert match is not None and list(sides) == ["unseen", "seen"], sentence
        documents, families, scope = int(match["documents"].replace(",", "")), None, None
    else:
        match = PLAIN.fullmatch(sentence)
        assert match is not None, f"verdict not in any expected form: {sentence!r}"
        documents = int(match["documents"].replace(",", ""))
        families = None if match["families"] is None else int(match["families"])
        scope = match["side"] if match["unknown"] is None else match["unknown"]
    clause = parse_clause(match["clause"], this, that)
    _form_follows(clause)
    # The leaderboard's cells for the same pair say the same.
    header, rows = table_cells(html, "leaderboard-table")
    column = header.index("vs reference")
    cells = {row[1]: row for row in rows}
    assert cells[reference][column] == "reference"
    cell_difference, cell_interval, cell_p = cells[challenger][column:column + 3]
    assert float(cell_difference) == clause.difference
    assert _interval(cell_interval) == (clause.low, clause.high)
    assert clause.p == cell_p
    # The difference is the plain difference of the two runs' scores (rounded to 3 places).
    assert abs(clause.difference - (scores[challenger] - scores[reference])) <= 5e-4 + 1e-12
    assert documents == by_run[challenger].predictions["doc_id"].nunique()
    return Said(clause.form, challenger, clause.difference, clause.low, clause.high, documents,
                families, scope, sides, match["rest"])


def facts_of(html: str) -> dict[str, str]:
    block = re.search(r'<dl class="facts" id="facts">(.*?)</dl>', html, flags=re.S).group(1)
    pairs = re.findall(r"<dt>(.*?)</dt><dd>(.*?)</dd>", block, flags=re.S)
    return {unescape(term): unescape(value) for term, value in pairs}
