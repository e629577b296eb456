"""Message-passing layers chosen by name; all share forward(x, edge_index, edge_type, edge_attr).

``edge_attr`` holds the edges' continuous attributes, (E, edge_dim) floats, or None. Every layer
takes ``edge_dim`` (0: no attributes); the edge-aware ones (edge_attention, transformer, gine,
gated_relational) read the attributes, the others accept and ignore them.
"""

from __future__ import annotations

import inspect

import torch

from dochar.models.layers.attention import AttentionLayer
from dochar.models.layers.edge_attention import EdgeAttentionLayer
from dochar.models.layers.gated_relational import GatedRelationalLayer
from dochar.models.layers.gcn import GCNLayer
from dochar.models.layers.gine import GINELayer
from dochar.models.layers.max import MaxLayer
from dochar.models.layers.none import NoGraphLayer
from dochar.models.layers.relational import RelationalLayer
from dochar.models.layers.transformer import TransformerLayer
from dochar.models.layers.validation import LayerOptionError

LAYERS: dict[str, type] = {
    "relational": RelationalLayer,
    "attention": AttentionLayer,
    "max": MaxLayer,
    "gcn": GCNLayer,
    "none": NoGraphLayer,
    "edge_attention": EdgeAttentionLayer,
    "transformer": TransformerLayer,
    "gine": GINELayer,
    "gated_relational": GatedRelationalLayer,
}

# set by the stack from the data, never by a layer's options
_POSITIONAL = ("self", "in_dim", "out_dim", "num_relations", "edge_dim")


def layer_options(name: str) -> tuple[str, ...]:
    """Option names the layer `name` accepts beyond its dimensions (in, out, relations, edge)."""
    cls = _lookup(name)
    return tuple(p for p in inspect.signature(cls.__init__).parameters if p not in _POSITIONAL)


def make_layer(name: str, in_dim: int, out_dim: int, num_relations: int, edge_dim: int = 0,
               **options) -> torch.nn.Module:
    """Build layer `name` for ``edge_dim`` continuous edge attributes (0: none); unknown names or
    options fail here, listing what is valid."""
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
    if not isinstance(edge_dim, int) or isinstance(edge_dim, bool) or edge_dim < 0:
        raise LayerOptionError(f"layer {name!r}: edge_dim must be an int >= 0, got {edge_dim!r}")
    return cls(in_dim, out_dim, num_relations, edge_dim=edge_dim, **options)


def _lookup(name: str) -> type:
    if name not in LAYERS:
        raise LayerOptionError(f"config key model.layer={name!r}: unknown layer {name!r}; "
                               f"valid layers: {sorted(LAYERS)}")
    return LAYERS[name]


__all__ = ["LAYERS", "make_layer", "layer_options", "LayerOptionError", "AttentionLayer",
           "EdgeAttentionLayer",
           "GatedRelationalLayer", "GCNLayer", "GINELayer", "MaxLayer", "NoGraphLayer",
           "RelationalLayer", "TransformerLayer"]
