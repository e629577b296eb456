"""One run, start to finish: data → split → task → graphs → features → model → scores → bundle.

Each stage is built from its own config section and called through its module's interface;
this file only wires them in the order of the data flow and records what it did.
"""

from __future__ import annotations

import logging
from typing import Any

import numpy as np
import pandas as pd
import torch
from omegaconf import DictConfig, OmegaConf

from dochar import graphs, tasks
from dochar.data.sources import load_data
from dochar.data.word_table import iter_pages, table_fingerprint
from dochar.features import WordFeaturizer
from dochar.graphs.diagnostics import graph_stats
from dochar.metrics.evaluate import evaluate
from dochar.models.fit import fit_model, system_name
from dochar.models.inputs import PageSet
from dochar.models.training import seed_everything
from dochar.runs.bundle import RunBundle
from dochar.runs.frames import edge_frame, pages_to_draw, prediction_frame
from dochar.splits import PARTS, split_run

log = logging.getLogger(__name__)


def check_names(cfg: DictConfig) -> None:
    """Fail on an unknown builder, layer or estimator before any data is loaded."""
    from dochar.models.baselines import BASELINES, TEMPLATE_BASELINES
    from dochar.models.layers import LAYERS

    if cfg.task.name != "links":   # links options are read by dochar.link_experiment
        tasks.from_config(cfg.get("task"))
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
    name = f"{system}/{graph}/{'+'.join(cfg.features.groups)}"
    task = tasks.from_config(cfg.get("task"))
    if task.name == "entity_tags":
        return f"{task.name}[{task.scheme}]:{name}"
    if task.name == "segment_labels":
        return f"{task.name}[{task.segments}]:{name}"
    return name


def document_table(table: pd.DataFrame, part_of: dict[str, str]) -> pd.DataFrame:
    """One row per document the run used: its part of the split, layout, pages and words."""
    docs = table.assign(doc_id=table["doc_id"].astype(str))
    frame = docs.groupby("doc_id").agg(pages=("page", "nunique"), words=("word_id", "size"))
    if "layout_id" in docs:
        frame["layout_id"] = docs.groupby("doc_id")["layout_id"].first().astype(str)
    frame.insert(0, "part", frame.index.map(part_of))
    return frame[frame["part"].notna()]


def run_experiment(cfg: DictConfig) -> tuple[RunBundle, Any]:
    """Run the composed config; returns the run's bundle and the fitted model."""
    check_names(cfg)
    if cfg.task.name == "links":
        from dochar.link_experiment import run_links
        return run_links(cfg)
    seed_everything(int(cfg.seed), int(cfg.train.threads))
    task = tasks.from_config(cfg.get("task"))
    word_labels = list(cfg.data.labels)
    labels = task.classes(word_labels)
    progress = bool(cfg.train.progress)
    data = load_data(cfg.data, strict=bool(cfg.strict), progress=progress)
    split = split_run(data.table, cfg.split, int(cfg.seed))
    part_of = split.part_of()
    builder = graphs.from_config(cfg.graph)
    pages = {part: [] for part in PARTS}
    for page in iter_pages(split.table):
        if page.doc_id in part_of:   # a nested training subset leaves some documents out
            pages[part_of[page.doc_id]].append(task.nodes(page))
    sets = {part: PageSet.build(pages[part], builder, progress=progress,
                                desc=f"graphs ({part})") for part in PARTS}
    featurizer = WordFeaturizer.from_config(cfg.features, cfg.data).fit(sets["train"].pages)
    torch.manual_seed(int(cfg.seed))
    fitted = fit_model(cfg, sets, featurizer, labels)
    predictions = prediction_frame(sets["test"].pages, fitted.probabilities, labels,
                                   split.assignment.test_sides)
    words = task.word_predictions(sets["test"].pages, predictions)
    scores = evaluate(predictions, labels, cfg.evaluation, seed=int(cfg.seed), task=task,
                      words=words, word_labels=word_labels)
    metrics = scores.metrics
    stats = graph_stats(sets["test"].pages, builder, list(cfg.data.table_labels),
                        edges=sets["test"].edges).to_dict()
    metrics.update({f"graph/{k}": float(v) for k, v in stats.items()
                    if isinstance(v, (int, float)) and np.isfinite(v)})
    metrics.update({f"data/{k}": float(v) for k, v in data.notes.items()})
    metrics.update(split.notes)
    metrics.update(fitted.notes)
    if not split.leakage.empty:
        scores.tables["leakage"] = split.leakage
    scores.tables["documents"] = document_table(split.table, part_of)
    scores.tables.update(fitted.tables)
    tags = {"dataset": str(cfg.data.name), "task": task.name,
            "split_protocol": str(cfg.split.protocol),
            "graph_builder": str(cfg.graph.name), "features": "+".join(cfg.features.groups),
            "model": system_name(cfg.model), "model_kind": str(cfg.model.kind),
            "seed": str(cfg.seed), "data_fingerprint": table_fingerprint(data.table),
            "data_source": str(cfg.data.get("path") or cfg.data.get("source") or "")}
    bundle = RunBundle(name=run_name(cfg), labels=labels, metrics=metrics,
                       predictions=predictions,
                       config=OmegaConf.to_container(cfg, resolve=True), cost=fitted.cost,
                       tags=tags, edges=edge_frame(sets["test"],
                                        pages_to_draw(predictions, int(cfg.overlay_pages))),
                       tables=scores.tables)
    return bundle, fitted.model
