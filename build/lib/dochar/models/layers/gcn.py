"""Graph convolution of Kipf & Welling: relation-blind, symmetric degree normalisation."""

from __future__ import annotations

import torch
from torch import Tensor
from torch_geometric.nn import GCNConv
from torch_geometric.utils import coalesce

from dochar.models.layers.validation import check_graph_inputs


class GCNLayer(torch.nn.Module):
    r"""GCN (Kipf & Welling, ICLR 2017, eq. 2) via torch_geometric's ``GCNConv``:

    .. math::
        X' = \hat D^{-1/2} (A + I) \hat D^{-1/2} X W + b, \qquad \hat D_{ii} = \sum_j (A + I)_{ij}

    with :math:`A_{ij} = 1` when an edge runs from j to i, so degrees are in-degrees (for a
    symmetric graph this is exactly the paper's rule). ``edge_type`` and ``edge_attr`` are
    **ignored**, and parallel edges of different types collapse into one so that A stays a 0/1
    matrix; a self loop already in the graph is not doubled.
    """

    def __init__(self, in_dim: int, out_dim: int, num_relations: int,
                 edge_dim: int = 0) -> None:
        super().__init__()
        self.in_dim, self.out_dim, self.num_relations = in_dim, out_dim, num_relations
        self.conv = GCNConv(in_dim, out_dim)

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None = None) -> Tensor:
        check_graph_inputs("gcn layer", x, edge_index, edge_type, self.in_dim, self.num_relations)
        return self.conv(x, coalesce(edge_index, num_nodes=x.shape[0]))
