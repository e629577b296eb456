"""No message passing: the no-graph ablation, so a gain can be credited to the graph itself."""

from __future__ import annotations

import torch
from torch import Tensor

from dochar.models.layers.validation import check_graph_inputs


class NoGraphLayer(torch.nn.Module):
    r"""A per-node linear map, :math:`x_i' = W x_i + b`; ``edge_index`` and ``edge_type`` are
    checked for a uniform interface and otherwise ignored, as is ``edge_attr``."""

    def __init__(self, in_dim: int, out_dim: int, num_relations: int,
                 edge_dim: int = 0) -> None:
        super().__init__()
        self.in_dim, self.out_dim, self.num_relations = in_dim, out_dim, num_relations
        self.linear = torch.nn.Linear(in_dim, out_dim)

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None = None) -> Tensor:
        check_graph_inputs("none layer", x, edge_index, edge_type, self.in_dim, self.num_relations)
        return self.linear(x)
