"""Everything the composed config alone decides, checked before a run loads any data.

The schemas (:func:`dochar.config.check_schema`) reject unknown keys and wrong types. The
options of one builder, layer or estimator are open-ended (``graph.options``,
``model.layer_options``, ``model.options``) or read deep inside a stage (``features.pool_words``,
``features.char_cnn``, ``train.class_weighting``); here each stage's own builder is tried on the
options it will receive, with stand-in sizes where it needs data (a GNN stack over one input
column, class weights of one word). So an option no stage can use ends the command with one line
naming its config key, before loading, instead of a traceback after it. Every Hydra command
(``dochar.cli``), ``run_experiment`` and the gate go through :func:`check_config`.
"""

from __future__ import annotations

from typing import Any

from omegaconf import DictConfig, OmegaConf

from dochar import graphs
from dochar.config import check_schema
from dochar.data.importers.cord import LABEL_MAPS
from dochar.data.word_table import WordTableError
from dochar.errors import DocharError
from dochar.features.char_cnn import CharCNNEncoder
from dochar.features.featurizer import check_options
from dochar.features.lexicons import compile_lexicons
from dochar.features.text_embedding import require_embedding
from dochar.models.baselines import check_baseline_options, make_template
from dochar.models.gnn import GNNStack
from dochar.models.layers import LayerOptionError
from dochar.models.objectives import (
    TrainOptionError,
    check_class_weighting,
    check_label_smoothing,
)
from dochar.records.shape import RecordShape

# train.* numbers and the least value each may take
_TRAIN_MINIMA = {"max_epochs": 1, "patience": 1, "pages_per_batch": 1, "threads": 1,
                 "weight_decay": 0.0, "warmup_epochs": 0}
SCHEDULES = ("constant", "cosine")


def check_config(cfg: DictConfig) -> None:
    """Raise a DocharError naming the config key of the first option no stage can use."""
    check_schema(cfg)
    _check_data(cfg.data)
    graphs.from_config(cfg.graph, cfg.get("edges"))
    _check_features(cfg.features, cfg.data)
    _check_model(cfg.model, list(cfg.data.labels))
    _check_train(cfg.train)
    record_shape(cfg.data)


def record_shape(data: DictConfig) -> RecordShape | None:
    """The data's record shape (``data.record``), checked against its labels; None when it
    names no header field and no item column."""
    block = data.get("record")
    if block is None or not (block.get("header_fields") or block.get("item_columns")):
        return None
    return RecordShape.from_mapping(_plain(block), labels=list(data.labels))


def _plain(node: Any) -> Any:
    return OmegaConf.to_container(node, resolve=True) if isinstance(node, DictConfig) else node


def _check_data(data: DictConfig) -> None:
    label_map = data.get("label_map")
    if label_map is not None and label_map not in LABEL_MAPS:
        raise WordTableError(f"config key data.label_map={label_map}: choose one of "
                             f"{list(LABEL_MAPS)}")


def _check_features(features: DictConfig, data: DictConfig) -> None:
    groups = list(features.groups)
    check_options(groups, int(features.max_chars), list(features.get("pool_words") or ()))
    if "text_flags" in groups:
        compile_lexicons(_plain(data.get("lexicons")))
    if "text_embedding" in groups:
        require_embedding()
    if "char_cnn" in groups:
        CharCNNEncoder(**_plain(features.char_cnn))


def _check_model(model: DictConfig, labels: list[str]) -> None:
    options = _plain(model.get("layer_options") if model.kind == "gnn" else model.get("options"))
    if model.kind == "baseline":
        check_baseline_options(str(model.estimator), dict(options or {}))
    elif model.kind == "template":
        make_template(str(model.estimator), dict(options or {}), labels, {})
    elif model.kind == "gnn":
        try:
            GNNStack(in_dim=1, num_classes=2, num_relations=1, layer=str(model.layer),
                     hidden_dim=model.hidden_dim, depth=model.depth, dropout=model.dropout,
                     norm=model.norm, residual=model.residual, layer_options=dict(options or {}))
        except DocharError:
            raise
        except (TypeError, ValueError, RuntimeError) as error:   # an option's value or type
            if not options:
                raise
            raise LayerOptionError(f"config key model.layer_options={options}: layer "
                                   f"{model.layer!r} cannot be built with them ({error})") from None


def _check_train(train: DictConfig) -> None:
    for key, least in _TRAIN_MINIMA.items():
        if key in train and not train[key] >= least:
            raise TrainOptionError(f"config key train.{key}={train[key]!r}: expected at least "
                                   f"{least}")
    if not train.learning_rate > 0:
        raise TrainOptionError(f"config key train.learning_rate={train.learning_rate!r}: "
                               f"expected a positive number")
    check_class_weighting(str(train.class_weighting))
    check_label_smoothing(float(train.get("label_smoothing", 0.0)))
    if train.get("schedule", "constant") not in SCHEDULES:
        raise TrainOptionError(f"config key train.schedule={train.schedule!r}: expected one of "
                               f"{list(SCHEDULES)}")
    if train.get("warmup_epochs", 0) >= train.max_epochs:
        raise TrainOptionError(f"config key train.warmup_epochs={train.warmup_epochs!r}: "
                               f"expected fewer than train.max_epochs={train.max_epochs}")
