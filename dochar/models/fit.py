"""Fit one model on the training pages and score the test pages: a GNN, a baseline or templates.

Every kind takes the same :class:`FitInputs` (page sets, featurizer, task, and for pair tasks the
candidate pairs) and returns per-page outputs (node class probabilities, or link probabilities
of candidate pairs) with cost figures, so the rest of the run never asks which kind it had.
Each model is built by one function from plain arguments (:mod:`dochar.models.builders`), and
those arguments are what a saved model records.
"""

from __future__ import annotations

import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from omegaconf import DictConfig, OmegaConf
from sklearn.metrics import f1_score
from torch_geometric.data import Batch

from dochar.features import WordFeaturizer
from dochar.models.builders import (
    baseline_arguments,
    build_baseline,
    build_gnn,
    build_template,
    estimator_size,
    gnn_arguments,
    template_arguments,
)
from dochar.models.checkpoints import EpochCheckpoint, inputs_digest, training_key
from dochar.models.gnn import count_parameters
from dochar.models.inputs import PageSet, label_indices, to_graphs, to_matrix
from dochar.models.members import member_seeds
from dochar.models.objectives import best_threshold, objective_for, sample_negatives
from dochar.models.pairs import PageCandidates, pair_matrix, with_pairs
from dochar.models.template import OUTCOMES
from dochar.models.training import train
from dochar.splits import PARTS
from dochar.tasks import PAIRS, VALIDATION_SCORE, Task


@dataclass
class FitInputs:
    """What every fitter reads; ``candidates`` by part for tasks that score pairs."""

    sets: dict[str, PageSet]
    featurizer: WordFeaturizer
    labels: list[str]
    task: Task
    candidates: dict[str, list[PageCandidates]] | None = None

    @property
    def pairs(self) -> bool:
        return self.task.target == PAIRS

    @property
    def rows_threshold(self) -> bool:
        """The link cut is chosen by validation row F1 (``task.threshold_by: rows``)."""
        return bool(getattr(self.task, "threshold_by_rows", False))

    def row_pairs(self, part: str) -> np.ndarray:
        """Every candidate pair of the part, node indices offset so pages stay apart."""
        offsets = np.cumsum([0, *(len(p) for p in self.sets[part].pages)])[:-1]
        found = [c.pairs + offset for c, offset in zip(self.candidates[part], offsets)]
        return np.hstack(found) if found else np.zeros((2, 0), np.int64)

    def missed(self, part: str) -> int:
        return sum(c.missed.shape[1] for c in (self.candidates or {}).get(part, []))


@dataclass
class FittedModel:
    """The fitted model, the arguments that built it, its test outputs and what it cost."""

    model: Any
    arguments: dict[str, Any]
    outputs: list[np.ndarray]
    cost: dict[str, float]
    threshold: float | None = None                                 # pair tasks: link cut
    featurizer: WordFeaturizer | None = None                       # set by fit_model
    notes: dict[str, float] = field(default_factory=dict)         # extra run metrics
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)  # extra run tables
    trained_on: tuple[str, ...] = ("train",)                       # parts the model learned from


def system_name(model_cfg: Mapping[str, Any]) -> str:
    """The layer of a GNN, the estimator of a baseline: what the run compares."""
    return str(model_cfg["layer"] if model_cfg["kind"] == "gnn" else model_cfg["estimator"])


def _validation(score: float, name: str) -> dict[str, float]:
    """The validation figure under the one name sweeps read and under the task's own name."""
    return {VALIDATION_SCORE: score, name: score}


def fit_gnn(cfg: DictConfig, inputs: FitInputs) -> FittedModel:
    index = {label: i for i, label in enumerate(inputs.labels)}
    graphs = {part: to_graphs(inputs.sets[part], inputs.featurizer,
                              None if inputs.pairs else index) for part in PARTS}
    if inputs.pairs:
        graphs = {part: [with_pairs(g, c) for g, c in zip(graphs[part],
                                                          inputs.candidates[part])]
                  for part in PARTS}
    arguments = gnn_arguments(cfg, inputs.featurizer, inputs.task, len(inputs.labels),
                              len(inputs.sets["train"].relations),
                              len(inputs.sets["train"].edge_attr_names))
    members = int(arguments["members"])
    seeds = member_seeds(int(cfg.seed), members) if members > 1 else [int(cfg.seed)]
    model = build_gnn(arguments, seeds if members > 1 else None)
    networks = list(model.members) if members > 1 else [model]
    started = time.perf_counter()
    histories = [_train_one(cfg, inputs, graphs, network, seed, members > 1)
                 for network, seed in zip(networks, seeds)]
    objective = histories[0][1]
    score = histories[0][0].best_val_score if graphs["val"] else float("nan")
    if members > 1 and graphs["val"]:   # the average's own validation score
        score = objective.validate(model, Batch.from_data_list(list(graphs["val"])))[0]
    if retrains_on_val(cfg, inputs):
        model = _retrain_on_val(cfg, inputs, graphs, arguments, seeds,
                                [history.best_epoch for history, _ in histories])
    train_seconds = time.perf_counter() - started
    started = time.perf_counter()
    outputs = objective.outputs(model, graphs["test"])
    infer_seconds = time.perf_counter() - started
    history = histories[0][0]
    notes: dict[str, float] = {}
    if members > 1:     # each member's validation score beside the average's
        for index, (member_history, _) in enumerate(histories):
            notes[f"member/{index}/best_epoch"] = float(member_history.best_epoch)
            notes[f"member/{index}/{objective.score_name}"] = member_history.best_val_score
    cost = {"train_seconds": train_seconds, "parameters": float(count_parameters(model)),
            "pages_per_second": len(graphs["test"]) / max(infer_seconds, 1e-9),
            "best_epoch": float(np.mean([h.best_epoch for h, _ in histories])),
            "epochs_run": float(np.mean([h.epochs_run for h, _ in histories])),
            **_validation(score, objective.score_name)}
    return FittedModel(model, arguments, outputs, cost, threshold=history.threshold,
                       notes=notes, tables={"training_curve": history.curve()})


def _train_one(cfg: DictConfig, inputs: FitInputs, graphs: dict[str, list],
               network: Any, seed: int, member: bool) -> tuple[Any, Any]:
    """Train one network with its own seed (a member of several: its own checkpoints too);
    its history and objective. With members, the run's curve is the first member's."""
    objective = objective_for(inputs.task.target, cfg.train, num_classes=len(inputs.labels),
                              seed=seed,
                              negative_ratio=getattr(inputs.task, "negative_ratio", None),
                              val_missed=inputs.missed("val"), rows=inputs.rows_threshold)
    checkpoint = _checkpoint(cfg, graphs, seed if member else None)
    history = train(network, graphs["train"], graphs["val"], objective, cfg.train, seed,
                    checkpoint=checkpoint)
    if checkpoint is not None:
        checkpoint.remove()
    return history, objective


def retrains_on_val(cfg: DictConfig, inputs: FitInputs) -> bool:
    """``train.retrain_on_val`` is set and there are validation pages to add."""
    return bool(cfg.train.get("retrain_on_val")) and bool(inputs.sets["val"].pages)


def _retrain_on_val(cfg: DictConfig, inputs: FitInputs, graphs: dict[str, list],
                    arguments: dict[str, Any], seeds: list[int], epochs: list[int]) -> Any:
    """The network(s) trained afresh on the training and validation pages together, each member
    from its seed for the epochs its early-stopped run kept, on the same learning-rate curve:
    the second pass of early stopping (Goodfellow, Bengio and Courville, "Deep Learning", 2016,
    section 7.8, Algorithm 7.2), so the final model learns from the validation pages too. The
    validation pages have chosen the epochs (and a link task's cut); they score nothing
    afterwards. Not checkpointed, and the first pass's checkpoints are gone by then: a run
    killed during this pass trains both passes again."""
    model = build_gnn(arguments, seeds)
    networks = list(model.members) if len(seeds) > 1 else [model]
    pooled = list(graphs["train"]) + list(graphs["val"])
    for network, seed, last_epoch in zip(networks, seeds, epochs):
        objective = objective_for(inputs.task.target, cfg.train, num_classes=len(inputs.labels),
                                  seed=seed,
                                  negative_ratio=getattr(inputs.task, "negative_ratio", None),
                                  val_missed=0, rows=inputs.rows_threshold)
        train(network, pooled, [], objective, cfg.train, seed, last_epoch=max(last_epoch, 1))
    return model


def _checkpoint(cfg: DictConfig, graphs: dict[str, list],
                member_seed: int | None = None) -> EpochCheckpoint | None:
    """Epoch checkpoints under ``train.checkpoint_dir`` (null: none), keyed by what training
    depends on, so the same config on the same data resumes a killed run (and a member of
    several, by its seed, its own training)."""
    folder = cfg.train.get("checkpoint_dir")
    if not folder:
        return None
    inputs = inputs_digest(graphs["train"], graphs["val"])
    encoder = (OmegaConf.to_container(cfg.features.char_cnn, resolve=True)
               if "char_cnn" in cfg.features else {})
    crops = (OmegaConf.to_container(cfg.features.crop_cnn, resolve=True)
             if "crop_cnn" in cfg.features.groups else {})
    key = training_key({**OmegaConf.to_container(cfg.model, resolve=True), "char_cnn": encoder,
                        **({"crop_cnn": crops} if crops else {}),
                        "task": OmegaConf.to_container(cfg.task, resolve=True),
                        **({} if member_seed is None else {"member_seed": member_seed})},
                       cfg.train, int(cfg.seed), inputs)
    return EpochCheckpoint(folder, key, inputs)


def _rows(cfg: DictConfig, inputs: FitInputs, part: str) -> np.ndarray:
    """A baseline's rows of one part: node rows, or pair rows for pair tasks."""
    options = dict(hash_features=int(cfg.features.hash_features),
                   neighbour_features=bool(cfg.model.neighbour_features))
    if not inputs.pairs:
        return to_matrix(inputs.sets[part], inputs.featurizer, **options)
    return pair_matrix(inputs.sets[part], inputs.candidates[part], inputs.featurizer, **options)


def _targets(inputs: FitInputs, part: str) -> np.ndarray:
    if inputs.pairs:
        found = [c.y for c in inputs.candidates[part]]
        return np.concatenate(found).astype(np.int64) if found else np.zeros(0, np.int64)
    index = {label: i for i, label in enumerate(inputs.labels)}
    return np.concatenate([label_indices(p, index) for p in inputs.sets[part].pages])


def _sizes(inputs: FitInputs, part: str) -> np.ndarray:
    """Where one page's rows end and the next begin."""
    counts = ([c.pairs.shape[1] for c in inputs.candidates[part]] if inputs.pairs
              else [len(page) for page in inputs.sets[part].pages])
    return np.cumsum(counts)[:-1]


def _training_rows(cfg: DictConfig, inputs: FitInputs, parts: tuple[str, ...]
                   ) -> tuple[np.ndarray, np.ndarray]:
    """A baseline's training rows and targets from ``parts``; for pair tasks with a
    ``negative_ratio``, every positive and that many negatives per positive (seeded)."""
    rows = np.vstack([_rows(cfg, inputs, part) for part in parts])
    targets = np.concatenate([_targets(inputs, part) for part in parts])
    ratio = getattr(inputs.task, "negative_ratio", None)
    if inputs.pairs and ratio is not None:
        keep = sample_negatives(targets == 1, float(ratio), np.random.default_rng(int(cfg.seed)))
        rows, targets = rows[keep], targets[keep]
    return rows, targets


def fit_baseline(cfg: DictConfig, inputs: FitInputs) -> FittedModel:
    arguments = baseline_arguments(cfg)
    estimator = build_baseline(arguments)
    started = time.perf_counter()
    estimator.fit(*_training_rows(cfg, inputs, ("train",)))
    train_seconds = time.perf_counter() - started

    def probabilities(part: str) -> np.ndarray:
        rows = _rows(cfg, inputs, part)
        if not len(rows):
            return np.zeros((0, len(inputs.labels)))
        seen = estimator.predict_proba(rows)
        full = np.zeros((len(seen), len(inputs.labels)))
        full[:, estimator.classes_] = seen  # classes absent from training keep probability 0
        return full

    started = time.perf_counter()
    test = probabilities("test")
    infer_seconds = time.perf_counter() - started
    val = probabilities("val") if inputs.sets["val"].pages else None
    threshold, score = None, float("nan")
    if val is not None and inputs.pairs:
        threshold, score = best_threshold(
            val[:, 1], _targets(inputs, "val") == 1, inputs.missed("val"),
            rows=inputs.row_pairs("val") if inputs.rows_threshold else None)
    elif val is not None:   # the GNN's early-stopping score: macro F1 over the classes present
        score = float(f1_score(_targets(inputs, "val"), val.argmax(axis=1), average="macro",
                               zero_division=0))
    if retrains_on_val(cfg, inputs):   # as the GNN's second pass: fit afresh on both parts
        started = time.perf_counter()
        estimator = build_baseline(arguments)
        estimator.fit(*_training_rows(cfg, inputs, ("train", "val")))
        train_seconds += time.perf_counter() - started
        test = probabilities("test")
    outputs = np.split(test[:, 1] if inputs.pairs else test, _sizes(inputs, "test"))
    cost = {"train_seconds": train_seconds, "parameters": float(estimator_size(estimator)),
            "pages_per_second": len(inputs.sets["test"].pages) / max(infer_seconds, 1e-9),
            **_validation(score, ("val_row_f1" if inputs.rows_threshold else "val_link_f1")
                          if inputs.pairs else "val_macro_f1")}
    return FittedModel(estimator, arguments, outputs, cost,
                       threshold=(0.5 if threshold is None else threshold) if inputs.pairs
                       else None)


def fit_template(cfg: DictConfig, inputs: FitInputs) -> FittedModel:
    """Per-layout templates from the training pages (no features; validation only scores them,
    for sweeps, unless ``train.retrain_on_val`` adds its pages' templates afterwards); page
    outcomes are logged as ``template/<outcome>_pages`` and kept as the ``template_pages`` table."""
    arguments = template_arguments(cfg, inputs.labels)
    estimator = build_template(arguments)
    sets = inputs.sets
    started = time.perf_counter()
    estimator.fit(sets["train"].pages)
    train_seconds = time.perf_counter() - started
    validation: dict[str, float] = {}
    if sets["val"].pages:
        predicted = estimator.predict_proba(sets["val"].pages).argmax(axis=1)
        validation = _validation(float(f1_score(_targets(inputs, "val"), predicted,
                                                average="macro", zero_division=0)),
                                 "val_macro_f1")
    if retrains_on_val(cfg, inputs):
        started = time.perf_counter()
        estimator = build_template(arguments)
        estimator.fit(list(sets["train"].pages) + list(sets["val"].pages))
        train_seconds += time.perf_counter() - started
    started = time.perf_counter()
    full = estimator.predict_proba(sets["test"].pages)
    infer_seconds = time.perf_counter() - started
    matches = estimator.match_pages(sets["test"].pages)
    cost = {"train_seconds": train_seconds, "parameters": float(estimator.n_template_words_),
            "pages_per_second": len(sets["test"].pages) / max(infer_seconds, 1e-9),
            **validation}
    counts = matches["outcome"].value_counts()
    notes = {f"template/{outcome}_pages": float(counts.get(outcome, 0)) for outcome in OUTCOMES}
    notes["template/families"] = float(len(estimator.families_))
    return FittedModel(estimator, arguments, np.split(full, _sizes(inputs, "test")), cost,
                       notes=notes, tables={"template_pages": matches.set_index("doc_id")})


FITTERS = {"gnn": fit_gnn, "baseline": fit_baseline, "template": fit_template}


def fit_model(cfg: DictConfig, inputs: FitInputs) -> FittedModel:
    fitted = FITTERS[str(cfg.model.kind)](cfg, inputs)
    fitted.featurizer = inputs.featurizer
    if retrains_on_val(cfg, inputs):
        fitted.trained_on = ("train", "val")
    return fitted
