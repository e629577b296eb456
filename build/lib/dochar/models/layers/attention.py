"""GATv2 attention whose scores also see the edge type, through a learned embedding per type."""

from __future__ import annotations

import torch
from torch import Tensor
from torch_geometric.nn import GATv2Conv

from dochar.models.layers.validation import LayerOptionError, check_graph_inputs

SELF_LOOP_MODES = ("learned", "mean", "none")


class AttentionLayer(torch.nn.Module):
    r"""GATv2 (Brody et al., ICLR 2022) as defined by torch_geometric's ``GATv2Conv``:

    .. math::
        \alpha_{ij} = \operatorname{softmax}_{j \in \mathcal{N}(i)}
            \mathbf{a}^\top \mathrm{LeakyReLU}_{0.2}\left(
            \Theta_s x_i + \Theta_t x_j + \Theta_e e_{ij}\right), \qquad
        x_i' = \sum_{j \in \mathcal{N}(i)} \alpha_{ij}\, \Theta_t x_j + b

    per head, with :math:`e_{ij}` = ``nn.Embedding(edge_type)`` of size ``type_dim``, so a word can
    weigh its right neighbour differently from the one above it. Continuous edge features
    (``edge_attr``) are ignored here; ``edge_attention`` is the GATv2 layer that reads them.
    ``heads`` heads are concatenated (each ``out_dim // heads`` wide) or, with ``concat=False``,
    averaged (each ``out_dim`` wide).

    Self loops (a node attending to itself) carry an edge attribute too; ``self_loops`` picks it:

    * ``"learned"`` (default): one extra embedding row, index ``num_relations``, that belongs to
      self loops alone; a loop is added for every node, next to any self-loop edges already in the
      graph (those keep their own type).
    * ``"mean"``: torch_geometric's ``fill_value="mean"``: existing self loops are removed and each
      node's loop gets the mean embedding of its incoming edges (zeros for a node without any).
    * ``"none"``: no loops; a node without incoming edges outputs only the bias.
    """

    def __init__(self, in_dim: int, out_dim: int, num_relations: int, heads: int = 1,
                 concat: bool = True, type_dim: int = 16, self_loops: str = "learned",
                 attention_dropout: float = 0.0, edge_dim: int = 0) -> None:
        super().__init__()
        if self_loops not in SELF_LOOP_MODES:
            raise LayerOptionError(f"config key model.layer_options.self_loops={self_loops!r}: "
                                   f"attention layer: self_loops must be one of "
                                   f"{SELF_LOOP_MODES}")
        if heads < 1:
            raise LayerOptionError(f"config key model.layer_options.heads={heads!r}: attention "
                                   f"layer: heads must be >= 1")
        if concat and out_dim % heads:
            raise LayerOptionError(f"config key model.layer_options.heads={heads!r}: attention "
                                   f"layer: out_dim {out_dim} (model.hidden_dim) is not "
                                   f"divisible by heads {heads} (concatenated heads split "
                                   f"out_dim evenly)")
        self.in_dim, self.out_dim, self.num_relations = in_dim, out_dim, num_relations
        self.self_loops = self_loops
        extra = 1 if self_loops == "learned" else 0
        self.edge_embedding = torch.nn.Embedding(num_relations + extra, type_dim)
        self.conv = GATv2Conv(in_dim, out_dim // heads if concat else out_dim, heads=heads,
                              concat=concat, dropout=attention_dropout,
                              add_self_loops=self_loops == "mean", edge_dim=type_dim,
                              fill_value="mean")

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None = None) -> Tensor:
        check_graph_inputs("attention layer", x, edge_index, edge_type, self.in_dim,
                           self.num_relations)
        if self.self_loops == "learned":
            nodes = torch.arange(x.shape[0], device=edge_index.device)
            edge_index = torch.cat([edge_index, nodes.expand(2, -1)], dim=1)
            edge_type = torch.cat([edge_type, torch.full_like(nodes, self.num_relations)])
        return self.conv(x, edge_index, self.edge_embedding(edge_type))
