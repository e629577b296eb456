"""The report's seen/unseen section: do the runs hold up on layouts no training page showed?

A team that keeps per-layout templates asks two things before retiring them: how a model does
on the layouts they already templated (seen) and on the new ones (unseen). The section shows
both sides with their intervals, the template runs' page outcomes, and — for runs from
``dochar curve`` — both sides against the training documents per layout.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

from matplotlib.figure import Figure

from dochar.report.leaderboard import Pairing
from dochar.report.page import Html, image, interval, note, number, paragraph, table
from dochar.report.plots import plain, to_data_uri
from dochar.report.summaries import document_sides
from dochar.runs.bundle import RunBundle
from dochar.runs.numbers import p_value

SIDES = ("unseen", "seen")   # the question a layout-held-out test asks comes first
_PER_LAYOUT = re.compile(r"curve_per_layout/(\d+(?:\.\d+)?)/(seen|unseen)/macro_f1")


def score_cell(bundle: RunBundle, key: str) -> str:
    """A metric with its interval, or an en dash when the run lacks it."""
    metrics = bundle.metrics
    if key not in metrics:
        return "–"
    spread = interval(metrics.get(f"{key}_low"), metrics.get(f"{key}_high"))
    return f"{number(metrics[key])} {spread}".strip()


def _side_rows(bundles: Sequence[RunBundle], names: Sequence[str], order: Sequence[int]
               ) -> list[list[str]]:
    rows = []
    for i in order:
        m = bundles[i].metrics
        gap = (number(m["seen/macro_f1"] - m["unseen/macro_f1"])
               if "seen/macro_f1" in m and "unseen/macro_f1" in m else "–")
        rows.append([names[i], *(value for side in SIDES for value in (
            f"{int(m.get(f'{side}/test_documents', 0)):,}",
            score_cell(bundles[i], f"{side}/macro_f1"),
            score_cell(bundles[i], f"{side}/entity_f1"))), gap])
    return rows


def _paired_rows(names: Sequence[str], order: Sequence[int], pairing: Pairing
                 ) -> list[list[str]]:
    rows = []
    for i in order:
        if i == pairing.reference:
            continue
        cells = []
        for side in SIDES:
            result = pairing.sides[side].get(i)
            cells += (["–", "", ""] if result is None else
                      [f"{float(result.difference):+.3f}", interval(result.low, result.high),
                       p_value(result.p_value)])
        rows.append([names[i], *cells])
    return rows


def _families(bundles: Sequence[RunBundle], order: Sequence[int]) -> str:
    docs = document_sides(bundles[order[0]])
    counts = [f"{docs.loc[docs['side'] == side, 'layout_id'].nunique()} {side}"
              for side in SIDES if (docs["side"] == side).any()]
    return f" Layout families in the test set: {' and '.join(counts)}." if counts else ""


def _template_note(bundles: Sequence[RunBundle], names: Sequence[str], order: Sequence[int]
                   ) -> list[Html]:
    parts = []
    for i in order:
        m = bundles[i].metrics
        if "template/no_template_pages" not in m:
            continue
        parts.append(note(
            f"{names[i]}: {int(m.get('template/template_pages', 0))} test pages read by their "
            f"own layout's template, {int(m.get('template/fallback_pages', 0))} by the nearest "
            f"other layout's (page signature closer than the fallback threshold), "
            f"{int(m['template/no_template_pages'])} with no template (every word 'other')."))
    return parts


def _per_layout_plot(curves: list[tuple[str, dict[str, list[tuple[float, float]]]]]) -> str:
    figure = Figure(figsize=(5.8, 3.8))
    axes = figure.add_subplot()
    for n, (name, sides) in enumerate(curves):
        colour = f"C{n % 10}"
        for side, style in (("seen", "-"), ("unseen", "--")):
            if sides.get(side):
                x, y = zip(*sides[side])
                axes.plot(x, y, style, marker="o", markersize=4, color=colour,
                          label=plain(f"{name} ({side})"))
    axes.set_xscale("log")
    axes.set_xlabel("training documents per layout")
    axes.set_ylabel("macro-F1")
    axes.grid(alpha=0.3)
    axes.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False)
    return to_data_uri(figure)


def _curves(bundles: Sequence[RunBundle], names: Sequence[str], order: Sequence[int]
            ) -> list[tuple[str, dict[str, list[tuple[float, float]]]]]:
    curves = []
    for i in order:
        sides: dict[str, list[tuple[float, float]]] = {}
        for key, value in bundles[i].metrics.items():
            match = _PER_LAYOUT.fullmatch(key)
            if match:
                sides.setdefault(match.group(2), []).append((float(match.group(1)), value))
        if sides:
            curves.append((names[i], {side: sorted(points) for side, points in sides.items()}))
    return curves


def seen_unseen_sections(bundles: Sequence[RunBundle], names: Sequence[str],
                         order: Sequence[int], pairing: Pairing | None = None
                         ) -> list[tuple[str, str, list[Html]]]:
    """The chapter (id, heading, parts), or nothing when no run scored test documents by side."""
    chosen = [i for i in order if any(f"{side}/macro_f1" in bundles[i].metrics
                                      for side in SIDES)]
    if not chosen:
        return []
    parts = [paragraph("Test documents whose layout family was held out of training whole "
                       "(unseen) and whose family has training documents (seen). Intervals "
                       "are 95% bootstrap intervals over each side's own documents."
                       + _families(bundles, chosen)),
             table(["run", *(f"{side} {what}" for side in SIDES
                             for what in ("docs", "macro-F1", "entity F1")),
                    "gap (seen − unseen macro-F1)"],
                   _side_rows(bundles, names, chosen), numeric=range(1, 8), wrap=[0],
                   table_id="seen-unseen-table"),
             *_template_note(bundles, names, chosen)]
    if pairing is not None and pairing.sides:
        parts += [Html("<h3>Difference to the reference on each side</h3>"),
                  table(["run", *(f"{side} {what}" for side in SIDES
                                  for what in ("vs reference", "95% interval", "p"))],
                        _paired_rows(names, chosen, pairing), numeric=range(1, 7), wrap=[0],
                        table_id="seen-unseen-paired-table"),
                  note(f"{pairing.measure} of the run minus the reference run's on the same "
                       f"documents of each side; the opening paragraph quotes these.")]
    curves = _curves(bundles, names, order)
    if curves:
        parts += [image(_per_layout_plot(curves), "macro-F1 on seen and unseen layouts against "
                        "training documents per layout"),
                  note("Solid: seen layouts; dashed: unseen layouts. Points of a curve over "
                       "training documents are placed at documents ÷ training layouts.")]
    return [("seen-unseen", "Word macro-F1 on seen and unseen layouts", parts)]
