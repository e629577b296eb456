"""Character CNN word encoder, trained end to end with the graph model (Kim, EMNLP 2014 style).

For a word with character ids c_1..c_m (m real characters, then padding) and each kernel size k:

    e_t   = E[c_t]                          (E row 0 is the fixed zero padding vector)
    h_t^k = ReLU(b^k + sum_{j=0}^{k-1} W_j^k e_{t+j})   for t = 1..m, e_t = 0 beyond the word
    p^k   = max_{t=1..m} h_t^k              (masked max-pool over real start positions)
    out   = Linear(Dropout([p^{k_1}; ...; p^{k_K}]))

Windows start only on real characters and may run into the zero padding, so the output does not
depend on how much padding follows the word. A word with no characters pools to zeros.
Pages repeat their words ("Date", ":", "mg/kg"), so each distinct id row is encoded once and
scattered back: the same output and gradients for less work.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import torch
import torch.nn.functional as F
from torch import nn

from dochar.features.chars import CHAR_VOCAB_SIZE, PAD_ID
from dochar.features.options import FeatureOptionError


class CharCNNEncoder(nn.Module):
    """Word vector from its characters: embedding, parallel 1-D convolutions, masked max-pool."""

    def __init__(self, vocab_size: int = CHAR_VOCAB_SIZE, embedding_dim: int = 16,
                 channels: int = 32, kernel_sizes: Sequence[int] = (2, 3, 4), out_dim: int = 32,
                 dropout: float = 0.0) -> None:
        super().__init__()
        if not kernel_sizes or any(int(k) < 1 for k in kernel_sizes):
            raise FeatureOptionError(f"config key features.char_cnn.kernel_sizes="
                                     f"{list(kernel_sizes)}: give one or more sizes, each at "
                                     f"least 1")
        for name, value in (("vocab_size", vocab_size), ("embedding_dim", embedding_dim),
                            ("channels", channels), ("out_dim", out_dim)):
            if int(value) < 1:
                raise FeatureOptionError(f"config key features.char_cnn.{name}={value}: must be "
                                         f"at least 1")
        if not 0.0 <= dropout < 1.0:
            raise FeatureOptionError(f"char CNN dropout={dropout}: must be in [0, 1)")
        self.vocab_size = int(vocab_size)
        self.kernel_sizes = tuple(int(k) for k in kernel_sizes)
        self.embedding = nn.Embedding(self.vocab_size, embedding_dim, padding_idx=PAD_ID)
        self.convs = nn.ModuleList(nn.Conv1d(embedding_dim, channels, k)
                                   for k in self.kernel_sizes)
        self.dropout = nn.Dropout(dropout)
        self.project = nn.Linear(channels * len(self.kernel_sizes), out_dim)

    def forward(self, ids: torch.Tensor) -> torch.Tensor:
        """Encode (n, L) character ids into (n, out_dim) word vectors."""
        if ids.dim() != 2 or ids.shape[1] < 1:
            raise ValueError(f"CharCNNEncoder: expected ids of shape (n, L) with L >= 1, "
                             f"got {tuple(ids.shape)}")
        if ids.numel() and (int(ids.min()) < 0 or int(ids.max()) >= self.vocab_size):
            raise ValueError(f"CharCNNEncoder: ids must lie in [0, {self.vocab_size}), "
                             f"got range [{int(ids.min())}, {int(ids.max())}]")
        distinct, rows = _distinct_rows(ids)
        pooled = self._pool(distinct).index_select(0, rows)   # dropout stays per occurrence
        return self.project(self.dropout(pooled))

    def _pool(self, ids: torch.Tensor) -> torch.Tensor:
        mask = (ids != PAD_ID).unsqueeze(1)                 # (n, 1, L): real start positions
        embedded = self.embedding(ids).transpose(1, 2)      # (n, D, L)
        pooled = []
        for kernel, conv in zip(self.kernel_sizes, self.convs):
            # right-pad by k-1 zeros so a window exists at every start position 0..L-1
            activations = F.relu(conv(F.pad(embedded, (0, kernel - 1))))   # (n, C, L)
            # after ReLU every value is >= 0, so zeroing masked positions leaves the max over
            # real positions unchanged and gives 0 for a word with no characters
            pooled.append((activations * mask).amax(dim=2))
        return torch.cat(pooled, dim=1)


def _distinct_rows(ids: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
    """The distinct rows of ``ids`` and each row's index among them. NumPy compares a row as one
    block of bytes; ``torch.unique(dim=0)`` compares element by element and is ~10x slower here."""
    block = np.ascontiguousarray(ids.numpy())
    keys = block.view(np.dtype((np.void, block.dtype.itemsize * block.shape[1]))).ravel()
    _, first, rows = np.unique(keys, return_index=True, return_inverse=True)
    return ids[torch.from_numpy(first)], torch.from_numpy(rows.ravel())
