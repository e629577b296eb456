"""The model as it was computed before its sparse product, kept as the training benchmarks' reference.

:class:`ReferenceRelationalLayer` runs torch-geometric's ``RGCNConv`` on its loop over relations
(one masked gather, mean and product per relation); :class:`ReferenceCharCNN` encodes every word
occurrence, repeated or not, by one convolution per kernel over every padded position.
:func:`reference_copy` swaps them into a copy of a model with the same weights, so the two
compute the same function and the bench times only how.
"""

from __future__ import annotations

import copy

import torch
import torch.nn.functional as F
import torch_geometric.backend
from torch import Tensor

from dochar.features.char_cnn import CharCNNEncoder
from dochar.features.chars import PAD_ID
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
        return self.project(self.dropout(self._convolved(ids)))

    def _convolved(self, ids: Tensor) -> Tensor:
        """One convolution per kernel over every position of every word, masked max-pool."""
        mask = (ids != PAD_ID).unsqueeze(1)                 # (n, 1, L): real start positions
        embedded = self.embedding(ids).transpose(1, 2)      # (n, D, L)
        pooled = []
        for kernel, conv in zip(self.kernel_sizes, self.convs):
            activations = F.relu(conv(F.pad(embedded, (0, kernel - 1))))   # (n, C, L)
            pooled.append((activations * mask).amax(dim=2))
        return torch.cat(pooled, dim=1)


def reference_copy(model: torch.nn.Module) -> torch.nn.Module:
    """A deep copy of ``model`` whose relational layers and char CNN compute the old way."""
    reference = copy.deepcopy(model)
    for module in reference.modules():
        if type(module) is RelationalLayer:
            module.__class__ = ReferenceRelationalLayer
        elif type(module) is CharCNNEncoder:
            module.__class__ = ReferenceCharCNN
    return reference
