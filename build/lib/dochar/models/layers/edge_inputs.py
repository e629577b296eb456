"""The edge vector the edge-aware layers read: the edge's relation, one-hot, beside its
continuous attributes, so one learned projection sees both."""

from __future__ import annotations

import torch
import torch.nn.functional as F
from torch import Tensor


def edge_vectors(edge_type: Tensor, edge_attr: Tensor | None, type_slots: int,
                 dtype: torch.dtype) -> Tensor:
    """``[one_hot(r_ij) ‖ a_ij]``, shape (E, type_slots + D); ``a`` is absent when None."""
    one_hot = F.one_hot(edge_type, type_slots).to(dtype)
    return one_hot if edge_attr is None else torch.cat([one_hot, edge_attr.to(dtype)], dim=1)


def with_self_loops(num_nodes: int, edge_index: Tensor, edge_type: Tensor,
                    edge_attr: Tensor | None, loop_type: int
                    ) -> tuple[Tensor, Tensor, Tensor | None]:
    """One loop i -> i per node, typed ``loop_type`` (a slot of its own) with all-zero attributes;
    loops already in the graph keep their own type and attributes."""
    nodes = torch.arange(num_nodes, device=edge_index.device)
    edge_index = torch.cat([edge_index, nodes.expand(2, -1)], dim=1)
    edge_type = torch.cat([edge_type, torch.full_like(nodes, loop_type)])
    if edge_attr is not None:
        edge_attr = torch.cat([edge_attr, edge_attr.new_zeros(num_nodes, edge_attr.shape[1])])
    return edge_index, edge_type, edge_attr
