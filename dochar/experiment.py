"""One run, start to finish: data → split → graphs → features → model → scores → bundle.

Each stage is called through its own module's interface; this file only wires them in the
order of the data flow and records what it did.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
import torch
from omegaconf import DictConfig, OmegaConf

from dochar.dataset import PageSet, label_indices, to_graphs, to_matrix
from dochar.document import Page, iter_pages, table_fingerprint
from dochar.evaluation import evaluate
from dochar.features import CharCNNEncoder, WordFeaturizer
from dochar.graphs import make_graph_builder
from dochar.graphs.diagnostics import graph_stats
from dochar.layout_families import assign_inferred_layouts
from dochar.models.baselines import make_baseline
from dochar.models.gnn import GNNStack, count_parameters
from dochar.results import PROBABILITY_PREFIX, RunBundle
from dochar.sources import load_data
from dochar.splits import SplitAssignment, documents_of, make_splits
from dochar.training import predict_proba, seed_everything, train

log = logging.getLogger(__name__)
PARTS = ("train", "val", "test")


def split_documents(table: pd.DataFrame, cfg: DictConfig) -> SplitAssignment:
    split = cfg.split
    folds = make_splits(documents_of(table), split.protocol, seed=int(cfg.seed), test_size=split.test_size,
                        val_size=split.val_size, n_folds=split.n_folds)
    if not 0 <= int(split.fold) < len(folds):
        raise ValueError(f"split.fold={split.fold}: protocol {split.protocol!r} made "
                         f"{len(folds)} fold(s)")
    assignment = folds[int(split.fold)]
    wanted = split.get("train_documents")
    if wanted is not None:
        if not 0 < int(wanted) <= len(assignment.train):
            raise ValueError(f"split.train_documents={wanted}: the training part holds "
                             f"{len(assignment.train)} documents")
        rng = np.random.default_rng(int(cfg.seed))
        # a prefix of one permutation: smaller training sets nest inside larger ones
        assignment.train = sorted(rng.permutation(assignment.train)[:int(wanted)])
    return assignment


def build_graph_builder(cfg: DictConfig):
    graph = cfg.graph
    return make_graph_builder(graph.name, **dict(graph.options or {}),
                              self_loops=bool(graph.self_loops),
                              reverse_edges=bool(graph.reverse_edges),
                              prune_gutters=bool(graph.prune_gutters))


def fit_gnn(cfg: DictConfig, sets: dict[str, PageSet], featurizer: WordFeaturizer,
            labels: Sequence[str]) -> tuple[list[np.ndarray], dict[str, float], Any]:
    index = {label: i for i, label in enumerate(labels)}
    graphs = {part: to_graphs(sets[part], featurizer, index) for part in PARTS}
    model_cfg = cfg.model
    encoder = (CharCNNEncoder(**OmegaConf.to_container(cfg.features.char_cnn))
               if featurizer.uses_char_cnn else None)
    model = GNNStack(in_dim=len(featurizer.feature_names), num_classes=len(labels),
                     num_relations=len(sets["train"].relations), layer=model_cfg.layer,
                     hidden_dim=model_cfg.hidden_dim, depth=model_cfg.depth,
                     dropout=model_cfg.dropout, norm=model_cfg.norm,
                     residual=model_cfg.residual, char_encoder=encoder,
                     char_dim=int(cfg.features.char_cnn.out_dim) if encoder else 0,
                     layer_options=dict(model_cfg.layer_options or {}))
    started = time.perf_counter()
    history = train(model, graphs["train"], graphs["val"], len(labels), cfg.train, int(cfg.seed))
    train_seconds = time.perf_counter() - started
    started = time.perf_counter()
    probabilities = predict_proba(model, graphs["test"])
    infer_seconds = time.perf_counter() - started
    cost = {"train_seconds": train_seconds, "parameters": float(count_parameters(model)),
            "pages_per_second": len(graphs["test"]) / max(infer_seconds, 1e-9),
            "best_epoch": float(history.best_epoch), "epochs_run": float(history.epochs_run),
            "best_val_macro_f1": history.best_val_macro_f1}
    return probabilities, cost, model


def fit_baseline(cfg: DictConfig, sets: dict[str, PageSet], featurizer: WordFeaturizer,
                 labels: Sequence[str]) -> tuple[list[np.ndarray], dict[str, float], Any]:
    index = {label: i for i, label in enumerate(labels)}
    options = dict(hash_features=int(cfg.features.hash_features),
                   neighbour_features=bool(cfg.model.neighbour_features))
    x_train = to_matrix(sets["train"], featurizer, **options)
    y_train = np.concatenate([label_indices(p, index) for p in sets["train"].pages])
    estimator = make_baseline(cfg.model.estimator, int(cfg.seed), **dict(cfg.model.options or {}))
    started = time.perf_counter()
    estimator.fit(x_train, y_train)
    train_seconds = time.perf_counter() - started
    started = time.perf_counter()
    seen = estimator.predict_proba(to_matrix(sets["test"], featurizer, **options))
    infer_seconds = time.perf_counter() - started
    full = np.zeros((len(seen), len(labels)))
    full[:, estimator.classes_] = seen  # classes absent from training keep probability 0
    sizes = np.cumsum([len(page) for page in sets["test"].pages])[:-1]
    probabilities = np.split(full, sizes)
    cost = {"train_seconds": train_seconds, "parameters": float(_estimator_size(estimator)),
            "pages_per_second": len(sets["test"].pages) / max(infer_seconds, 1e-9)}
    return probabilities, cost, estimator


def _estimator_size(estimator: Any) -> int:
    """Trees: total node count; linear models: coefficient count (a size, not trainable weights)."""
    final = estimator[-1] if hasattr(estimator, "steps") else estimator
    if hasattr(final, "estimators_"):
        return int(sum(tree.tree_.node_count for tree in np.ravel(final.estimators_)))
    if hasattr(final, "_predictors"):
        return int(sum(p.get_n_leaf_nodes() * 2 - 1 for row in final._predictors for p in row))
    if hasattr(final, "coef_"):
        return int(final.coef_.size + np.size(final.intercept_))
    return 0


def prediction_frame(pages: Sequence[Page], probabilities: Sequence[np.ndarray],
                     labels: Sequence[str]) -> pd.DataFrame:
    frames = []
    for page, proba in zip(pages, probabilities):
        frame = pd.DataFrame({
            "doc_id": page.doc_id, "page": page.page, "word_id": page.word_ids,
            "text": page.texts, "x0": page.boxes[:, 0], "y0": page.boxes[:, 1],
            "x1": page.boxes[:, 2], "y1": page.boxes[:, 3], "page_width": page.width,
            "page_height": page.height, "layout_id": page.layout_id or "",
            "entity_id": page.entity_ids or [""] * len(page), "label": page.labels,
            "predicted": [labels[i] for i in proba.argmax(axis=1)],
            "confidence": proba.max(axis=1)})
        for i, label in enumerate(labels):
            frame[f"{PROBABILITY_PREFIX}{label}"] = proba[:, i]
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def edge_frame(page_set: PageSet, limit: int) -> pd.DataFrame:
    rows = []
    for page, edges in list(zip(page_set.pages, page_set.edges))[:limit]:
        source, target = page.word_ids[edges.edge_index[0]], page.word_ids[edges.edge_index[1]]
        rows.append(pd.DataFrame({"doc_id": page.doc_id, "page": page.page, "source": source,
                                  "target": target,
                                  "relation": [page_set.relations[t] for t in edges.edge_type]}))
    return pd.concat(rows, ignore_index=True) if rows else pd.DataFrame(
        columns=["doc_id", "page", "source", "target", "relation"])


def check_names(cfg: DictConfig) -> None:
    """Fail on an unknown builder, layer or estimator before any data is loaded."""
    from dochar.graphs import BUILDERS
    from dochar.models.baselines import BASELINES
    from dochar.models.layers import LAYERS

    if cfg.model.kind not in {"gnn", "baseline"}:
        raise ValueError(f"model.kind must be 'gnn' or 'baseline', got {cfg.model.kind!r}")
    chosen = [("graph.name", cfg.graph.name, BUILDERS)]
    chosen.append(("model.layer", cfg.model.layer, LAYERS) if cfg.model.kind == "gnn"
                  else ("model.estimator", cfg.model.estimator, BASELINES))
    for key, name, registry in chosen:
        if name not in registry:
            raise ValueError(f"{key}={name!r}: unknown; choose one of {sorted(registry)}")


def run_name(cfg: DictConfig) -> str:
    if cfg.get("run_name"):
        return str(cfg.run_name)
    system = cfg.model.layer if cfg.model.kind == "gnn" else cfg.model.estimator
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
    data = load_data(cfg.data, strict=bool(cfg.strict), progress=bool(cfg.train.progress))
    table, layouts = assign_inferred_layouts(data.table, cfg.split)
    assignment = split_documents(table, cfg)
    leakage, leak_counts = layouts.leakage(assignment)
    pages = list(iter_pages(table))
    by_part = {part: set(getattr(assignment, part)) for part in PARTS}
    builder = build_graph_builder(cfg)
    progress = bool(cfg.train.progress)
    sets = {part: PageSet.build([p for p in pages if p.doc_id in by_part[part]], builder,
                                progress=progress, desc=f"graphs ({part})") for part in PARTS}
    for part in PARTS:
        if not sets[part].pages:
            raise ValueError(f"split {cfg.split.protocol!r} left no {part} documents")
    groups = list(cfg.features.groups)
    featurizer = WordFeaturizer(groups=groups,
                                lexicons=(OmegaConf.to_container(cfg.data.lexicons)
                                          if "text_flags" in groups else None),
                                max_chars=int(cfg.features.max_chars)).fit(sets["train"].pages)
    fit = fit_gnn if cfg.model.kind == "gnn" else fit_baseline
    torch.manual_seed(int(cfg.seed))
    probabilities, cost, model = fit(cfg, sets, featurizer, labels)
    predictions = prediction_frame(sets["test"].pages, probabilities, labels)
    scores = evaluate(predictions, labels, cfg.evaluation, seed=int(cfg.seed))
    metrics = scores.metrics
    stats = graph_stats(sets["test"].pages, builder, edges=sets["test"].edges).to_dict()
    metrics.update({f"graph/{k}": float(v) for k, v in stats.items()
                    if isinstance(v, (int, float)) and np.isfinite(v)})
    metrics.update({f"data/{k}": float(v) for k, v in data.notes.items()})
    metrics.update({**layouts.notes, **leak_counts})
    if not leakage.empty:
        scores.tables["leakage"] = leakage
    metrics.update({f"split/{part}_documents": float(len(by_part[part])) for part in PARTS})
    tags = {"dataset": str(cfg.data.name), "split_protocol": str(cfg.split.protocol),
            "graph_builder": str(cfg.graph.name), "features": "+".join(cfg.features.groups),
            "model": str(cfg.model.layer if cfg.model.kind == "gnn" else cfg.model.estimator),
            "model_kind": str(cfg.model.kind), "seed": str(cfg.seed),
            "data_fingerprint": table_fingerprint(data.table)}
    bundle = RunBundle(name=run_name(cfg), labels=labels, metrics=metrics,
                       predictions=predictions,
                       config=OmegaConf.to_container(cfg, resolve=True), cost=cost, tags=tags,
                       edges=edge_frame(sets["test"], int(cfg.overlay_pages)),
                       tables=scores.tables)
    return bundle, model
