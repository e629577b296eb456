"""Tables of trained runs: the unseen-layout comparison, the demo sweep, the per-layout template
learning curve and the sweep over every layer and baseline."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from dochar.report.summaries import size_unit
from dochar.runs.bundle import RunBundle
from dochar.runs.compare import compare_runs
from reports.readme_figures.cheap import compose, today
from reports.readme_figures.runs import machine, run

DESCRIPTIONS = {
    "relational": "R-GCN, sector graph, geometry + text flags + char CNN",
    "random_forest": "random forest, same features (n-gram hashing for the char CNN)",
    "layout_template": "per-layout templates",
    "attention": "attention (GATv2)",
    "max": "max (GraphSAGE, max)",
    "gcn": "gcn",
    "none": "none (no message passing)",
    "gradient_boosting": "gradient boosting",
    "logistic_regression": "logistic regression",
    "random_forest_neighbours": "random forest + neighbour aggregates",
}
HELD_OUT = ["split=layout_held_out"]
HELD_OUT_MODELS = ("relational", "random_forest")
SWEEP_MODELS = ("relational", "attention", "max", "gcn", "none", "random_forest",
                "gradient_boosting", "logistic_regression", "random_forest_neighbours")
DEMO = ["split=seen_and_unseen_layouts"]
DEMO_MODELS = ("relational", "random_forest", "layout_template")
CURVE_SIZES = (1, 2, 5, 10, None)


def interval(metrics: dict[str, float], name: str) -> str:
    return (f"{metrics[name]:.3f} [{metrics[name + '_low']:.3f}, "
            f"{metrics[name + '_high']:.3f}]")


def p_value(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def paired(a: RunBundle, b: RunBundle) -> str:
    """``+0.120 macro-F1, 95% interval [0.108, 0.135], p < 0.001`` as `dochar compare` finds it."""
    result = compare_runs(a, b, score="macro_f1")
    return (f"{result.difference:+.3f} macro-F1, 95% interval [{result.low:+.3f}, "
            f"{result.high:+.3f}], {p_value(result.p_value)}")


def sweep(models: Sequence[str], extra: Sequence[str], keep: Path | None) -> dict[str, RunBundle]:
    return {model: run([f"model={model}", *extra], keep) for model in models}


def command(models: Sequence[str], extra: Sequence[str]) -> str:
    return f"dochar run -m model={','.join(models)} {' '.join(extra)}"


def weakest_classes(bundle: RunBundle, count: int = 3) -> str:
    present = [label for label in bundle.labels if bundle.metrics.get(f"support/{label}", 0) > 0]
    weakest = sorted(present, key=lambda label: bundle.metrics[f"f1/{label}"])[:count]
    shown = [f"`{label}` ({'F1 ' if i == 0 else ''}{bundle.metrics[f'f1/{label}']:.2f})"
             for i, label in enumerate(weakest)]
    return ", ".join(shown[:-1]) + f" and {shown[-1]}" if len(shown) > 1 else shown[0]


def layout_held_out(keep: Path | None = None) -> str:
    runs = sweep(HELD_OUT_MODELS, HELD_OUT, keep)
    gnn, forest = runs["relational"], runs["random_forest"]
    test = gnn.predictions
    families = sorted(test["layout_id"].unique())
    rows = [f"| {DESCRIPTIONS[m]} | {interval(b.metrics, 'macro_f1')} | "
            f"{b.metrics['micro_f1']:.3f} | {interval(b.metrics, 'entity_f1')} | "
            f"{b.cost['train_seconds']:.0f} |" for m, b in runs.items()]
    return "\n".join([
        f"The comparison on unseen layouts only (`split=layout_held_out`: the test split holds "
        f"the layout families {' and '.join(f'`{f}`' for f in families)}, "
        f"{test['doc_id'].nunique()} documents and {len(test):,} words the models never saw "
        f"the like of), as `{command(HELD_OUT_MODELS, HELD_OUT)}` computes it on {today()} "
        f"(`python -m reports.readme_figures --only layout-held-out`, one thread on {machine()}, "
        f"shared with other jobs, so train seconds are inflated):",
        "",
        "| run (test words, layout families unseen in training) | macro-F1 [95% CI] | micro-F1 "
        "| entity F1 [95% CI] | train s |",
        "|---|---|---|---|---|",
        *rows,
        "",
        f"Paired bootstrap over test documents (the report's leaderboard): R-GCN − random "
        f"forest = {paired(gnn, forest)}. The forest's weakest classes are "
        f"{weakest_classes(forest)}.",
    ]) + "\n"


def full_sweep(keep: Path | None = None) -> str:
    runs = sweep(SWEEP_MODELS, HELD_OUT, keep)
    ranked = sorted(runs.items(), key=lambda item: -item[1].metrics["macro_f1"])

    def size(bundle: RunBundle) -> str:
        return f"{bundle.cost.get('parameters', 0):,.0f} {size_unit(bundle)}"

    return "\n".join([
        f"The full sweep over every layer and baseline on the same split "
        f"(`{command(SWEEP_MODELS, HELD_OUT)}`, {today()}, "
        f"`python -m reports.readme_figures --only full-sweep`, one thread on {machine()}, "
        f"shared with other jobs, so train seconds are inflated):",
        "",
        "| run | macro-F1 [95% CI] | entity F1 | train s | size |",
        "|---|---|---|---|---|",
        *[f"| {DESCRIPTIONS[m]} | {interval(b.metrics, 'macro_f1')} | "
          f"{b.metrics['entity_f1']:.3f} | {b.cost['train_seconds']:.0f} | {size(b)} |"
          for m, b in ranked],
    ]) + "\n"


def demo(keep: Path | None = None) -> str:
    runs = sweep(DEMO_MODELS, DEMO, keep)
    gnn, forest, templates = (runs[m] for m in DEMO_MODELS)
    m = gnn.metrics
    names = {"relational": DESCRIPTIONS["relational"], "random_forest": "random forest, same "
             "features", "layout_template": DESCRIPTIONS["layout_template"]}
    rows = [f"| {names[model]} | {interval(b.metrics, 'seen/macro_f1')} | "
            f"{interval(b.metrics, 'seen/entity_f1')} | {interval(b.metrics, 'unseen/macro_f1')} "
            f"| {interval(b.metrics, 'unseen/entity_f1')} | {b.metrics['macro_f1']:.3f} |"
            for model, b in runs.items()]
    t = templates.metrics
    pages = int(t["template/template_pages"] + t["template/fallback_pages"]
                + t["template/no_template_pages"])

    def drop(bundle: RunBundle) -> str:
        return f"{bundle.metrics['seen/macro_f1'] - bundle.metrics['unseen/macro_f1']:.3f}"

    return "\n".join([
        f"What `{command(DEMO_MODELS, DEMO)}` computes on {today()} "
        f"({int(m['data/documents_used'])} certificates, seed 0; "
        f"{int(m['split/train_documents'])} training documents in "
        f"{int(m['split/train_layouts'])} families, test {int(m['split/seen_test_documents'])} "
        f"seen-layout and {int(m['split/unseen_test_documents'])} unseen-layout documents; "
        f"`python -m reports.readme_figures --only demo`, one thread on {machine()}). The GNN's "
        f"scores can move in the third decimal on another CPU or torch build; `make demo` "
        f"prints yours.",
        "",
        "| run | seen macro-F1 [95% CI] | seen entity F1 [95% CI] | unseen macro-F1 [95% CI] | "
        "unseen entity F1 [95% CI] | all test: macro-F1 |",
        "|---|---|---|---|---|---|",
        *rows,
        "",
        f"What it shows: on layouts already templated, templates reach "
        f"{t['seen/macro_f1']:.3f} macro-F1 against the R-GCN's {m['seen/macro_f1']:.3f}. On new "
        f"layouts they score {t['unseen/macro_f1']:.3f}: of the {pages} test pages, "
        f"{int(t['template/template_pages'])} had their own template, "
        f"{int(t['template/fallback_pages'])} borrowed another layout's and "
        f"{int(t['template/no_template_pages'])} had none. The R-GCN loses {drop(gnn)} macro-F1 "
        f"from seen to unseen, the forest {drop(forest)}. Paired over all "
        f"{gnn.predictions['doc_id'].nunique()} test documents (`dochar compare`), R-GCN − "
        f"templates = {paired(gnn, templates)}.",
    ]) + "\n"


def template_curve(keep: Path | None = None) -> str:
    from dochar.curve import run_learning_curve

    overrides = ["model=layout_template", *DEMO, "curve.axis=pages_per_layout",
                 "tracking.enabled=false", "train.threads=1", "train.progress=false"]
    frame = run_learning_curve(compose(*overrides), list(CURVE_SIZES), axis="pages_per_layout")
    frame = frame.sort_values("n_train_documents")
    heads = [f"{row.requested_documents}" if row.requested_documents != "all"
             else f"{row.documents_per_layout:.0f} (all)" for row in frame.itertuples()]
    sizes = ",".join("null" if s is None else str(s) for s in CURVE_SIZES)
    return "\n".join([
        f"How many labelled documents a layout needs: `dochar curve model=layout_template "
        f"split=seen_and_unseen_layouts curve.axis=pages_per_layout 'curve.sizes=[{sizes}]'` "
        f"keeps k training documents of each family (`split.pages_per_layout`, nested and "
        f"seeded), on {today()} (`python -m reports.readme_figures --only template-curve`):",
        "",
        "| training documents per layout | " + " | ".join(heads) + " |",
        "|---|" + "---|" * len(heads),
        "| templates, seen macro-F1 | " + " | ".join(f"{v:.3f}" for v in frame["seen/macro_f1"])
        + " |",
        "| templates, unseen macro-F1 | "
        + " | ".join(f"{v:.3f}" for v in frame["unseen/macro_f1"]) + " |",
    ]) + "\n"
