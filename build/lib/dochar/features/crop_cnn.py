"""Crop CNN node encoder, trained end to end with the graph model (the image twin of the char CNN).

Input: each node's crop of the page image, uint8 ink intensity (255 - grey) resized to
``CROP_SIZE`` (see :mod:`dochar.features.page_image`), scaled to [0, 1]. For one crop a:

    h_1 = MaxPool2(ReLU(Conv3x3(a)))            channels  c,  size H/2 x W/2
    h_2 = MaxPool2(ReLU(Conv3x3(h_1)))          channels 2c,  size H/4 x W/4
    p   = [mean over positions of h_2 ; max over positions of h_2]
    out = Linear(Dropout(p))

Convolutions are zero-padded ("same"), so a blank crop (a page without image) gives ReLU of
the biases only: the same vector for every such node, which the model can learn to ignore.
"""

from __future__ import annotations

import torch
from torch import nn

from dochar.features.page_image import CROP_SIZE


class CropCNNEncoder(nn.Module):
    """Node vector from its page crop: two conv-pool stages, mean and max pooling, a projection."""

    def __init__(self, channels: int = 8, out_dim: int = 16, dropout: float = 0.0) -> None:
        super().__init__()
        for name, value in (("channels", channels), ("out_dim", out_dim)):
            if int(value) < 1:
                raise ValueError(f"CropCNNEncoder: {name} must be at least 1, got {value}")
        if not 0.0 <= dropout < 1.0:
            raise ValueError(f"CropCNNEncoder: dropout must be in [0, 1), got {dropout}")
        self.stages = nn.Sequential(
            nn.Conv2d(1, channels, 3, padding=1), nn.ReLU(), nn.MaxPool2d(2),
            nn.Conv2d(channels, 2 * channels, 3, padding=1), nn.ReLU(), nn.MaxPool2d(2),
        )
        self.dropout = nn.Dropout(dropout)
        self.project = nn.Linear(4 * channels, out_dim)

    def forward(self, crops: torch.Tensor) -> torch.Tensor:
        """Encode (n, H, W) uint8 crops into (n, out_dim) node vectors."""
        if crops.dim() != 3 or tuple(crops.shape[1:]) != CROP_SIZE:
            raise ValueError(f"CropCNNEncoder: expected crops of shape (n, {CROP_SIZE[0]}, "
                             f"{CROP_SIZE[1]}), got {tuple(crops.shape)}")
        features = self.stages(crops.unsqueeze(1).float() / 255.0).flatten(2)
        pooled = torch.cat([features.mean(dim=2), features.amax(dim=2)], dim=1)
        return self.project(self.dropout(pooled))
