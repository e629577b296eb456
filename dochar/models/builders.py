"""One builder per model kind: config -> plain arguments -> the model object.

A run builds its model from the arguments these functions read off the config, and a saved
model records the same arguments (JSON), so ``dochar predict`` rebuilds exactly what was
trained, as scikit-learn rebuilds an estimator from ``get_params``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import torch
from omegaconf import DictConfig, OmegaConf

from dochar.features import CharCNNEncoder, CropCNNEncoder, WordFeaturizer
from dochar.models.baselines import make_baseline, make_template
from dochar.models.gnn import GNNStack
from dochar.models.members import MemberAverage
from dochar.models.pairs import PairScorer
from dochar.tasks import PAIRS, Task


def _plain(section: Any) -> Any:
    return OmegaConf.to_container(section, resolve=True) if isinstance(
        section, DictConfig) or type(section).__name__ == "ListConfig" else section


def gnn_arguments(cfg: Mapping[str, Any], featurizer: WordFeaturizer, task: Task,
                  n_labels: int, n_relations: int, edge_dim: int = 0) -> dict[str, Any]:
    """The stack's arguments (and the pair head's, for pair tasks) of a run."""
    model_cfg = cfg["model"]
    char_cnn = _plain(cfg["features"]["char_cnn"]) if featurizer.uses_char_cnn else None
    pair_head = dict(task.pair_head) if task.target == PAIRS else None
    stack = {"in_dim": len(featurizer.feature_names),
             "num_classes": int(task.embedding_dim) if pair_head else n_labels,
             "num_relations": n_relations, "layer": str(model_cfg["layer"]),
             "hidden_dim": int(model_cfg["hidden_dim"]), "depth": int(model_cfg["depth"]),
             "dropout": float(model_cfg["dropout"]), "norm": str(model_cfg["norm"]),
             "residual": bool(model_cfg["residual"]),
             "layer_options": dict(_plain(model_cfg.get("layer_options")) or {}),
             "edge_dim": int(edge_dim)}
    return {"kind": "gnn", "stack": stack, "members": int(model_cfg.get("members", 1)),
            "char_cnn": None if char_cnn is None else {
                **char_cnn, "kernel_sizes": list(char_cnn["kernel_sizes"])},
            "crop_cnn": _plain(cfg["features"]["crop_cnn"]) if featurizer.uses_crop_cnn else None,
            "pair_head": None if pair_head is None else {
                "embedding_dim": int(task.embedding_dim), **pair_head}}


def build_gnn(arguments: Mapping[str, Any], seeds: Sequence[int] | None = None
              ) -> torch.nn.Module:
    """The network, or with ``members`` > 1 their average; ``seeds`` (one per member) seed each
    member's initial weights, for training (a loaded model's weights replace them)."""
    members = int(arguments.get("members", 1))
    if seeds is not None and len(seeds) != members:
        raise ValueError(f"build_gnn: {len(seeds)} seeds for {members} members")
    networks = []
    for seed in seeds or [None] * members:
        if seed is not None:
            torch.manual_seed(seed)
        networks.append(_one_network(arguments))
    return networks[0] if members == 1 else MemberAverage(networks)


def _one_network(arguments: Mapping[str, Any]) -> torch.nn.Module:
    char_cnn = arguments["char_cnn"]
    encoder = CharCNNEncoder(**char_cnn) if char_cnn else None
    crop_cnn = arguments.get("crop_cnn")
    crops = ({"crop_encoder": CropCNNEncoder(**crop_cnn), "crop_dim": int(crop_cnn["out_dim"])}
             if crop_cnn else {})
    stack = GNNStack(**arguments["stack"], char_encoder=encoder,
                     char_dim=int(char_cnn["out_dim"]) if char_cnn else 0, **crops)
    head = arguments["pair_head"]
    if head is None:
        return stack
    return PairScorer(stack, int(head["embedding_dim"]), int(head["hidden_dim"]),
                      float(head["dropout"]))


def baseline_arguments(cfg: Mapping[str, Any]) -> dict[str, Any]:
    return {"kind": "baseline", "estimator": str(cfg["model"]["estimator"]),
            "seed": int(cfg["seed"]), "options": dict(_plain(cfg["model"].get("options")) or {})}


def build_baseline(arguments: Mapping[str, Any]) -> Any:
    return make_baseline(arguments["estimator"], int(arguments["seed"]),
                         **dict(arguments["options"]))


def template_arguments(cfg: DictConfig, labels: Sequence[str]) -> dict[str, Any]:
    signature = dict(_plain(cfg.split.get("signature")) or {})
    if "keywords" in signature:
        signature["n_keywords"] = signature.pop("keywords")
    return {"kind": "template", "estimator": str(cfg.model.estimator),
            "options": dict(_plain(cfg.model.options) or {}), "classes": list(labels),
            "signature": signature}


def build_template(arguments: Mapping[str, Any]) -> Any:
    return make_template(arguments["estimator"], dict(arguments["options"]),
                         list(arguments["classes"]), dict(arguments["signature"]))


def estimator_size(estimator: Any) -> int:
    """Trees: total node count; linear models: coefficient count (a size, not trainable weights)."""
    final = estimator[-1] if hasattr(estimator, "steps") else estimator
    if hasattr(final, "estimators_"):
        return int(sum(tree.tree_.node_count for tree in np.ravel(final.estimators_)))
    if hasattr(final, "_predictors"):
        return int(sum(p.get_n_leaf_nodes() * 2 - 1 for row in final._predictors for p in row))
    if hasattr(final, "coef_"):
        return int(final.coef_.size + np.size(final.intercept_))
    return 0
