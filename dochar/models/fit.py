"""Fit one model on the training pages and predict the test pages: a GNN stack or a baseline.

Both kinds take the same page sets and featurizer and return per-page class probabilities and
cost figures, so the rest of the run never asks which kind it had.
"""

from __future__ import annotations

import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from omegaconf import DictConfig, OmegaConf
from sklearn.metrics import f1_score

from dochar.features import CharCNNEncoder, CropCNNEncoder, WordFeaturizer
from dochar.models.baselines import make_baseline, make_template
from dochar.models.checkpoints import EpochCheckpoint, inputs_digest, training_key
from dochar.models.gnn import GNNStack, count_parameters
from dochar.models.inputs import PageSet, label_indices, to_graphs, to_matrix
from dochar.models.template import OUTCOMES
from dochar.models.training import predict_proba, train
from dochar.splits import PARTS


@dataclass
class FittedModel:
    """The fitted model, its test-page probabilities and what it cost."""

    model: Any
    probabilities: list[np.ndarray]
    cost: dict[str, float]
    notes: dict[str, float] = field(default_factory=dict)         # extra run metrics
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)  # extra run tables


def system_name(model_cfg: Mapping[str, Any]) -> str:
    """The layer of a GNN, the estimator of a baseline: what the run compares."""
    return str(model_cfg["layer"] if model_cfg["kind"] == "gnn" else model_cfg["estimator"])


def fit_gnn(cfg: DictConfig, sets: dict[str, PageSet], featurizer: WordFeaturizer,
            labels: Sequence[str]) -> FittedModel:
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
                     layer_options=dict(model_cfg.layer_options or {}),
                     **crop_encoder(cfg.features, featurizer))
    checkpoint = _checkpoint(cfg, graphs)
    started = time.perf_counter()
    history = train(model, graphs["train"], graphs["val"], len(labels), cfg.train, int(cfg.seed),
                    checkpoint=checkpoint)
    train_seconds = time.perf_counter() - started
    if checkpoint is not None:
        checkpoint.remove()
    started = time.perf_counter()
    probabilities = predict_proba(model, graphs["test"])
    infer_seconds = time.perf_counter() - started
    cost = {"train_seconds": train_seconds, "parameters": float(count_parameters(model)),
            "pages_per_second": len(graphs["test"]) / max(infer_seconds, 1e-9),
            "best_epoch": float(history.best_epoch), "epochs_run": float(history.epochs_run),
            "best_val_macro_f1": history.best_val_macro_f1,
            "val_macro_f1": history.best_val_macro_f1 if graphs["val"] else float("nan")}
    return FittedModel(model, probabilities, cost, tables={"training_curve": history.curve()})


def crop_encoder(features_cfg: Mapping[str, Any], featurizer: WordFeaturizer) -> dict[str, Any]:
    """The GNNStack arguments of the crop CNN (none when the features leave it out)."""
    if not featurizer.uses_crop_cnn:
        return {}
    settings = dict(features_cfg["crop_cnn"])
    return {"crop_encoder": CropCNNEncoder(**settings), "crop_dim": int(settings["out_dim"])}


def _checkpoint(cfg: DictConfig, graphs: dict[str, list]) -> EpochCheckpoint | None:
    """Epoch checkpoints under ``train.checkpoint_dir`` (null: none), keyed by what training
    depends on, so the same config on the same data resumes a killed run."""
    folder = cfg.train.get("checkpoint_dir")
    if not folder:
        return None
    inputs = inputs_digest(graphs["train"], graphs["val"])
    encoder = (OmegaConf.to_container(cfg.features.char_cnn, resolve=True)
               if "char_cnn" in cfg.features else {})
    crops = (OmegaConf.to_container(cfg.features.crop_cnn, resolve=True)
             if "crop_cnn" in cfg.features.groups else {})
    key = training_key({**OmegaConf.to_container(cfg.model, resolve=True), "char_cnn": encoder,
                        **({"crop_cnn": crops} if crops else {})},
                       cfg.train, int(cfg.seed), inputs)
    return EpochCheckpoint(folder, key, inputs)


def fit_baseline(cfg: DictConfig, sets: dict[str, PageSet], featurizer: WordFeaturizer,
                 labels: Sequence[str]) -> FittedModel:
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
    cost = {"train_seconds": train_seconds, "parameters": float(_estimator_size(estimator)),
            "pages_per_second": len(sets["test"].pages) / max(infer_seconds, 1e-9),
            "val_macro_f1": _validation_macro_f1(estimator, sets["val"], featurizer, index,
                                                 options)}
    return FittedModel(estimator, np.split(full, sizes), cost)


def _validation_macro_f1(estimator: Any, pages: PageSet, featurizer: WordFeaturizer,
                         index: Mapping[str, int], options: Mapping[str, Any]) -> float:
    """Word macro-F1 on the validation pages, defined as the GNN's early-stopping score
    (scikit-learn's macro F1 over the classes present): what tuning may look at."""
    if not pages.pages:
        return float("nan")
    y_val = np.concatenate([label_indices(p, index) for p in pages.pages])
    predicted = estimator.predict(to_matrix(pages, featurizer, **options))
    return float(f1_score(y_val, predicted, average="macro", zero_division=0))


def fit_template(cfg: DictConfig, sets: dict[str, PageSet], featurizer: WordFeaturizer,
                 labels: Sequence[str]) -> FittedModel:
    """Per-layout templates from the training pages (no features, no validation use); page
    outcomes are logged as ``template/<outcome>_pages`` and kept as the ``template_pages`` table."""
    signature = dict(cfg.split.get("signature") or {})
    if "keywords" in signature:
        signature["n_keywords"] = signature.pop("keywords")
    estimator = make_template(str(cfg.model.estimator), dict(cfg.model.options or {}),
                              list(labels), signature)
    started = time.perf_counter()
    estimator.fit(sets["train"].pages)
    train_seconds = time.perf_counter() - started
    started = time.perf_counter()
    full = estimator.predict_proba(sets["test"].pages)
    infer_seconds = time.perf_counter() - started
    matches = estimator.match_pages(sets["test"].pages)
    sizes = np.cumsum([len(page) for page in sets["test"].pages])[:-1]
    cost = {"train_seconds": train_seconds, "parameters": float(estimator.n_template_words_),
            "pages_per_second": len(sets["test"].pages) / max(infer_seconds, 1e-9)}
    counts = matches["outcome"].value_counts()
    notes = {f"template/{outcome}_pages": float(counts.get(outcome, 0)) for outcome in OUTCOMES}
    notes["template/families"] = float(len(estimator.families_))
    return FittedModel(estimator, np.split(full, sizes), cost, notes,
                       {"template_pages": matches.set_index("doc_id")})


FITTERS = {"gnn": fit_gnn, "baseline": fit_baseline, "template": fit_template}


def fit_model(cfg: DictConfig, sets: dict[str, PageSet], featurizer: WordFeaturizer,
              labels: Sequence[str]) -> FittedModel:
    return FITTERS[str(cfg.model.kind)](cfg, sets, featurizer, labels)


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
