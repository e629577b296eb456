"""Relational graph convolution (R-GCN): one weight matrix per edge type."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

import torch
import torch_geometric.backend
from torch import Tensor
from torch_geometric.nn import RGCNConv

from dochar.models.layers.validation import check_graph_inputs

AGGREGATIONS = ("mean", "add")


class RelationalLayer(torch.nn.Module):
    r"""R-GCN layer, the propagation rule of Schlichtkrull et al. 2018 (ESWC), eq. 2:

    .. math::
        h_i' = \sum_{r \in \mathcal{R}} \sum_{j \in \mathcal{N}_i^r}
               \frac{1}{c_{i,r}} W_r h_j + W_0 h_i + b,
        \qquad c_{i,r} = |\mathcal{N}_i^r|

    without the nonlinearity σ, which the surrounding block applies after normalisation.
    ``aggr="add"`` sets :math:`c_{i,r} = 1` (a 3×3 convolution is this rule on the pixel grid);
    ``root_weight=False`` drops :math:`W_0 h_i` (use when the self-loop is itself a relation).
    ``num_bases=B`` shares parameters across relations by basis decomposition, eq. 3:
    :math:`W_r = \sum_b a_{rb} V_b`; ``None`` keeps one full matrix per relation.
    Edges run from ``edge_index[0]`` (source j) to ``edge_index[1]`` (target i).
    """

    def __init__(self, in_dim: int, out_dim: int, num_relations: int, num_bases: int | None = None,
                 aggr: str = "mean", root_weight: bool = True, bias: bool = True) -> None:
        super().__init__()
        if aggr not in AGGREGATIONS:
            raise ValueError(f"relational layer: aggr must be one of {AGGREGATIONS}, got {aggr!r}")
        if num_bases is not None and not 1 <= num_bases:
            raise ValueError(f"relational layer: num_bases must be None or >= 1, got {num_bases}")
        self.in_dim, self.out_dim, self.num_relations = in_dim, out_dim, num_relations
        self.conv = RGCNConv(in_dim, out_dim, num_relations, num_bases=num_bases, aggr=aggr,
                             root_weight=root_weight, bias=bias)

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor) -> Tensor:
        check_graph_inputs("relational layer", x, edge_index, edge_type, self.in_dim,
                           self.num_relations)
        with _per_relation_normalisation():
            return self.conv(x, edge_index, edge_type)


@contextmanager
def _per_relation_normalisation() -> Iterator[None]:
    """Keep RGCNConv on its loop over relations.

    Its fused segment-matmul path (taken when pyg-lib is installed) averages over all neighbours
    at once, i.e. c_{i,r} = |N_i| instead of |N_i^r|, which is not eq. 2.
    """
    saved = torch_geometric.backend.use_segment_matmul
    torch_geometric.backend.use_segment_matmul = False
    try:
        yield
    finally:
        torch_geometric.backend.use_segment_matmul = saved
