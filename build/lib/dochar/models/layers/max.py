"""GraphSAGE with max aggregation: relation-blind, keeps the strongest signal among neighbours."""

from __future__ import annotations

import torch
from torch import Tensor
from torch_geometric.nn import SAGEConv

from dochar.models.layers.validation import check_graph_inputs


class MaxLayer(torch.nn.Module):
    r"""GraphSAGE (Hamilton et al., NeurIPS 2017) via torch_geometric's ``SAGEConv(aggr="max")``:

    .. math::
        x_i' = W_1 x_i + W_2 \max_{j \in \mathcal{N}(i)} x_j + b

    with the max taken elementwise, and zeros for a node without incoming edges.
    ``edge_type`` and ``edge_attr`` are accepted for a uniform interface and **ignored**: every
    relation is pooled together, which is what makes this layer the relation-blind comparison for
    the R-GCN.
    """

    def __init__(self, in_dim: int, out_dim: int, num_relations: int,
                 edge_dim: int = 0) -> None:
        super().__init__()
        self.in_dim, self.out_dim, self.num_relations = in_dim, out_dim, num_relations
        self.conv = SAGEConv(in_dim, out_dim, aggr="max")

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None = None) -> Tensor:
        check_graph_inputs("max layer", x, edge_index, edge_type, self.in_dim, self.num_relations)
        return self.conv(x, edge_index)
