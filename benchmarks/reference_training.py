"""The model as it was computed before its sparse product, kept as the training benchmarks' reference.

:class:`ReferenceRelationalLayer` runs torch-geometric's ``RGCNConv`` on its loop over relations
(one masked gather, mean and product per relation); :class:`ReferenceCharCNN` encodes every word
occurrence, repeated or not. :func:`reference_copy` swaps them into a copy of a model with the
same weights, so the two compute the same function and the bench times only how.
"""

from __future__ import annotations

import copy

import torch
import torch_geometric.backend
from torch import Tensor

from dochar.features.char_cnn import CharCNNEncoder
from dochar.models.layers.relational import RelationalLayer


class ReferenceRelationalLayer(RelationalLayer):
    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None = None) -> Tensor:
        # RGCNConv's fused segment-matmul path (with pyg-lib) means over all relations at once,
        # which is not eq. 2; the loop over relations is what the layer ran.
        saved = torch_geometric.backend.use_segment_matmul
        torch_geometric.backend.use_segment_matmul = False
        try:
            return self.conv(x, edge_index, edge_type)
        finally:
            torch_geometric.backend.use_segment_matmul = saved


class ReferenceCharCNN(CharCNNEncoder):
    def forward(self, ids: Tensor) -> Tensor:
        return self.project(self.dropout(self._pool(ids)))


def reference_copy(model: torch.nn.Module) -> torch.nn.Module:
    """A deep copy of ``model`` whose relational layers and char CNN compute the old way."""
    reference = copy.deepcopy(model)
    for module in reference.modules():
        if type(module) is RelationalLayer:
            module.__class__ = ReferenceRelationalLayer
        elif type(module) is CharCNNEncoder:
            module.__class__ = ReferenceCharCNN
    return reference
