"""The GNN stack: input projection, residual message-passing blocks, MLP head."""

from __future__ import annotations

import torch
from torch import Tensor

from dochar.models.dropout import Dropout
from dochar.models.layers import LayerOptionError, make_layer

NORMS = ("batch", "layer", "none")


class _Block(torch.nn.Module):
    """layer → norm → ReLU → dropout (→ + input): σ sits here, so every layer stays a pure rule."""

    def __init__(self, layer: torch.nn.Module, norm: torch.nn.Module, dropout: float,
                 residual: bool) -> None:
        super().__init__()
        self.layer, self.norm, self.residual = layer, norm, residual
        self.dropout = Dropout(dropout)

    def forward(self, h: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None) -> Tensor:
        out = self.dropout(torch.relu(self.norm(self.layer(h, edge_index, edge_type, edge_attr))))
        return h + out if self.residual else out


class GNNStack(torch.nn.Module):
    """Per-word classifier over a typed word graph; returns logits, callers apply the softmax.

    ``[x ‖ char_encoder(chars) ‖ crop_encoder(crops)] → Linear → depth × block →
    Linear-ReLU-dropout-Linear``; each encoder is optional and trained with the stack.
    The input projection brings every feature set to ``hidden_dim`` so residual additions line up
    from the first block on, and the layer type is the only thing that changes between ablations.
    ``edge_dim`` continuous edge attributes per edge (0: none) are batch-normalised once (their
    scales differ by orders of magnitude: page fractions, line heights, flags) and reach every
    block as ``edge_attr``; layers that do not read them ignore them.
    """

    def __init__(self, in_dim: int, num_classes: int, num_relations: int, layer: str = "relational",
                 hidden_dim: int = 64, depth: int = 2, dropout: float = 0.2, norm: str = "batch",
                 residual: bool = True, char_encoder: torch.nn.Module | None = None,
                 char_dim: int = 0, layer_options: dict | None = None, edge_dim: int = 0,
                 crop_encoder: torch.nn.Module | None = None, crop_dim: int = 0) -> None:
        super().__init__()
        _check_encoder("crop", crop_encoder, crop_dim)
        _check_arguments(in_dim, num_classes, num_relations, hidden_dim, depth, dropout, norm,
                         char_encoder, char_dim, crop_dim)
        if "edge_dim" in (layer_options or {}):
            raise ValueError("GNNStack: edge_dim is set by the graphs' edge attributes, not by "
                             "layer_options")
        self.in_dim, self.num_classes, self.char_dim = in_dim, num_classes, char_dim
        self.edge_dim = edge_dim
        self.edge_norm = torch.nn.BatchNorm1d(edge_dim) if edge_dim else None
        self.char_encoder = char_encoder
        self.crop_encoder, self.crop_dim = crop_encoder, crop_dim
        self.input_projection = torch.nn.Linear(in_dim + char_dim + crop_dim, hidden_dim)
        self.blocks = torch.nn.ModuleList(
            _Block(make_layer(layer, hidden_dim, hidden_dim, num_relations, edge_dim=edge_dim,
                              **(layer_options or {})),
                   _make_norm(norm, hidden_dim), dropout, residual)
            for _ in range(depth)
        )
        self.head = torch.nn.Sequential(
            torch.nn.Linear(hidden_dim, hidden_dim), torch.nn.ReLU(), Dropout(dropout),
            torch.nn.Linear(hidden_dim, num_classes),
        )

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                chars: Tensor | None = None, edge_attr: Tensor | None = None,
                crops: Tensor | None = None) -> Tensor:
        h = self.input_projection(self._node_inputs(x, chars, crops))
        if self.edge_norm is not None and edge_attr is not None and edge_attr.shape[0] > 0:
            edge_attr = self.edge_norm(edge_attr)
        for block in self.blocks:
            h = block(h, edge_index, edge_type, edge_attr)
        return self.head(h)

    @torch.no_grad()
    def predict_proba(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                      chars: Tensor | None = None, edge_attr: Tensor | None = None,
                      crops: Tensor | None = None) -> Tensor:
        """Class probabilities in eval mode (no dropout, running norm statistics)."""
        was_training = self.training
        self.eval()
        try:
            return torch.softmax(self(x, edge_index, edge_type, chars, edge_attr, crops), dim=1)
        finally:
            self.train(was_training)

    def _node_inputs(self, x: Tensor, chars: Tensor | None,
                     crops: Tensor | None = None) -> Tensor:
        if not isinstance(x, Tensor) or x.dim() != 2 or x.shape[1] != self.in_dim:
            shape = tuple(x.shape) if isinstance(x, Tensor) else type(x).__name__
            raise ValueError(f"GNNStack: x must have shape (nodes, {self.in_dim}), got {shape}")
        parts = [x]
        for name, encoder, values, dim in (("char", self.char_encoder, chars, self.char_dim),
                                           ("crop", self.crop_encoder, crops, self.crop_dim)):
            if encoder is None:
                if values is not None:
                    raise ValueError(f"GNNStack: {name}s were given but the model has no "
                                     f"{name}_encoder")
                continue
            if values is None:
                raise ValueError(f"GNNStack: the model has a {name}_encoder, so forward needs "
                                 f"{name}s")
            encoded = encoder(values)
            if encoded.shape != (x.shape[0], dim):
                raise ValueError(f"GNNStack: {name}_encoder returned shape "
                                 f"{tuple(encoded.shape)}, expected ({x.shape[0]}, {dim}) "
                                 f"(one row per node, {name}_dim)")
            parts.append(encoded)
        return torch.cat(parts, dim=1)


def count_parameters(model: torch.nn.Module) -> int:
    """Number of trainable scalars, the size figure reported next to each run."""
    return sum(p.numel() for p in model.parameters() if p.requires_grad)


def _make_norm(norm: str, dim: int) -> torch.nn.Module:
    if norm == "batch":
        return torch.nn.BatchNorm1d(dim)
    if norm == "layer":
        return torch.nn.LayerNorm(dim)
    return torch.nn.Identity()


def _check_arguments(in_dim: int, num_classes: int, num_relations: int, hidden_dim: int,
                     depth: int, dropout: float, norm: str, char_encoder: torch.nn.Module | None,
                     char_dim: int, crop_dim: int = 0) -> None:
    for name, value, low in (("in_dim", in_dim, 0), ("num_classes", num_classes, 1),
                             ("num_relations", num_relations, 1), ("char_dim", char_dim, 0)):
        if not isinstance(value, int) or isinstance(value, bool) or value < low:
            raise ValueError(f"GNNStack: {name} must be an int >= {low}, got {value!r}")
    for name, value in (("hidden_dim", hidden_dim), ("depth", depth)):
        if not isinstance(value, int) or isinstance(value, bool) or value < 1:
            raise LayerOptionError(f"config key model.{name}={value!r}: must be an int >= 1")
    if not 0.0 <= dropout < 1.0:
        raise LayerOptionError(f"config key model.dropout={dropout!r}: must lie in [0, 1)")
    if norm not in NORMS:
        raise LayerOptionError(f"config key model.norm={norm!r}: unknown norm; valid norms: "
                               f"{list(NORMS)}")
    if (char_encoder is None) != (char_dim == 0):
        raise ValueError("GNNStack: give char_encoder and char_dim > 0 together, or neither "
                         f"(got char_encoder={type(char_encoder).__name__}, char_dim={char_dim})")
    if in_dim + char_dim + crop_dim == 0:
        raise ValueError("GNNStack: no inputs (in_dim = 0 and no char_encoder or crop_encoder)")


def _check_encoder(name: str, encoder: torch.nn.Module | None, dim: int) -> None:
    if not isinstance(dim, int) or isinstance(dim, bool) or dim < 0:
        raise ValueError(f"GNNStack: {name}_dim must be an int >= 0, got {dim!r}")
    if (encoder is None) != (dim == 0):
        raise ValueError(f"GNNStack: give {name}_encoder and {name}_dim > 0 together, or "
                         f"neither (got {name}_encoder={type(encoder).__name__}, "
                         f"{name}_dim={dim})")
