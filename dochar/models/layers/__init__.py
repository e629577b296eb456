"""Message-passing layers chosen by name; all share forward(x, edge_index, edge_type)."""

from __future__ import annotations

import inspect

import torch

from dochar.models.layers.attention import AttentionLayer
from dochar.models.layers.gcn import GCNLayer
from dochar.models.layers.max import MaxLayer
from dochar.models.layers.none import NoGraphLayer
from dochar.models.layers.relational import RelationalLayer
from dochar.models.layers.validation import LayerOptionError

LAYERS: dict[str, type] = {
    "relational": RelationalLayer,
    "attention": AttentionLayer,
    "max": MaxLayer,
    "gcn": GCNLayer,
    "none": NoGraphLayer,
}

_POSITIONAL = ("self", "in_dim", "out_dim", "num_relations")


def layer_options(name: str) -> tuple[str, ...]:
    """Option names the layer `name` accepts beyond the three dimensions."""
    cls = _lookup(name)
    return tuple(p for p in inspect.signature(cls.__init__).parameters if p not in _POSITIONAL)


def make_layer(name: str, in_dim: int, out_dim: int, num_relations: int, **options) -> torch.nn.Module:
    """Build layer `name`; unknown names or options fail here, listing what is valid."""
    cls = _lookup(name)
    valid = layer_options(name)
    unknown = sorted(set(options) - set(valid))
    if unknown:
        raise LayerOptionError(f"config key model.layer_options: layer {name!r} has no "
                               f"option(s) {unknown}; valid options: {list(valid) or 'none'}")
    for label, value in (("in_dim", in_dim), ("out_dim", out_dim), ("num_relations", num_relations)):
        if not isinstance(value, int) or isinstance(value, bool) or value < 1:
            raise LayerOptionError(f"layer {name!r}: {label} must be a positive int, "
                                   f"got {value!r}")
    return cls(in_dim, out_dim, num_relations, **options)


def _lookup(name: str) -> type:
    if name not in LAYERS:
        raise LayerOptionError(f"config key model.layer={name!r}: unknown layer {name!r}; "
                               f"valid layers: {sorted(LAYERS)}")
    return LAYERS[name]


__all__ = ["LAYERS", "make_layer", "layer_options", "LayerOptionError", "AttentionLayer", "GCNLayer", "MaxLayer",
           "NoGraphLayer", "RelationalLayer"]
