"""Relational graph convolution (R-GCN): one weight matrix per edge type."""

from __future__ import annotations

import warnings

import torch
from torch import Tensor
from torch_geometric.nn import RGCNConv

from dochar.models.layers.validation import LayerOptionError, check_graph_inputs

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

    The rule is computed aggregate-first: one sparse (CSR) product gives the per-relation neighbour
    means :math:`m_{i,r}`, which are laid side by side and multiplied once by
    :math:`[W_1; \dots; W_R]`, plus :math:`h_i W_0`. Same arithmetic as a loop over relations,
    one large product instead of R small ones and no per-relation masking. ``self.conv``
    (torch-geometric's ``RGCNConv``) holds the parameters, so initialisation and saved weights
    are its.
    """

    def __init__(self, in_dim: int, out_dim: int, num_relations: int, num_bases: int | None = None,
                 aggr: str = "mean", root_weight: bool = True, bias: bool = True) -> None:
        super().__init__()
        if aggr not in AGGREGATIONS:
            raise LayerOptionError(f"config key model.layer_options.aggr={aggr!r}: relational "
                                   f"layer: aggr must be one of {AGGREGATIONS}")
        if num_bases is not None and not 1 <= num_bases:
            raise LayerOptionError(f"config key model.layer_options.num_bases={num_bases!r}: "
                                   f"relational layer: num_bases must be null or >= 1")
        self.in_dim, self.out_dim, self.num_relations = in_dim, out_dim, num_relations
        self.aggr = aggr
        self.conv = RGCNConv(in_dim, out_dim, num_relations, num_bases=num_bases, aggr=aggr,
                             root_weight=root_weight, bias=bias)

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor) -> Tensor:
        check_graph_inputs("relational layer", x, edge_index, edge_type, self.in_dim,
                           self.num_relations)
        n, relations = x.shape[0], self.num_relations
        slot = edge_index[1] * relations + edge_type         # (target i, relation r) of each edge
        order = torch.argsort(slot, stable=True)
        slot = slot.index_select(0, order)
        counts = torch.bincount(slot, minlength=n * relations)
        rows = torch.zeros(n * relations + 1, dtype=torch.long)
        torch.cumsum(counts, 0, out=rows[1:])
        norm = torch.ones_like(slot, dtype=x.dtype)
        if self.aggr == "mean":
            norm = norm / counts.index_select(0, slot).to(x.dtype)
        with warnings.catch_warnings():   # torch's one-time "CSR support is in beta" notice
            warnings.filterwarnings("ignore", "Sparse CSR tensor support", UserWarning)
            adjacency = torch.sparse_csr_tensor(  # indices checked above: no second check
                rows, edge_index[0].index_select(0, order), norm, (n * relations, n),
                check_invariants=False)
        gathered = adjacency @ x                              # row (i, r): m_{i,r}
        weights = self._relation_weights().reshape(relations * self.in_dim, self.out_dim)
        out = gathered.view(n, relations * self.in_dim) @ weights
        if self.conv.root is not None:
            out = out + x @ self.conv.root
        return out + self.conv.bias if self.conv.bias is not None else out

    def _relation_weights(self) -> Tensor:
        """W_r for every relation, (R, in, out); eq. 3 when bases are shared."""
        if self.conv.num_bases is None:
            return self.conv.weight
        return torch.einsum("rb,bio->rio", self.conv.comp, self.conv.weight)
