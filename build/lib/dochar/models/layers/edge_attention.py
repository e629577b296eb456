"""GATv2 attention that reads each edge's continuous attributes (geometry) beside its type."""

from __future__ import annotations

import torch
from torch import Tensor
from torch_geometric.nn import GATv2Conv

from dochar.models.layers.edge_inputs import edge_vectors, with_self_loops
from dochar.models.layers.validation import check_edge_attr, check_graph_inputs


class EdgeAttentionLayer(torch.nn.Module):
    r"""GATv2 (Brody et al., ICLR 2022, eq. 7 for the scoring function, quoted from memory) with an
    edge term, as defined by torch_geometric's ``GATv2Conv(edge_dim=...)``; per head:

    .. math::
        \alpha_{ij} = \operatorname{softmax}_{j \in \mathcal{N}(i) \cup \{i\}}
            \mathbf{a}^\top \mathrm{LeakyReLU}_{0.2}\left(
            \Theta_s x_i + \Theta_t x_j + \Theta_e e_{ij}\right), \qquad
        x_i' = \sum_{j \in \mathcal{N}(i) \cup \{i\}} \alpha_{ij}\, \Theta_t x_j + b

    with the edge vector :math:`e_{ij} = [\mathrm{onehot}(r_{ij}) \,\|\, a_{ij}]`: the relation
    one-hot (R + 1 slots) beside the edge's ``edge_dim`` continuous attributes :math:`a_{ij}`.
    Every node gets a self loop of its own type (slot R) with all-zero attributes. ``edge_dim = 0``
    leaves the relation alone in :math:`e_{ij}` (the edge-feature ablation). The softmax runs over
    the edges that *enter* i. ``heads`` heads are concatenated (each ``out_dim // heads`` wide) or,
    with ``concat=False``, averaged.
    """

    def __init__(self, in_dim: int, out_dim: int, num_relations: int, heads: int = 4,
                 concat: bool = True, attention_dropout: float = 0.0, edge_dim: int = 0) -> None:
        super().__init__()
        if heads < 1:
            raise ValueError(f"edge_attention layer: heads must be >= 1, got {heads}")
        if concat and out_dim % heads:
            raise ValueError(f"edge_attention layer: out_dim {out_dim} is not divisible by heads "
                             f"{heads} (concatenated heads split out_dim evenly)")
        self.in_dim, self.out_dim, self.num_relations = in_dim, out_dim, num_relations
        self.edge_dim = edge_dim
        self.conv = GATv2Conv(in_dim, out_dim // heads if concat else out_dim, heads=heads,
                              concat=concat, dropout=attention_dropout, add_self_loops=False,
                              edge_dim=num_relations + 1 + edge_dim)

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None = None) -> Tensor:
        where = "edge_attention layer"
        check_graph_inputs(where, x, edge_index, edge_type, self.in_dim, self.num_relations)
        check_edge_attr(where, edge_attr, edge_index.shape[1], self.edge_dim)
        edge_index, edge_type, edge_attr = with_self_loops(x.shape[0], edge_index, edge_type,
                                                           edge_attr, self.num_relations)
        vectors = edge_vectors(edge_type, edge_attr, self.num_relations + 1, x.dtype)
        return self.conv(x, edge_index, vectors)
