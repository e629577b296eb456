"""Word features: geometry, text flags and lexicons as dense columns; characters for the char CNN;
optionally a pretrained text embedding (the ``embed`` extra); page-image crops and their
features.

``CharCNNEncoder`` and ``CropCNNEncoder`` are loaded on first use so baselines that never touch torch stay light.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from dochar.features.chars import (
    CHAR_VOCAB,
    CHAR_VOCAB_SIZE,
    char_ids,
    char_ngram_hashes,
)
from dochar.features.featurizer import (
    FEATURE_GROUPS,
    IMAGE_GROUPS,
    OPTIONAL_GROUPS,
    WordFeaturizer,
)
from dochar.features.geometry import GEOMETRY_NAMES
from dochar.features.lexicons import DEFAULT_LEXICONS
from dochar.features.text_flags import TEXT_FLAG_NAMES

if TYPE_CHECKING:
    from dochar.features.char_cnn import CharCNNEncoder
    from dochar.features.crop_cnn import CropCNNEncoder

__all__ = [
    "CHAR_VOCAB", "CHAR_VOCAB_SIZE", "DEFAULT_LEXICONS", "FEATURE_GROUPS", "GEOMETRY_NAMES",
    "IMAGE_GROUPS", "OPTIONAL_GROUPS",
    "TEXT_FLAG_NAMES", "CharCNNEncoder", "CropCNNEncoder", "WordFeaturizer", "char_ids",
    "char_ngram_hashes",
]


def __getattr__(name: str):
    if name == "CharCNNEncoder":
        from dochar.features.char_cnn import CharCNNEncoder

        return CharCNNEncoder
    if name == "CropCNNEncoder":
        from dochar.features.crop_cnn import CropCNNEncoder

        return CropCNNEncoder
    raise AttributeError(f"module 'dochar.features' has no attribute '{name}'")
