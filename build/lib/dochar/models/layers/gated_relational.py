"""R-GCN whose every message is scaled by a gate read from the edge's continuous attributes."""

from __future__ import annotations

import math

import torch
from torch import Tensor

from dochar.models.layers.relational import RelationalLayer
from dochar.models.layers.validation import check_edge_attr, check_graph_inputs


class GatedRelationalLayer(RelationalLayer):
    r"""The R-GCN rule (Schlichtkrull et al. 2018, ESWC, eq. 2) with an edge-feature gate on each
    message; the gate is ours, in the manner of the edge gates of Marcheggiani & Titov (EMNLP
    2017, from memory), here read from the edge attributes rather than the node state:

    .. math::
        h_i' = \sum_{r \in \mathcal{R}} \sum_{j \in \mathcal{N}_i^r}
               \frac{1}{c_{i,r}}\, g_{ji}\, W_r h_j + W_0 h_i + b, \qquad
        g_{ji} = \sigma\left(w_r^\top a_{ji} + b_r\right), \qquad c_{i,r} = |\mathcal{N}_i^r|

    with :math:`a_{ji}` the ``edge_dim`` continuous attributes of the edge j → i and
    :math:`w_r, b_r` one gate per relation r, so a far or misaligned neighbour can be turned down
    while the normaliser still counts it. ``edge_dim = 0`` leaves :math:`g_{ji} = \sigma(b_r)`, a
    learned constant per relation. ``num_bases``, ``aggr`` (``"add"``: :math:`c_{i,r} = 1`),
    ``root_weight`` and ``bias`` are the relational layer's.
    """

    def __init__(self, in_dim: int, out_dim: int, num_relations: int, num_bases: int | None = None,
                 aggr: str = "mean", root_weight: bool = True, bias: bool = True,
                 edge_dim: int = 0) -> None:
        super().__init__(in_dim, out_dim, num_relations, num_bases=num_bases, aggr=aggr,
                         root_weight=root_weight, bias=bias)
        self.edge_dim = edge_dim
        self.gate_weight = None   # w_r: one row per relation; none without attributes
        if edge_dim:
            bound = 1.0 / math.sqrt(edge_dim)                   # torch.nn.Linear's default range
            self.gate_weight = torch.nn.Parameter(
                torch.empty(num_relations, edge_dim).uniform_(-bound, bound))
        self.gate_bias = torch.nn.Parameter(torch.zeros(num_relations))

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None = None) -> Tensor:
        where = "gated_relational layer"
        check_graph_inputs(where, x, edge_index, edge_type, self.in_dim, self.num_relations)
        check_edge_attr(where, edge_attr, edge_index.shape[1], self.edge_dim)
        logits = self.gate_bias.index_select(0, edge_type)
        if edge_attr is not None:
            logits = logits + (edge_attr * self.gate_weight.index_select(0, edge_type)).sum(dim=1)
        return self.propagate(x, edge_index, edge_type, torch.sigmoid(logits))
