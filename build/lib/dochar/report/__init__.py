"""The static HTML report: one self-contained file comparing finished runs.

Everything (plots as base64 PNG, page overlays as inline SVG, styles) is inside the file, so it
opens offline and can be mailed or attached to a CI job as is.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np
import yaml

from dochar.data.files import write_text_atomic
from dochar.report import plots
from dochar.report.leaderboard import (REFERENCE_MODEL, default_paired, leaderboard,
                                       pair_with_reference, resolve_reference)
from dochar.report.overlay import OVERLAY_STYLE, class_style, overlays
from dochar.report.page import (Html, contents, details, document, facts, image, note, number,
                                paragraph, preformatted, section, table)
from dochar.report.summaries import (ReportInputError, calibration_bins, check_bundle,
                                     class_order, confusion_rows, display_names, document_sides,
                                     has_layouts, layout_scores, learning_curve, metric, ranking,
                                     reliability, score_words)
from dochar.report.verdict import provenance, verdict
from dochar.report.records import RECORD_STYLE, records_sections
from dochar.report.seen_unseen import seen_unseen_sections
from dochar.runs.bundle import RunBundle

__all__ = ["write_report", "ReportInputError"]


TRAINING_CURVES = 3   # runs whose training curves the report draws, best first

def write_report(bundles: Sequence[RunBundle], out_path: str | Path, *,
                 title: str = "dochar report", score: str = "macro_f1",
                 reference: str | None = None, reference_model: str = REFERENCE_MODEL,
                 overlay_pages: int = 3,
                 paired: Callable | None = None, written: dt.date | None = None) -> Path:
    """Write the report for ``bundles`` to ``out_path`` and return the path.

    ``paired(frame_a, frame_b)`` compares a run's predictions (a) with the reference run's (b)
    on the ranking score and returns an object with ``difference``, ``low``, ``high`` and
    ``p_value``; without it the project's paired bootstrap on word macro-F1 is used when
    available. ``written`` is the date the page states (today by default).
    """
    bundles = list(bundles)
    if not bundles:
        raise ReportInputError("no runs to report")
    for bundle in bundles:
        check_bundle(bundle)
    if all(metric(b, score) is None for b in bundles):
        known = sorted({k for b in bundles for k in b.metrics if "/" not in k})
        raise ReportInputError(f"no run has the score '{score}'; top-level metrics are {known}")
    names = display_names(bundles)
    order = ranking(bundles, score)
    reference_index = resolve_reference(bundles, names, reference, reference_model)
    if paired is None:
        paired, paired_note = default_paired(bundles)
        measure = score_words("macro_f1")
    else:
        paired_note = "Difference as computed by the supplied paired comparison."
        measure = score_words(score)
    pairing = pair_with_reference(bundles, reference_index, paired, paired_note, measure)
    labels = class_order(bundles)
    words = score_words(score)

    chapters = [
        ("leaderboard", f"Runs ranked by {words}",
         leaderboard(bundles, names, order, score, pairing)),
        *seen_unseen_sections(bundles, names, order, pairing),
        *records_sections(bundles, names, order),
        ("per-class", "Word F1 per class and run", _per_class(bundles, names, order, labels)),
        ("confusion", "Which classes the top runs confuse", _confusion(bundles, names, order)),
        ("per-layout", "Word macro-F1 per layout family", _per_layout(bundles, names, order)),
        ("calibration", "How far confidence matches accuracy",
         _calibration(bundles, names, order)),
    ]
    curves = [(names[i], learning_curve(bundles[i], score)) for i in order]
    curves = [(name, points) for name, points in curves if points]
    if curves:
        heading = f"{words[0].upper()}{words[1:]} against training documents"
        chapters.append(("learning-curves", heading,
                         [image(plots.learning_plot(curves, words), "learning curves")]))
    trained = [(names[i], bundles[i].tables["training_curve"]) for i in order[:TRAINING_CURVES]
               if "training_curve" in bundles[i].tables]
    if trained:
        chapters.append(("training", "How the top runs trained, epoch by epoch",
                         [image(plots.training_plot(trained), "training curves"),
                          note("Rings mark the epoch whose weights were kept (the best "
                               "validation macro-F1; early stopping).")]))
    best = bundles[order[0]]
    page_labels = _with_unlisted(best, labels)
    if overlay_pages > 0:
        chapters.append(("pages", f"Test pages as predicted by {names[order[0]]}",
                         [paragraph("Boxes are filled with the predicted class; wrong "
                                    "predictions have a thick black outline. Hover a box for "
                                    "its text and classes.")]
                         + overlays(best, page_labels, overlay_pages)))
    chapters.append(("runs", "How each run was made", _provenance(bundles, names, order)))

    n_words = len(best.predictions)
    lede = (f"{len(bundles)} run(s), ranked by {words}; {n_words:,} test words, "
            f"{best.predictions['doc_id'].nunique():,} test documents in the best run.")
    top = [paragraph(verdict(bundles, names, order, score, pairing), "verdict", "verdict"),
           facts(provenance(bundles, written or dt.date.today()), "facts"),
           contents([(i, heading) for i, heading, _ in chapters])]
    out_path = Path(out_path)
    write_text_atomic(out_path, document(title, lede, [section(*c) for c in chapters],
                                         "\n".join([OVERLAY_STYLE, RECORD_STYLE,
                                                    class_style(page_labels)]), top=top))
    return out_path


def _with_unlisted(bundle: RunBundle, labels: list[str]) -> list[str]:
    seen = set(bundle.predictions["label"].astype(str)) | set(
        bundle.predictions["predicted"].astype(str))
    return labels + sorted(seen - set(labels))


def _per_class(bundles, names, order, labels) -> list[Html]:
    values = np.array([[metric(bundles[i], f"f1/{label}") for label in labels] for i in order],
                      dtype=float)
    if np.isnan(values).all():
        return [note("No run has per-class scores (metrics f1/<class>).")]
    return [image(plots.f1_heatmap([names[i] for i in order], labels, values),
                  "F1 per class and run"),
            note("The darker a cell, the higher the F1 (as in the confusion matrices below). "
                 "Blank cells: the run has no score for that class.")]


def _confusion(bundles, names, order) -> list[Html]:
    panels = [(names[i], *confusion_rows(bundles[i])) for i in order[:2]]
    return [image(plots.confusion_panels(panels), "confusion matrices"),
            note("Rows are true classes and sum to 1; the darker a cell, the larger the share. "
                 "Blank cells hold no words, blank rows classes without test words.")]


def _per_layout(bundles, names, order) -> list[Html]:
    chosen = [i for i in order if has_layouts(bundles[i])]
    if not chosen:
        return [note("Not shown: the test words carry no layout ids.")]
    scores = layout_scores([bundles[i] for i in chosen], [names[i] for i in chosen])
    docs = document_sides(bundles[chosen[0]])
    side_of = docs[docs["layout_id"] != ""].groupby("layout_id")["side"].first()
    runs = list(scores.columns[1:])
    rows = [[layout, side_of.get(layout, "") or "–", f"{int(row['words']):,}",
             *(number(row[r]) for r in runs)] for layout, row in scores.iterrows()]
    parts = [table(["layout family", "in training", "test words", *runs], rows,
                   numeric=range(2, len(runs) + 3), nowrap=[0],
                   wrap_headers=range(3, len(runs) + 3), table_id="layout-table",
                   row_classes=["unseen" if row[1] == "unseen" else "" for row in rows]),
             note("Word macro-F1 over the classes present in each layout. In training: "
                  "'unseen' families were held out of training whole (shaded), 'seen' ones "
                  "have training documents.")]
    skipped = [names[i] for i in order if i not in chosen]
    if skipped:
        parts.append(note(f"Runs without layout ids: {', '.join(skipped)}."))
    return parts


def _calibration(bundles, names, order) -> list[Html]:
    curves = [(names[i], reliability(bundles[i])) for i in order]
    rows = [[name, number(curve.expected_calibration_error), f"{int(curve.counts.sum()):,}"]
            for name, curve in curves]
    return [image(plots.calibration_plot(curves), "reliability curves"),
            table(["run", "expected calibration error", "words"], rows, numeric=[1, 2],
                  nowrap=[0], table_id="calibration-table"),
            note("Confidence is the probability of the predicted class, in "
                 + ", ".join(sorted({f"{calibration_bins(bundles[i])}" for i in order}))
                 + " equal-width bins, as the runs logged their ECE.")]


def _provenance(bundles, names, order) -> list[Html]:
    blocks = []
    for i in order:
        bundle = bundles[i]
        facts = [("run id", bundle.run_id or "–")] + sorted(bundle.tags.items())
        config = yaml.safe_dump(bundle.config, sort_keys=False, allow_unicode=True)
        blocks.append(details(names[i], [
            table(["field", "value"], facts),
            Html("<h3>command</h3>"), preformatted(bundle.command or "(not recorded)"),
            Html("<h3>config</h3>"), preformatted(config),
        ]))
    return blocks
