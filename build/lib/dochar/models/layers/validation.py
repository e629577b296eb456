"""Checks shared by every layer: its options (from the config) when it is built, and its
inputs, so a malformed graph fails at the layer that received it."""

from __future__ import annotations

import torch
from torch import Tensor

from dochar.errors import DocharError


class LayerOptionError(DocharError):
    """A GNN option no stack can be built from (its layer, the layer's options, its sizes);
    the message names the config key."""


def check_graph_inputs(
    where: str, x: Tensor, edge_index: Tensor, edge_type: Tensor, in_dim: int, num_relations: int
) -> None:
    """Raise ValueError naming `where` and the first offending value; silent loss is worse than a stop."""
    if not isinstance(x, Tensor) or x.dim() != 2 or not x.is_floating_point():
        raise ValueError(f"{where}: x must be a 2-D float tensor (nodes, {in_dim}), got {_describe(x)}")
    if x.shape[1] != in_dim:
        raise ValueError(f"{where}: x has {x.shape[1]} features per node, the layer expects {in_dim}")
    if not isinstance(edge_index, Tensor) or edge_index.dim() != 2 or edge_index.shape[0] != 2:
        raise ValueError(f"{where}: edge_index must have shape (2, E), got {_describe(edge_index)}")
    num_edges = edge_index.shape[1]
    if not isinstance(edge_type, Tensor) or tuple(edge_type.shape) != (num_edges,):
        raise ValueError(f"{where}: edge_type must have shape ({num_edges},) to match edge_index, "
                         f"got {_describe(edge_type)}")
    for name, tensor in (("edge_index", edge_index), ("edge_type", edge_type)):
        if tensor.dtype != torch.long:
            raise ValueError(f"{where}: {name} must have dtype torch.long, got {tensor.dtype}")
    _check_range(where, "edge_index", edge_index, x.shape[0], "node ids")
    _check_range(where, "edge_type", edge_type.unsqueeze(0), num_relations, "relation ids")


def _check_range(where: str, name: str, values: Tensor, bound: int, what: str) -> None:
    """`values` is (rows, E); report the first edge (column) holding a value outside 0..bound-1."""
    bad = (values < 0) | (values >= bound)
    if values.numel() == 0 or not bool(bad.any()):
        return
    edge = int(bad.any(dim=0).nonzero()[0])
    value = int(values[:, edge][bad[:, edge]][0])
    raise ValueError(f"{where}: {name} holds {value} at edge {edge}; {what} must lie in 0..{bound - 1}")


def _describe(value: object) -> str:
    if isinstance(value, Tensor):
        return f"a tensor of shape {tuple(value.shape)} and dtype {value.dtype}"
    return f"a {type(value).__name__}"


def check_edge_attr(where: str, edge_attr: Tensor | None, num_edges: int, edge_dim: int) -> None:
    """An edge-aware layer built for ``edge_dim`` attributes needs exactly (E, edge_dim) floats;
    a layer built without them (``edge_dim == 0``) must not be handed any."""
    if edge_dim == 0:
        if edge_attr is not None:
            raise ValueError(f"{where}: was built without edge features (edge_dim = 0) but got "
                             f"edge_attr {_describe(edge_attr)}; build it with edge_dim = "
                             f"{edge_attr.shape[-1] if isinstance(edge_attr, Tensor) else '?'}")
        return
    if edge_attr is None:
        raise ValueError(f"{where}: was built for {edge_dim} edge features per edge but got "
                         "edge_attr=None; the graphs carry no edge attributes (choose an edge "
                         "attribute set, or build the model with edge_dim = 0)")
    if (not isinstance(edge_attr, Tensor) or not edge_attr.is_floating_point()
            or tuple(edge_attr.shape) != (num_edges, edge_dim)):
        raise ValueError(f"{where}: edge_attr must be a float tensor of shape ({num_edges}, "
                         f"{edge_dim}) (one row per edge), got {_describe(edge_attr)}")
