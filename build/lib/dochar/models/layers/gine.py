"""Edge-conditioned convolution: GIN whose messages add a projection of the edge's attributes."""

from __future__ import annotations

import torch
from torch import Tensor
from torch_geometric.nn import GINEConv

from dochar.models.layers.edge_inputs import edge_vectors
from dochar.models.layers.validation import check_edge_attr, check_graph_inputs


class GINELayer(torch.nn.Module):
    r"""GINE, the edge-aware GIN of Hu et al., "Strategies for Pre-training Graph Neural
    Networks" (ICLR 2020, appendix A, from memory), as torch_geometric's ``GINEConv`` defines it:

    .. math::
        x_i' = h_\Theta\Big((1 + \epsilon)\, x_i
               + \sum_{j \in \mathcal{N}(i)} \mathrm{ReLU}(x_j + \Theta_e e_{ji} + b_e)\Big),
        \qquad h_\Theta(z) = W_2\, \mathrm{ReLU}(W_1 z + b_1) + b_2

    with the edge vector :math:`e_{ji} = [\mathrm{onehot}(r_{ji}) \,\|\, a_{ji}]` (the relation
    one-hot beside the ``edge_dim`` continuous attributes; ``edge_dim = 0`` keeps the relation
    only), a sum over the edges entering i, and :math:`\epsilon` learned (``learn_eps``, GIN-ε
    of Xu et al., ICLR 2019) or fixed at 0.
    """

    def __init__(self, in_dim: int, out_dim: int, num_relations: int, learn_eps: bool = True,
                 edge_dim: int = 0) -> None:
        super().__init__()
        self.in_dim, self.out_dim, self.num_relations = in_dim, out_dim, num_relations
        self.edge_dim = edge_dim
        mlp = torch.nn.Sequential(torch.nn.Linear(in_dim, out_dim), torch.nn.ReLU(),
                                  torch.nn.Linear(out_dim, out_dim))
        self.conv = GINEConv(mlp, train_eps=learn_eps, edge_dim=num_relations + edge_dim)

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None = None) -> Tensor:
        where = "gine layer"
        check_graph_inputs(where, x, edge_index, edge_type, self.in_dim, self.num_relations)
        check_edge_attr(where, edge_attr, edge_index.shape[1], self.edge_dim)
        return self.conv(x, edge_index, edge_vectors(edge_type, edge_attr, self.num_relations,
                                                     x.dtype))
