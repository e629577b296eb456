"""scikit-learn baselines on per-word feature matrices, and the neighbour features that feed them.

A GNN only earns its place if it beats a tree ensemble given the same words *and* a fixed summary
of each word's neighbourhood; `neighbour_aggregates` is that summary, and `edge_attr_aggregates`
adds the edges' own attributes when the graph carries them (the GNN sees those too).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sklearn.base import BaseEstimator
from sklearn.ensemble import HistGradientBoostingClassifier, RandomForestClassifier
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from dochar.errors import DocharError
from dochar.models.template import LayoutTemplateClassifier, TemplateInputError


class EstimatorOptionError(DocharError):
    """An estimator name or option scikit-learn cannot build or fit; names its config key."""


BASELINES: dict[str, type] = {
    "random_forest": RandomForestClassifier,
    "gradient_boosting": HistGradientBoostingClassifier,
    "logistic_regression": LogisticRegression,
}

# Baselines that read whole pages rather than the flat feature matrix (``kind: template``).
TEMPLATE_BASELINES: dict[str, type] = {"layout_template": LayoutTemplateClassifier}

# Imbalanced word classes ("other" dominates) call for balanced weights; one or two threads
# because experiments run side by side on small machines.
_DEFAULTS: dict[str, dict[str, Any]] = {
    "random_forest": {"n_estimators": 300, "class_weight": "balanced", "n_jobs": 1},
    "gradient_boosting": {"class_weight": "balanced"},
    "logistic_regression": {"class_weight": "balanced", "max_iter": 2000},
}


def make_baseline(name: str, seed: int, **options: Any) -> BaseEstimator:
    """A fresh, seeded estimator; logistic regression is wrapped in a StandardScaler pipeline."""
    if name not in BASELINES:
        raise EstimatorOptionError(f"config key model.estimator={name!r}: unknown baseline "
                                   f"{name!r}; valid baselines: {sorted(BASELINES)}")
    cls = BASELINES[name]
    valid = set(cls().get_params()) - {"random_state"}
    if "random_state" in options:
        raise EstimatorOptionError(f"config key model.options.random_state: baseline {name!r} "
                                   f"takes its seed from the config key seed")
    unknown = sorted(set(options) - valid)
    if unknown:
        raise EstimatorOptionError(f"config key model.options: baseline {name!r} has no "
                                   f"option(s) {unknown}; valid options: {sorted(valid)}")
    estimator = cls(**{**_DEFAULTS[name], **options, "random_state": seed})
    if name == "logistic_regression":
        return make_pipeline(StandardScaler(), estimator)
    return estimator


def check_baseline_options(name: str, options: dict[str, Any]) -> None:
    """Names and values of a baseline's options, checked as scikit-learn's ``fit`` would
    (its parameter constraints) but before any data exists."""
    estimator = make_baseline(name, 0, **options)
    for step in getattr(estimator, "steps", [(name, estimator)]):
        validate = getattr(step[1], "_validate_params", None)   # scikit-learn >= 1.2
        if validate is None:
            continue
        try:
            validate()
        except ValueError as error:     # sklearn's InvalidParameterError
            raise EstimatorOptionError(f"config key model.options: {error}") from None


def make_template(name: str, options: dict[str, Any], classes: list[str],
                  signature: dict[str, Any]) -> BaseEstimator:
    """A page-reading baseline with its options checked (names and values) before any fit."""
    if name not in TEMPLATE_BASELINES:
        raise TemplateInputError(f"unknown template baseline {name!r}; valid: "
                                 f"{sorted(TEMPLATE_BASELINES)}")
    cls = TEMPLATE_BASELINES[name]
    valid = set(cls().get_params()) - {"classes", "signature"}
    unknown = sorted(set(options) - valid)
    if unknown:
        raise TemplateInputError(f"model.options: {name!r} has no option(s) {unknown}; valid "
                                 f"options: {sorted(valid)}")
    estimator = cls(**options, classes=classes, signature=signature)
    estimator.check_options()
    return estimator


def neighbour_aggregates(features: np.ndarray, edge_index: np.ndarray, edge_type: np.ndarray,
                         num_relations: int) -> np.ndarray:
    """Mean and max of the source words' features over incoming edges, per edge type.

    Returns (n, 2·d·num_relations): for relation r, columns [2dr, 2dr+d) hold the mean and
    [2dr+d, 2d(r+1)) the max; both are 0 where a word has no incoming edge of that type.
    """
    features = np.asarray(features)
    edge_index = np.asarray(edge_index)
    edge_type = np.asarray(edge_type)
    _check_aggregate_inputs(features, edge_index, edge_type, num_relations)
    n, d = features.shape
    dtype = features.dtype if np.issubdtype(features.dtype, np.floating) else np.float64
    source, target = edge_index[0].astype(np.int64), edge_index[1].astype(np.int64)
    slot = target * num_relations + edge_type.astype(np.int64)  # one (word, relation) cell per edge
    messages = features[source].astype(dtype, copy=False)

    counts = np.bincount(slot, minlength=n * num_relations)
    sums = np.zeros((n * num_relations, d), dtype=dtype)
    np.add.at(sums, slot, messages)
    means = sums / np.maximum(counts, 1)[:, None]
    maxima = np.full((n * num_relations, d), -np.inf, dtype=dtype)
    np.maximum.at(maxima, slot, messages)
    maxima[counts == 0] = 0.0
    blocks = np.concatenate([means.reshape(n, num_relations, d),
                             maxima.reshape(n, num_relations, d)], axis=2)
    return blocks.reshape(n, 2 * d * num_relations)


def edge_attr_aggregates(edge_attr: np.ndarray, target: np.ndarray, num_nodes: int
                         ) -> np.ndarray:
    """Mean and max of each word's incoming edge attributes, over all its in-edges.

    Returns (n, 2·D): columns [0, D) the mean, [D, 2D) the max; both 0 for a word with no
    incoming edge.
    """
    edge_attr = np.asarray(edge_attr, dtype=np.float64)
    target = np.asarray(target, dtype=np.int64)
    if edge_attr.ndim != 2 or edge_attr.shape[0] != target.shape[0]:
        raise ValueError(f"edge_attr_aggregates: edge_attr must have shape ({target.shape[0]}, D), "
                         f"got {edge_attr.shape}")
    counts = np.bincount(target, minlength=num_nodes)
    sums = np.zeros((num_nodes, edge_attr.shape[1]))
    np.add.at(sums, target, edge_attr)
    maxima = np.full((num_nodes, edge_attr.shape[1]), -np.inf)
    np.maximum.at(maxima, target, edge_attr)
    maxima[counts == 0] = 0.0
    return np.hstack([sums / np.maximum(counts, 1)[:, None], maxima])


def _check_aggregate_inputs(features: np.ndarray, edge_index: np.ndarray, edge_type: np.ndarray,
                            num_relations: int) -> None:
    where = "neighbour_aggregates"
    if features.ndim != 2 or not np.issubdtype(features.dtype, np.number):
        raise ValueError(f"{where}: features must be a numeric (n, d) array, got shape "
                         f"{features.shape} and dtype {features.dtype}")
    if not isinstance(num_relations, (int, np.integer)) or num_relations < 1:
        raise ValueError(f"{where}: num_relations must be a positive int, got {num_relations!r}")
    if edge_index.ndim != 2 or edge_index.shape[0] != 2:
        raise ValueError(f"{where}: edge_index must have shape (2, E), got {edge_index.shape}")
    if edge_type.shape != (edge_index.shape[1],):
        raise ValueError(f"{where}: edge_type must have shape ({edge_index.shape[1]},), got "
                         f"{edge_type.shape}")
    for name, values in (("edge_index", edge_index), ("edge_type", edge_type)):
        if values.size and not np.issubdtype(values.dtype, np.integer):
            raise ValueError(f"{where}: {name} must hold integers, got dtype {values.dtype}")
    for name, values, bound in (("edge_index", edge_index, features.shape[0]),
                                ("edge_type", edge_type.reshape(1, -1), num_relations)):
        bad = (values < 0) | (values >= bound)
        if bad.any():
            edge = int(np.flatnonzero(bad.any(axis=0))[0])
            value = int(values[:, edge][bad[:, edge]][0])
            raise ValueError(f"{where}: {name} holds {value} at edge {edge}; must lie in 0..{bound - 1}")
