"""One run, start to finish: data → split → task → graphs → features → model → scores → bundle.

Each stage is built from its own config section and called through its module's interface;
this file only wires them in the order of the data flow and records what it did.
"""

from __future__ import annotations

import logging
import numpy as np
import pandas as pd
import torch
from omegaconf import DictConfig, OmegaConf

from dochar import graphs, tasks
from dochar.runs.checks import check_config, record_shape
from dochar.data.sources import load_data
from dochar.data.word_table import iter_pages, table_fingerprint
from dochar.features import WordFeaturizer
from dochar.graphs.diagnostics import graph_stats
from dochar.metrics.evaluate import evaluate
from dochar.metrics.record_run import record_evaluation, scored_words
from dochar.graphs.candidates import CandidateOptions
from dochar.models.fit import FitInputs, FittedModel, fit_model, system_name
from dochar.models.inputs import PageSet
from dochar.models.pairs import PageCandidates, page_candidates
from dochar.models.training import seed_everything
from dochar.records.line_status import settle_pages
from dochar.runs.bundle import RunBundle
from dochar.runs.frames import edge_frame, pages_to_draw, pair_frame, prediction_frame
from dochar.runs.page_pictures import page_pictures
from dochar.splits import PARTS, split_run

log = logging.getLogger(__name__)


def check_names(cfg: DictConfig) -> None:
    """Fail on an unknown task, builder, layer or estimator before any data is loaded."""
    check_config(cfg)
    from dochar.models.baselines import BASELINES, TEMPLATE_BASELINES
    from dochar.models.layers import LAYERS

    task = tasks.from_config(cfg.get("task"))
    if cfg.model.kind not in {"gnn", "baseline", "template"}:
        raise graphs.GraphBuilderError(f"model.kind must be 'gnn', 'baseline' or 'template', "
                                       f"got {cfg.model.kind!r}")
    if cfg.model.kind == "template" and task.target != tasks.NODES:
        raise tasks.TaskError(f"model.kind=template labels words; task {task.name!r} scores "
                              "pairs: choose a GNN or a baseline")
    members = cfg.model.get("members", 1) if cfg.model.kind == "gnn" else 1
    if isinstance(members, bool) or not isinstance(members, int) or members < 1:
        raise tasks.TaskError(f"model.members={members!r}: use a whole number of networks, 1 "
                              "or more")
    if members > 1 and task.target != tasks.NODES:
        raise tasks.TaskError(f"model.members={members}: averaging members labels nodes; task "
                              f"{task.name!r} scores pairs, whose link cut is chosen per "
                              "network: use model.members=1")
    if cfg.train.get("label_smoothing", 0.0) and task.target != tasks.NODES:
        raise tasks.TaskError(f"train.label_smoothing={cfg.train.label_smoothing}: smoothing "
                              f"applies to node classes; task {task.name!r} scores pairs: use "
                              "train.label_smoothing=0")
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
    task = tasks.from_config(cfg.get("task"))
    prefix = f"{task.label}:" if task.label else ""
    if cfg.model.kind == "template":   # reads positions only: no graph, no features
        return prefix + system
    if cfg.model.kind != "gnn" and cfg.model.get("neighbour_features"):
        system += "+neighbours"
    if cfg.model.kind == "gnn" and (cfg.model.layer_options or {}).get("num_bases"):
        system += f"+bases{cfg.model.layer_options.num_bases}"
    if cfg.model.kind == "gnn" and cfg.model.get("members", 1) > 1:
        system += f"x{cfg.model.members}"
    graph = str(cfg.graph.name)
    for option, mark in (("prune_gutters", "pruned"), ("reverse_edges", "rev"),
                         ("self_loops", "self")):
        if cfg.graph.get(option):
            graph += f"+{mark}"
    edges = cfg.get("edges")
    if edges is not None and list(edges.groups):
        graph += f"+edges:{edges.name}"
    return f"{prefix}{system}/{graph}/{'+'.join(cfg.features.groups)}"


def document_table(table: pd.DataFrame, part_of: dict[str, str]) -> pd.DataFrame:
    """One row per document the run used: its part of the split, layout, pages and words."""
    docs = table.assign(doc_id=table["doc_id"].astype(str))
    frame = docs.groupby("doc_id").agg(pages=("page", "nunique"), words=("word_id", "size"))
    if "layout_id" in docs:
        frame["layout_id"] = docs.groupby("doc_id")["layout_id"].first().astype(str)
    frame.insert(0, "part", frame.index.map(part_of))
    return frame[frame["part"].notna()]


def _candidates(task: tasks.Task, task_pages: dict[str, list], sets: dict[str, PageSet]
                ) -> dict[str, list[PageCandidates]] | None:
    """Candidate pairs per part for tasks that score pairs (None for node tasks)."""
    if task.target != tasks.PAIRS:
        return None
    options = CandidateOptions(str(task.candidates["source"]),
                               float(task.candidates["max_distance"]))
    return {part: [page_candidates(page, edges, options)
                   for page, edges in zip(task_pages[part], sets[part].edges)] for part in PARTS}


def _predictions(task: tasks.Task, test_pages: list, inputs: FitInputs, fitted: FittedModel,
                 sides: dict[str, str]) -> pd.DataFrame:
    if inputs.pairs:
        return pair_frame(test_pages, inputs.candidates["test"], fitted.outputs,
                          float(fitted.threshold), sides)
    return prediction_frame(inputs.sets["test"].pages, fitted.outputs, inputs.labels, sides)


def _pair_notes(inputs: FitInputs, fitted: FittedModel, predictions: pd.DataFrame
                ) -> dict[str, float]:
    """Link threshold and candidate recall of the test pages (pair tasks only)."""
    if not inputs.pairs:
        return {}
    found = inputs.candidates["test"]
    true_links = sum(int(c.y.sum()) for c in found) + inputs.missed("test")
    return {"link_threshold": float(fitted.threshold),
            "candidate_recall": 1 - inputs.missed("test") / max(true_links, 1),
            "candidate_pairs_test": float(predictions["candidate"].sum())}


def run_experiment(cfg: DictConfig) -> tuple[RunBundle, FittedModel]:
    """Run the composed config: the run's bundle and the fitted model (with the arguments
    that built it and the fitted featurizer, what a saved model records)."""
    check_names(cfg)
    seed_everything(int(cfg.seed), int(cfg.train.threads))
    task = tasks.from_config(cfg.get("task"))
    word_labels = list(cfg.data.labels)
    labels = task.classes(word_labels)
    progress = bool(cfg.train.progress)
    data = load_data(cfg.data, strict=bool(cfg.strict), progress=progress)
    split = split_run(data.table, cfg.split, int(cfg.seed))
    part_of = split.part_of()
    builder = graphs.from_config(cfg.graph, cfg.get("edges"))
    used = [page for page in iter_pages(split.table) if page.doc_id in part_of]
    task_pages = {part: [] for part in PARTS}   # a nested training subset leaves some out
    for page in task.pages(used, data.links):
        task_pages[part_of[task.graph_page(page).doc_id]].append(page)
    sets = {part: PageSet.build([task.graph_page(p) for p in task_pages[part]], builder,
                                progress=progress, desc=f"graphs ({part})") for part in PARTS}
    featurizer = WordFeaturizer.from_config(cfg.features, cfg.data, strict=bool(cfg.strict)
                                            ).fit(sets["train"].pages)
    inputs = FitInputs(sets, featurizer, labels, task, _candidates(task, task_pages, sets))
    torch.manual_seed(int(cfg.seed))
    fitted = fit_model(cfg, inputs)
    shape = record_shape(cfg.data)
    if not inputs.pairs:   # each line read whole, as an item or a sub-item (as predict does)
        fitted.outputs = settle_pages(inputs.sets["test"].pages, fitted.outputs, labels, shape)
    predictions = _predictions(task, task_pages["test"], inputs, fitted,
                               split.assignment.test_sides)
    words = task.word_predictions(sets["test"].pages, predictions)
    scores = evaluate(predictions, labels, cfg.evaluation, seed=int(cfg.seed), task=task,
                      words=words, word_labels=word_labels)
    metrics = scores.metrics
    metrics.update(_pair_notes(inputs, fitted, predictions))
    if shape is not None and not words.empty:   # a links task decodes to no word labels
        tested = {doc for doc, part in part_of.items() if part == "test"}
        found, record_tables = record_evaluation(scored_words(split.table, words, tested),
                                                 shape, data.links, cfg.evaluation,
                                                 seed=int(cfg.seed),
                                                 sides=split.assignment.test_sides)
        metrics.update(found)
        scores.tables.update(record_tables)
    stats = graph_stats(sets["test"].pages, builder, list(cfg.data.table_labels),
                        edges=sets["test"].edges).to_dict()
    metrics.update({f"graph/{k}": float(v) for k, v in stats.items()
                    if isinstance(v, (int, float)) and np.isfinite(v)})
    metrics.update({f"data/{k}": float(v) for k, v in data.notes.items()})
    metrics.update(split.notes)
    metrics.update(fitted.notes)
    if featurizer.images is not None:   # pages whose image features fell back to 0
        metrics["data/page_images_missing"] = float(featurizer.missing_image_pages)
    if not split.leakage.empty:
        scores.tables["leakage"] = split.leakage
    scores.tables["documents"] = document_table(split.table, part_of)
    if not task.nodes_are_word_labels and not words.empty:   # what the nodes decode to
        scores.tables["word_predictions"] = words
    scores.tables.update(fitted.tables)
    tags = {"dataset": str(cfg.data.name), "task": task.name, "headline": tasks.headline(task),
            "split_protocol": str(cfg.split.protocol),
            "graph_builder": str(cfg.graph.name), "features": "+".join(cfg.features.groups),
            "model": system_name(cfg.model), "model_kind": str(cfg.model.kind),
            "seed": str(cfg.seed), "data_fingerprint": table_fingerprint(data.table),
            "data_source": str(cfg.data.get("path") or cfg.data.get("source") or "")}
    drawn = pages_to_draw(predictions, int(cfg.overlay_pages))   # kept for the report
    bundle = RunBundle(name=run_name(cfg), labels=labels, metrics=metrics,
                       predictions=predictions,
                       config=OmegaConf.to_container(cfg, resolve=True), cost=fitted.cost,
                       tags=tags, edges=edge_frame(sets["test"], drawn),
                       page_images=page_pictures(split.table, drawn,
                                                 synthetic=cfg.data.get("source") == "synth"),
                       tables=scores.tables)
    return bundle, fitted
