"""Graph-transformer attention: scaled dot-product attention over a node's in-edges, with the
edge's attributes added to keys and values."""

from __future__ import annotations

import torch
from torch import Tensor
from torch_geometric.nn import TransformerConv

from dochar.models.layers.edge_inputs import edge_vectors
from dochar.models.layers.validation import check_edge_attr, check_graph_inputs


class TransformerLayer(torch.nn.Module):
    r"""Graph transformer of Shi et al., "Masked Label Prediction: Unified Message Passing Model
    for Semi-Supervised Classification" (IJCAI 2021, section 3.1; equations from memory), as
    torch_geometric's ``TransformerConv(edge_dim=...)`` computes it; per head c of width d:

    .. math::
        q_i = W_q x_i + b_q, \quad k_j = W_k x_j + b_k, \quad v_j = W_v x_j + b_v,
        \quad \epsilon_{ij} = W_e e_{ij}, \\
        \alpha_{ij} = \operatorname{softmax}_{j \in \mathcal{N}(i)}
            \frac{q_i^\top (k_j + \epsilon_{ij})}{\sqrt{d}}, \qquad
        x_i' = W_r x_i + b_r + \sum_{j \in \mathcal{N}(i)} \alpha_{ij} (v_j + \epsilon_{ij})

    with the edge vector :math:`e_{ij} = [\mathrm{onehot}(r_{ij}) \,\|\, a_{ij}]` (the relation
    one-hot beside the ``edge_dim`` continuous attributes; ``edge_dim = 0`` keeps the relation
    only). No self loops: :math:`W_r x_i` carries the node itself, and a node without in-edges
    outputs only that term. ``heads`` heads are concatenated (each ``out_dim // heads`` wide) or,
    with ``concat=False``, averaged.
    """

    def __init__(self, in_dim: int, out_dim: int, num_relations: int, heads: int = 4,
                 concat: bool = True, attention_dropout: float = 0.0, edge_dim: int = 0) -> None:
        super().__init__()
        if heads < 1:
            raise ValueError(f"transformer layer: heads must be >= 1, got {heads}")
        if concat and out_dim % heads:
            raise ValueError(f"transformer layer: out_dim {out_dim} is not divisible by heads "
                             f"{heads} (concatenated heads split out_dim evenly)")
        self.in_dim, self.out_dim, self.num_relations = in_dim, out_dim, num_relations
        self.edge_dim = edge_dim
        self.conv = TransformerConv(in_dim, out_dim // heads if concat else out_dim, heads=heads,
                                    concat=concat, dropout=attention_dropout,
                                    edge_dim=num_relations + edge_dim, root_weight=True)

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None = None) -> Tensor:
        where = "transformer layer"
        check_graph_inputs(where, x, edge_index, edge_type, self.in_dim, self.num_relations)
        check_edge_attr(where, edge_attr, edge_index.shape[1], self.edge_dim)
        vectors = edge_vectors(edge_type, edge_attr, self.num_relations, x.dtype)
        return self.conv(x, edge_index, vectors)
