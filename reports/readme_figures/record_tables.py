"""Record scores of trained runs: the demo's GNN and forest on synthetic certificates (per
layout side), and the CORD segment-label presets on receipts, each with the paired tests
``dochar compare --score ...`` runs."""

from __future__ import annotations

from pathlib import Path

from dochar.runs.bundle import RunBundle
from dochar.runs.compare import compare_runs
from reports.readme_figures.cheap import FigureUnavailable, compose, today
from reports.readme_figures.runs import machine, run
from reports.readme_figures.tables import interval, p_value

SCORES = ("straight_through", "field_f1", "ted_accuracy", "row_f1")
DEMO = ["split=seen_and_unseen_layouts"]
RECEIPTS = {"GNN (graph transformer, 3 members, `cord_labels`)": "cord_labels",
            "forest (`cord_labels_forest`)": "cord_labels_forest"}


def _paired(a: RunBundle, b: RunBundle, score: str) -> str:
    result = compare_runs(a, b, score=score)
    return (f"{score.replace('_', ' ')} {result.difference:+.3f} [{result.low:+.3f}, "
            f"{result.high:+.3f}], {p_value(result.p_value)}")


def _cells(bundle: RunBundle, prefix: str = "records/") -> str:
    return " | ".join(interval(bundle.metrics, f"{prefix}{score}") for score in SCORES)


CONTEXT = ["features.groups=[geometry,text_flags,char_cnn,text_embedding]",
           "features.line_context=true"]
# feature sets of the demo's records table, each trained as a GNN and as a forest
DEMO_FEATURES = {"": [], ", text embedding and line context": CONTEXT}


def records_demo(keep: Path | None = None) -> str:
    """The demo's GNN and forest scored as records, unseen layouts first, on the demo's
    features and with the text embedding and line context added; each GNN paired with the
    forest on its features."""
    pairs = [(f"relational GNN{suffix}", f"random forest{suffix}", features)
             for suffix, features in DEMO_FEATURES.items()]
    runs = {name: run([f"model={model}", *features, *DEMO], keep)
            for gnn, forest, features in pairs
            for name, model in ((gnn, "relational"), (forest, "random_forest"))}
    m = runs[pairs[0][0]].metrics
    rows = [f"| {name} | {interval(b.metrics, 'records/unseen/straight_through')} | "
            f"{interval(b.metrics, 'records/seen/straight_through')} | {_cells(b)} |"
            for name, b in runs.items()]
    paired = [f"{gnn} − {forest}: " + "; ".join(_paired(runs[gnn], runs[forest], s)
                                                 for s in (f"unseen/{SCORES[0]}", *SCORES))
              for gnn, forest, _ in pairs]
    return "\n".join([
        f"`dochar run -m model=relational,random_forest {' '.join(DEMO)}`, and the same with "
        f"`{' '.join(CONTEXT)}`, on {today()} "
        f"(the demo's data, seed 0: {int(m['split/seen_test_documents'])} seen-layout and "
        f"{int(m['split/unseen_test_documents'])} unseen-layout test certificates; `python -m "
        f"reports.readme_figures --only records-demo`, one thread on {machine()}; 95% bootstrap "
        "intervals over test documents):",
        "",
        "| system | straight-through, unseen | straight-through, seen | straight-through, all "
        "| field F1 | TED accuracy | row F1 |",
        "|---|---|---|---|---|---|---|",
        *rows,
        "",
        f"Paired over the {runs[pairs[0][0]].predictions['doc_id'].nunique()} test documents "
        "(`dochar compare <GNN run> <forest run> --score ...`), "
        + "; ".join(paired) + ".",
    ]) + "\n"


def receipts_records(keep: Path | None = None) -> str:
    """The CORD segment-label presets, records against CORD's parse, on the test receipts."""
    folder = Path(compose("+experiment=cord_labels").data.path)
    if not folder.is_dir():
        raise FigureUnavailable(f"CORD not found at {folder} (set DOCHAR_DATASETS)")
    runs = {name: run([f"+experiment={preset}", "seed=0"], keep)
            for name, preset in RECEIPTS.items()}
    gnn, forest = runs.values()
    rows = [f"| {name} | {_cells(b)} |" for name, b in runs.items()]
    return "\n".join([
        f"`dochar run +experiment=cord_labels seed=0` and `+experiment=cord_labels_forest` on "
        f"{today()} ({gnn.predictions['doc_id'].nunique()} test receipts; `python -m "
        f"reports.readme_figures --only receipts-records`, one thread on {machine()}; 95% "
        "bootstrap intervals over test receipts; line items by the anchor rule, count lines "
        "placed by their arithmetic, each printed line read whole as an item or a sub-item, one "
        "value kept per single field):",
        "",
        "| system | straight-through | field F1 | TED accuracy | row F1 |",
        "|---|---|---|---|---|",
        *rows,
        "",
        "Paired GNN − forest (`dochar compare <GNN run> <forest run> --score ...`): "
        + "; ".join(_paired(gnn, forest, s) for s in SCORES) + ".",
    ]) + "\n"
