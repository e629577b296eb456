"""What the gate shows: a terminal diff table, a markdown summary and a JUnit XML file.

JUnit XML is the one test-result format nearly every CI system displays; each gated metric is a
testcase, a regression is its ``failure`` and a gate that could not run is one ``error``.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from pathlib import Path

from rich.markup import escape
from rich.table import Table

from dochar.data.files import atomic_write, write_text_atomic
from dochar.gate.rules import Check
from dochar.runs.numbers import number

PASS, REGRESSION, COULD_NOT_RUN = 0, 1, 2
OUTCOMES = {PASS: "PASS", REGRESSION: "FAIL", COULD_NOT_RUN: "COULD NOT RUN"}


@dataclass
class GateOutcome:
    """Everything the three outputs print; ``error`` is set when the gate could not run."""

    name: str
    code: int
    checks: list[Check] = field(default_factory=list)
    mode: str = "interval"
    baseline_path: str = ""
    notes: list[str] = field(default_factory=list)
    error: str = ""
    error_detail: str = ""
    properties: dict[str, str] = field(default_factory=dict)
    seconds: float = 0.0

    @property
    def failures(self) -> list[Check]:
        return [c for c in self.checks if c.failed]


def _baseline_cell(check: Check) -> str:
    b = check.baseline
    if b is None:
        return "–"
    if b.low is None or b.high is None:
        return number(b.value, 4)
    return f"{number(b.value, 4)} [{number(b.low, 4)}, {number(b.high, 4)}]"


def _change(check: Check) -> str:
    return "–" if check.change is None else f"{check.change:+.4f}"


def rows(outcome: GateOutcome) -> list[tuple[str, ...]]:
    return [(c.metric, _baseline_cell(c), number(c.now.value if c.now else None, 4), _change(c),
             number(c.tolerance, 3), number(c.threshold, 4), c.verdict) for c in outcome.checks]


COLUMNS = ("metric", "baseline [interval]", "now", "change", "tolerance", "fails below",
           "verdict")


def rule_text(mode: str) -> str:
    if mode == "interval":
        return ("a metric fails when it falls below the low end of the baseline's bootstrap "
                "interval by more than its tolerance")
    return "a metric fails when it falls below the baseline value by more than its tolerance"


def diff_table(outcome: GateOutcome) -> Table:
    table = Table(title=f"dochar gate {outcome.name}: {OUTCOMES[outcome.code]} "
                        f"({outcome.mode} mode)", title_justify="left")
    for column in COLUMNS:
        table.add_column(escape(column),
                         justify="left" if column in {"metric", "verdict"} else "right")
    styles = {"regression": "bold red", "missing": "bold red", "better": "green"}
    for row, check in zip(rows(outcome), outcome.checks):
        table.add_row(*map(escape, row), style=styles.get(check.verdict))
    return table


def markdown(outcome: GateOutcome) -> str:
    """A summary any CI page renders: the verdict, the rule, the table and the notes."""
    lines = [f"## dochar gate `{outcome.name}`: {OUTCOMES[outcome.code]}", ""]
    if outcome.code == COULD_NOT_RUN:
        lines += ["The gate could not run, so nothing was compared:", "", "```",
                  outcome.error, "```", ""]
    else:
        failed = outcome.failures
        lines += [f"{len(outcome.checks)} metrics checked, {len(failed)} failed"
                  + (": " + ", ".join(f"`{c.metric}`" for c in failed) if failed else "") + ".",
                  f"Baseline `{outcome.baseline_path}`; {outcome.mode} mode: "
                  f"{rule_text(outcome.mode)}.", "",
                  "| " + " | ".join(COLUMNS) + " |",
                  "|" + "|".join("---" if i in (0, 6) else "---:" for i in range(len(COLUMNS)))
                  + "|"]
        for row, check in zip(rows(outcome), outcome.checks):
            verdict = f"**{row[-1]}**" if check.failed else row[-1]
            lines.append("| " + " | ".join((f"`{row[0]}`", *row[1:-1], verdict)) + " |")
        lines.append("")
    if outcome.notes:
        lines += ["Notes:", ""] + [f"- {note}" for note in outcome.notes] + [""]
    return "\n".join(lines)


def _failure_message(check: Check) -> str:
    if check.verdict == "missing":
        return f"{check.metric}: in the baseline but not reported by this run"
    return (f"{check.metric} = {check.now.value:.4f}, below {check.threshold:.4f} "
            f"(baseline {_baseline_cell(check)}, tolerance {check.tolerance:.3f})")


def junit_xml(outcome: GateOutcome) -> ET.ElementTree:
    """testsuites > testsuite > testcase per metric (a ``failure`` per regression)."""
    cases = len(outcome.checks) if outcome.code != COULD_NOT_RUN else 1
    failures = len(outcome.failures) if outcome.code != COULD_NOT_RUN else 0
    errors = 1 if outcome.code == COULD_NOT_RUN else 0
    counts = {"tests": str(cases), "failures": str(failures), "errors": str(errors),
              "time": f"{outcome.seconds:.3f}"}
    root = ET.Element("testsuites", {"name": "dochar gate", **counts})
    suite = ET.SubElement(root, "testsuite", {"name": f"dochar gate {outcome.name}", **counts,
                                              "skipped": "0"})
    properties = ET.SubElement(suite, "properties")
    for key, value in sorted({"baseline": outcome.baseline_path, "mode": outcome.mode,
                              **outcome.properties}.items()):
        ET.SubElement(properties, "property", {"name": key, "value": str(value)})
    classname = f"dochar.gate.{outcome.name}"
    if outcome.code == COULD_NOT_RUN:
        case = ET.SubElement(suite, "testcase", {"classname": classname, "name": "run",
                                                 "time": "0"})
        error = ET.SubElement(case, "error", {"type": "could-not-run", "message": outcome.error})
        error.text = outcome.error_detail or outcome.error
        return ET.ElementTree(root)
    for row, check in zip(rows(outcome), outcome.checks):
        case = ET.SubElement(suite, "testcase", {"classname": classname, "name": check.metric,
                                                 "time": "0"})
        if check.failed:
            failure = ET.SubElement(case, "failure", {"type": check.verdict,
                                                      "message": _failure_message(check)})
            failure.text = " | ".join(f"{c}: {v}" for c, v in zip(COLUMNS, row))
        else:
            ET.SubElement(case, "system-out").text = (
                f"{check.verdict}: now {number(check.now.value if check.now else None, 4)}, "
                f"baseline {_baseline_cell(check)}, fails below {number(check.threshold, 4)}")
    if outcome.notes:
        ET.SubElement(suite, "system-out").text = "\n".join(outcome.notes)
    return ET.ElementTree(root)


def write_outputs(outcome: GateOutcome, junit: Path | None, summary: Path | None) -> list[Path]:
    written = []
    if junit is not None:
        tree = junit_xml(outcome)
        ET.indent(tree)
        with atomic_write(junit) as scratch:
            tree.write(scratch, encoding="utf-8", xml_declaration=True)
        written.append(junit)
    if summary is not None:
        write_text_atomic(summary, markdown(outcome))
        written.append(summary)
    return written
