"""One run, start to finish: data → split → graphs → features → model → scores → bundle.

Each stage is built from its own config section and called through its module's interface;
this file only wires them in the order of the data flow and records what it did.
"""

from __future__ import annotations

import logging
from typing import Any

import numpy as np
import torch
from omegaconf import DictConfig, OmegaConf

from dochar import graphs
from dochar.data.sources import load_data
from dochar.data.word_table import iter_pages, table_fingerprint
from dochar.features import WordFeaturizer
from dochar.graphs.diagnostics import graph_stats
from dochar.metrics.evaluate import evaluate
from dochar.models.fit import fit_model, system_name
from dochar.models.inputs import PageSet
from dochar.models.training import seed_everything
from dochar.runs.bundle import RunBundle
from dochar.runs.frames import edge_frame, prediction_frame
from dochar.splits import PARTS, split_run

log = logging.getLogger(__name__)


def check_names(cfg: DictConfig) -> None:
    """Fail on an unknown builder, layer or estimator before any data is loaded."""
    from dochar.models.baselines import BASELINES, TEMPLATE_BASELINES
    from dochar.models.layers import LAYERS

    if cfg.model.kind not in {"gnn", "baseline", "template"}:
        raise graphs.GraphBuilderError(f"model.kind must be 'gnn', 'baseline' or 'template', "
                                       f"got {cfg.model.kind!r}")
    chosen = [("graph.name", cfg.graph.name, graphs.BUILDERS)]
    chosen.append(("model.layer", cfg.model.layer, LAYERS) if cfg.model.kind == "gnn"
                  else ("model.estimator", cfg.model.estimator,
                        {"baseline": BASELINES, "template": TEMPLATE_BASELINES}[cfg.model.kind]))
    for key, name, registry in chosen:
        if name not in registry:
            raise graphs.GraphBuilderError(f"{key}={name!r}: unknown; choose one of "
                                           f"{sorted(registry)}")


def run_name(cfg: DictConfig) -> str:
    if cfg.get("run_name"):
        return str(cfg.run_name)
    system = system_name(cfg.model)
    if cfg.model.kind == "template":   # reads positions only: no graph, no features
        return system
    if cfg.model.kind != "gnn" and cfg.model.get("neighbour_features"):
        system += "+neighbours"
    if cfg.model.kind == "gnn" and (cfg.model.layer_options or {}).get("num_bases"):
        system += f"+bases{cfg.model.layer_options.num_bases}"
    graph = str(cfg.graph.name)
    for option, mark in (("prune_gutters", "pruned"), ("reverse_edges", "rev"),
                         ("self_loops", "self")):
        if cfg.graph.get(option):
            graph += f"+{mark}"
    return f"{system}/{graph}/{'+'.join(cfg.features.groups)}"


def run_experiment(cfg: DictConfig) -> tuple[RunBundle, Any]:
    """Run the composed config; returns the run's bundle and the fitted model."""
    check_names(cfg)
    seed_everything(int(cfg.seed), int(cfg.train.threads))
    labels = list(cfg.data.labels)
    progress = bool(cfg.train.progress)
    data = load_data(cfg.data, strict=bool(cfg.strict), progress=progress)
    split = split_run(data.table, cfg.split, int(cfg.seed))
    part_of = split.part_of()
    builder = graphs.from_config(cfg.graph)
    pages = {part: [] for part in PARTS}
    for page in iter_pages(split.table):
        if page.doc_id in part_of:   # a nested training subset leaves some documents out
            pages[part_of[page.doc_id]].append(page)
    sets = {part: PageSet.build(pages[part], builder, progress=progress,
                                desc=f"graphs ({part})") for part in PARTS}
    featurizer = WordFeaturizer.from_config(cfg.features, cfg.data).fit(sets["train"].pages)
    torch.manual_seed(int(cfg.seed))
    fitted = fit_model(cfg, sets, featurizer, labels)
    predictions = prediction_frame(sets["test"].pages, fitted.probabilities, labels,
                                   split.assignment.test_sides)
    scores = evaluate(predictions, labels, cfg.evaluation, seed=int(cfg.seed))
    metrics = scores.metrics
    stats = graph_stats(sets["test"].pages, builder, edges=sets["test"].edges).to_dict()
    metrics.update({f"graph/{k}": float(v) for k, v in stats.items()
                    if isinstance(v, (int, float)) and np.isfinite(v)})
    metrics.update({f"data/{k}": float(v) for k, v in data.notes.items()})
    metrics.update(split.notes)
    metrics.update(fitted.notes)
    if not split.leakage.empty:
        scores.tables["leakage"] = split.leakage
    scores.tables.update(fitted.tables)
    tags = {"dataset": str(cfg.data.name), "split_protocol": str(cfg.split.protocol),
            "graph_builder": str(cfg.graph.name), "features": "+".join(cfg.features.groups),
            "model": system_name(cfg.model), "model_kind": str(cfg.model.kind),
            "seed": str(cfg.seed), "data_fingerprint": table_fingerprint(data.table)}
    bundle = RunBundle(name=run_name(cfg), labels=labels, metrics=metrics,
                       predictions=predictions,
                       config=OmegaConf.to_container(cfg, resolve=True), cost=fitted.cost,
                       tags=tags, edges=edge_frame(sets["test"], int(cfg.overlay_pages)),
                       tables=scores.tables)
    return bundle, fitted.model
