"""The report's records chapter: how many documents would go through without correction.

First the straight-through rate per run (the share of test documents whose whole record is
right), beside field-level F1, TED accuracy and row F1, each with its bootstrap interval; then
the accuracy of each field per run; then the best run's worst documents, predicted and true
record side by side. Runs whose data has no record shape carry no record scores and are left out.
"""

from __future__ import annotations

import json
from collections.abc import Sequence

from dochar.report.page import Html, esc, note, paragraph, table
from dochar.report.seen_unseen import score_cell
from dochar.runs.bundle import RunBundle
from dochar.runs.numbers import number

SCORES = (("straight_through", "straight-through"), ("field_f1", "field F1"),
          ("ted_accuracy", "TED accuracy"), ("row_f1", "row F1"))
WORST = 5   # documents shown side by side
RECORD_STYLE = (".record-pair { display: grid; gap: 1em;\n"
                "  grid-template-columns: minmax(0, 1fr) minmax(0, 1fr); }\n"   # long lines scroll
                ".record-pair pre { max-height: 24em; overflow: auto; font-size: 0.8em; }")


def _worst(bundle: RunBundle) -> list[Html]:
    frame = bundle.tables.get("records")
    pairs = bundle.tables.get("record_pairs")
    if frame is None or pairs is None:
        return []
    ranked = frame.sort_values(["straight_through", "ted_accuracy"]).head(WORST)
    ranked = ranked[ranked["straight_through"] < 1]
    parts = []
    for doc_id, row in ranked.iterrows():
        predicted, truth = (json.dumps(json.loads(pairs.loc[doc_id, column]), indent=1,
                                       ensure_ascii=False) for column in ("predicted", "truth"))
        parts.append(Html(
            f"<h3>{esc(doc_id)}: TED accuracy {number(row['ted_accuracy'])}</h3>"
            f'<div class="record-pair"><div><h4>predicted</h4><pre>{esc(predicted)}</pre></div>'
            f"<div><h4>true</h4><pre>{esc(truth)}</pre></div></div>"))
    return parts


def records_sections(bundles: Sequence[RunBundle], names: Sequence[str], order: Sequence[int]
                     ) -> list[tuple[str, str, list[Html]]]:
    """The chapter (id, heading, parts), or nothing when no run scored records."""
    chosen = [i for i in order if "records/straight_through" in bundles[i].metrics]
    if not chosen:
        return []
    chosen.sort(key=lambda i: -bundles[i].metrics["records/straight_through"])
    rows = [[names[i], *(score_cell(bundles[i], f"records/{key}") for key, _ in SCORES)]
            for i in chosen]
    labels = sorted({k.removeprefix("records/field/") for i in chosen
                     for k in bundles[i].metrics if k.startswith("records/field/")})
    sided = [side for side in ("unseen", "seen")
             if any(f"records/{side}/straight_through" in bundles[i].metrics for i in chosen)]
    if sided:   # straight-through on each layout side, unseen first: the question templates raise
        for row, i in zip(rows, chosen):
            row[2:2] = [score_cell(bundles[i], f"records/{side}/straight_through")
                        for side in sided]
    fields = [[names[i], *(number(bundles[i].metrics.get(f"records/field/{label}"))
                           for label in labels)] for i in chosen]
    best = bundles[chosen[0]]
    return [("records", "Records: documents that need no correction", [
        paragraph("Straight-through: the share of test documents whose whole record (header "
                  "fields and line items) is right, raw values. Field F1 (Kim et al., ECCV "
                  "2022), TED accuracy (Hwang et al., EMNLP 2021) and row F1 as in "
                  "docs/records.md; 95% bootstrap intervals over test documents."),
        table(["run", SCORES[0][1], *(f"straight-through, {side} layouts" for side in sided),
               *(words for _, words in SCORES[1:])], rows,
              numeric=range(1, len(SCORES) + len(sided) + 1), wrap=[0],
              table_id="records-table"),
        note("Scores on normalised values (dates, amounts, spaces) are logged beside these as "
             "records/normalised/<score>: " + "; ".join(
                 f"{names[i]} straight-through "
                 f"{number(bundles[i].metrics.get('records/normalised/straight_through'))}"
                 for i in chosen) + "."),
        Html("<h3>Accuracy of each field</h3>"),
        table(["run", *labels], fields, numeric=range(1, len(labels) + 1), wrap=[0],
              table_id="record-fields-table"),
        note("Share of test documents whose values under that label (a header field, or an "
             "item column over all line items) are exactly the true ones."),
        Html(f"<h3>Worst documents of {esc(names[chosen[0]])}</h3>"),
        *(_worst(best) or [paragraph("Every test document's record is right.")]),
    ])]
