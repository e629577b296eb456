"""One links run (``task=links``): data → split → task nodes → graph and candidates → features
→ pair model → link scores → bundle. Wiring only, like :mod:`dochar.experiment`.

The bundle's predictions hold one row per candidate pair of the test pages plus one per true
link that was no candidate (see :mod:`dochar.metrics.links`), labelled ``link`` / ``none``, so
the run folder, tracking, the sweep table and ``dochar compare`` read it like any run. For the
report's page views each row carries the union box of its two nodes and the text
``source -> target``; ``word_id`` is the row's number on its page.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np
import pandas as pd
from omegaconf import DictConfig, OmegaConf

from dochar import graphs
from dochar.data.sources import load_data
from dochar.data.word_table import iter_pages, table_fingerprint
from dochar.errors import DocharError
from dochar.features import CharCNNEncoder, WordFeaturizer, char_ngram_hashes
from dochar.graphs.candidates import (
    CandidateOptions,
    candidate_hits,
    candidate_pairs,
    missed_links,
)
from dochar.metrics.evaluate import evaluate
from dochar.metrics.intervals import bootstrap_interval
from dochar.metrics.links import LINK, LINK_LABELS, NO_LINK, link_scorers
from dochar.models.baselines import make_baseline
from dochar.models.gnn import GNNStack, count_parameters
from dochar.models.pairs import (
    PairInputs,
    PairScorer,
    best_threshold,
    pair_geometry,
    pair_matrix,
    predict_pairs,
    sample_negatives,
    train_pair_scorer,
)
from dochar.models.training import seed_everything
from dochar.runs.bundle import PROBABILITY_PREFIX, RunBundle
from dochar.splits import PARTS, split_run
from dochar.tasks.links import LinkPage, link_pages


def _inputs(page: LinkPage, edges, pairs: np.ndarray, featurizer: WordFeaturizer,
            hash_features: int) -> PairInputs:
    nodes = page.nodes
    if page.directed:
        hits = candidate_hits(pairs, page.true_links, len(nodes), directed=True)
    else:   # any two words of one entity are a true pair, not only consecutive ones
        entities = np.asarray(page.entities, dtype=object)
        hits = entities[pairs[0]] == entities[pairs[1]]
    return PairInputs(x=featurizer.transform(nodes), edge_index=edges.edge_index,
                      edge_type=edges.edge_type, pairs=pairs,
                      geometry=pair_geometry(nodes, pairs), y=hits,
                      chars=featurizer.char_ids(nodes) if featurizer.uses_char_cnn else None,
                      extra=char_ngram_hashes(nodes.texts, n_features=hash_features)
                      if featurizer.uses_char_cnn else None)


def _missed(page: LinkPage, pairs: np.ndarray) -> np.ndarray:
    """True links the candidates cannot supply: (2, M)."""
    return missed_links(page.true_links, pairs, len(page.nodes), page.directed,
                        None if page.directed else np.asarray(page.entities, dtype=object))


def _fit_gnn(cfg: DictConfig, inputs: dict, missed: dict, featurizer: WordFeaturizer,
             relations: int) -> tuple[Any, dict, float, dict]:
    task, model_cfg = cfg.task, cfg.model
    encoder = (CharCNNEncoder(**OmegaConf.to_container(cfg.features.char_cnn))
               if featurizer.uses_char_cnn else None)
    stack = GNNStack(in_dim=len(featurizer.feature_names), num_classes=int(task.embedding_dim),
                     num_relations=relations, layer=model_cfg.layer,
                     hidden_dim=model_cfg.hidden_dim, depth=model_cfg.depth,
                     dropout=model_cfg.dropout, norm=model_cfg.norm, residual=model_cfg.residual,
                     char_encoder=encoder,
                     char_dim=int(cfg.features.char_cnn.out_dim) if encoder else 0,
                     layer_options=dict(model_cfg.layer_options or {}))
    model = PairScorer(stack, int(task.embedding_dim), int(task.pair_head.hidden_dim),
                       float(task.pair_head.dropout))
    started = time.perf_counter()
    history = train_pair_scorer(model, inputs["train"], inputs["val"], missed["val"], cfg.train,
                                int(cfg.seed), _ratio(task))
    cost = {"train_seconds": time.perf_counter() - started,
            "parameters": float(count_parameters(model)), "best_epoch": float(history.best_epoch),
            "epochs_run": float(history.epochs_run),
            "best_val_link_f1": history.best_val_link_f1}
    started = time.perf_counter()
    test = predict_pairs(model, inputs["test"])
    cost["pages_per_second"] = len(test) / max(time.perf_counter() - started, 1e-9)
    return model, {"test": test}, history.threshold, cost


def _fit_forest(cfg: DictConfig, inputs: dict, missed: dict) -> tuple[Any, dict, float, dict]:
    rng = np.random.default_rng(int(cfg.seed))
    train = []
    for page in inputs["train"]:
        keep = sample_negatives(page.y, _ratio(cfg.task), rng)
        train.append(PairInputs(page.x, page.edge_index, page.edge_type, page.pairs[:, keep],
                                page.geometry[keep], page.y[keep], None, page.extra))
    x_train = pair_matrix(train)
    y_train = np.concatenate([p.y for p in train])
    estimator = make_baseline(cfg.model.estimator, int(cfg.seed), **dict(cfg.model.options or {}))
    started = time.perf_counter()
    estimator.fit(x_train, y_train)
    cost = {"train_seconds": time.perf_counter() - started,
            "parameters": float(sum(t.tree_.node_count for t in getattr(estimator,
                                                                        "estimators_", [])))}

    def probabilities(pages: list[PairInputs]) -> list[np.ndarray]:
        if not pages:
            return []
        seen = estimator.predict_proba(pair_matrix(pages))
        positive = (seen[:, list(estimator.classes_).index(True)] if True in estimator.classes_
                    else np.zeros(len(seen)))
        return np.split(positive, np.cumsum([p.pairs.shape[1] for p in pages])[:-1])

    val = probabilities(inputs["val"])
    threshold = 0.5
    if val:
        threshold, cost["best_val_link_f1"] = best_threshold(
            np.concatenate(val), np.concatenate([p.y for p in inputs["val"]]), missed["val"])
    started = time.perf_counter()
    test = probabilities(inputs["test"])
    cost["pages_per_second"] = len(test) / max(time.perf_counter() - started, 1e-9)
    return estimator, {"test": test}, threshold, cost


def _ratio(task: DictConfig) -> float | None:
    ratio = task.get("negative_ratio")
    return None if ratio is None else float(ratio)


def pair_frame(pages: list[LinkPage], inputs: list[PairInputs], probabilities: list[np.ndarray],
               threshold: float) -> pd.DataFrame:
    """The scored rows of the test pages (columns: :data:`dochar.metrics.links.PAIR_COLUMNS`)."""
    frames = []
    for page, page_inputs, prob in zip(pages, inputs, probabilities):
        missed = _missed(page, page_inputs.pairs)
        pairs = np.hstack([page_inputs.pairs, missed])
        p_link = np.concatenate([prob, np.zeros(missed.shape[1])])
        truth = np.concatenate([page_inputs.y, np.ones(missed.shape[1], bool)])
        entities = np.asarray(page.entities, dtype=object)
        node_ids = np.asarray(page.nodes.entity_ids if page.directed else
                              page.nodes.word_ids, dtype=object)
        predicted = p_link >= threshold
        boxes = page.nodes.boxes
        union = np.column_stack([np.minimum(boxes[pairs[0], :2], boxes[pairs[1], :2]),
                                 np.maximum(boxes[pairs[0], 2:], boxes[pairs[1], 2:])])
        texts = np.asarray(page.nodes.texts, dtype=object)
        frames.append(pd.DataFrame({
            "doc_id": page.nodes.doc_id, "page": page.nodes.page,
            "word_id": np.arange(pairs.shape[1]),    # the pair's row on its page
            "text": [f"{a[:40]} -> {b[:40]}" for a, b in zip(texts[pairs[0]], texts[pairs[1]])],
            "x0": union[:, 0], "y0": union[:, 1], "x1": union[:, 2], "y1": union[:, 3],
            "page_width": page.nodes.width, "page_height": page.nodes.height,
            "source": pairs[0], "target": pairs[1],
            "source_id": node_ids[pairs[0]].astype(str), "target_id": node_ids[pairs[1]].astype(str),
            "source_entity": entities[pairs[0]].astype(str),
            "target_entity": entities[pairs[1]].astype(str),
            "candidate": np.arange(pairs.shape[1]) < page_inputs.pairs.shape[1],
            "page_nodes": len(page.nodes), "layout_id": page.nodes.layout_id or "",
            "label": np.where(truth, LINK, NO_LINK), "predicted": np.where(predicted, LINK, NO_LINK),
            "confidence": np.where(predicted, p_link, 1 - p_link),
            f"{PROBABILITY_PREFIX}{NO_LINK}": 1 - p_link, f"{PROBABILITY_PREFIX}{LINK}": p_link}))
    return pd.concat(frames, ignore_index=True)


def run_links(cfg: DictConfig) -> tuple[RunBundle, Any]:
    """Run a ``task=links`` config; returns the run's bundle and the fitted pair model."""
    task = cfg.task
    seed_everything(int(cfg.seed), int(cfg.train.threads))
    data = load_data(cfg.data, strict=bool(cfg.strict), progress=bool(cfg.train.progress))
    split = split_run(data.table, cfg.split, int(cfg.seed))
    part_of = split.part_of()
    table_kinds = list(task.link_table_kinds) if task.get("link_table_kinds") else None
    by_part: dict[str, list[LinkPage]] = {part: [] for part in PARTS}
    for page in link_pages((p for p in iter_pages(split.table) if p.doc_id in part_of),
                           str(task.link_kind), data.links, table_kinds):
        by_part[part_of[page.nodes.doc_id]].append(page)
    builder = graphs.from_config(cfg.graph)
    options = CandidateOptions(str(task.candidates.source), float(task.candidates.max_distance))
    if "crop_cnn" in cfg.features.groups:
        raise DocharError("features.groups: crop_cnn is not available for task=links yet; "
                          "use the page_image group (the same crops as dense columns)")
    featurizer = WordFeaturizer.from_config(cfg.features, cfg.data, strict=bool(cfg.strict)).fit(
        [p.nodes for p in by_part["train"]])
    inputs, missed, candidate_counts = {}, {}, np.zeros(2)
    for part in PARTS:
        inputs[part], missed[part] = [], 0
        for page in by_part[part]:
            edges = builder(page.nodes)
            pairs = candidate_pairs(page.nodes, options, directed=page.directed, edges=edges)
            inputs[part].append(_inputs(page, edges, pairs, featurizer,
                                        int(cfg.features.hash_features)))
            lost = _missed(page, pairs).shape[1]
            missed[part] += lost
            if part == "test":
                candidate_counts += (page.true_links.shape[1] - lost, page.true_links.shape[1])
    if cfg.model.kind == "gnn":
        model, probabilities, threshold, cost = _fit_gnn(cfg, inputs, missed, featurizer,
                                                         len(builder.relations))
    else:
        model, probabilities, threshold, cost = _fit_forest(cfg, inputs, missed)
    predictions = pair_frame(by_part["test"], inputs["test"], probabilities["test"], threshold)
    scores = evaluate(predictions, list(LINK_LABELS), cfg.evaluation, seed=int(cfg.seed))
    metrics = scores.metrics
    for name, scorer in link_scorers(str(task.link_kind)).items():
        point, low, high = bootstrap_interval(predictions, scorer,
                                              n_resamples=int(cfg.evaluation.bootstrap_resamples),
                                              confidence=float(cfg.evaluation.confidence),
                                              seed=int(cfg.seed))
        metrics.update({name: point, f"{name}_low": low, f"{name}_high": high})
    metrics.update({"link_threshold": threshold,
                    "candidate_recall": candidate_counts[0] / max(candidate_counts[1], 1),
                    "candidate_pairs_test": float(predictions["candidate"].sum())})
    metrics.update({f"data/{k}": float(v) for k, v in data.notes.items()})
    metrics.update(split.notes)
    system = str(cfg.model.layer if cfg.model.kind == "gnn" else cfg.model.estimator)
    tags = {"dataset": str(cfg.data.name), "split_protocol": str(cfg.split.protocol),
            "graph_builder": str(cfg.graph.name), "features": "+".join(cfg.features.groups),
            "model": system, "model_kind": str(cfg.model.kind), "seed": str(cfg.seed),
            "task": "links", "link_kind": str(task.link_kind),
            "data_fingerprint": table_fingerprint(data.table)}
    name = cfg.get("run_name") or (f"links:{task.link_kind}/{system}/{cfg.graph.name}/"
                                   f"{'+'.join(cfg.features.groups)}")
    bundle = RunBundle(name=str(name), labels=list(LINK_LABELS), metrics=metrics,
                       predictions=predictions, config=OmegaConf.to_container(cfg, resolve=True),
                       cost=cost, tags=tags, tables=scores.tables)
    return bundle, model
