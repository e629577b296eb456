"""Character CNN word encoder, trained end to end with the graph model (Kim, EMNLP 2014 style).

For a word with character ids c_1..c_m (m real characters, then padding) and each kernel size k:

    e_t   = E[c_t]                          (E row 0 is the fixed zero padding vector)
    h_t^k = ReLU(b^k + sum_{j=0}^{k-1} W_j^k e_{t+j})   for t = 1..m, e_t = 0 beyond the word
    p^k   = max_{t=1..m} h_t^k              (masked max-pool over real start positions)
    out   = Linear(Dropout([p^{k_1}; ...; p^{k_K}]))

Windows start only on real characters and may run into the zero padding, so the output does not
depend on how much padding follows the word. A word with no characters pools to zeros.

Computed by distinct windows: ``h_t^k`` depends only on the window (c_t..c_{t+k-1}), so each
distinct window of a batch is convolved once, by one product with every kernel laid side by side
(zero taps past a kernel's width); each word takes the max over its windows (a padding position
reads a row of zeros) and the ReLU after it (ReLU is monotone: max_t ReLU(a_t) = ReLU(max_t a_t)).
Pages repeat their words and words their windows ("Date", ":", "mg/kg", "0000"): the same output
and gradients for a fraction of the work of a convolution over every padded position.
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
        distinct, rows = _distinct_rows(ids.numpy())
        pooled = self._pool(torch.from_numpy(distinct)).index_select(
            0, torch.from_numpy(rows))                          # dropout stays per occurrence
        return self.project(self.dropout(pooled))

    def _pool(self, ids: torch.Tensor) -> torch.Tensor:
        """(n, L) ids -> (n, kernels x channels) max-pooled ReLU activations."""
        width = max(self.kernel_sizes)
        windows, rows = _distinct_windows(ids, width)
        taps = torch.cat([F.pad(conv.weight, (0, width - conv.weight.shape[2]))
                          for conv in self.convs])                      # (K*C, D, width)
        taps = taps.transpose(1, 2).reshape(taps.shape[0], -1)          # (K*C, width*D)
        bias = torch.cat([conv.bias for conv in self.convs])
        activations = torch.addmm(bias, self.embedding(windows).flatten(1), taps.t())
        table = torch.cat([activations, activations.new_zeros(1, activations.shape[1])])
        return torch.relu(_MaxOverRows.apply(table, rows))


class _MaxOverRows(torch.autograd.Function):
    """out[i, c] = max_t table[rows[t, i], c]. The gradient goes once to the row at the first
    position that attains the max (a max of one value read twice has slope 1, not 2); the
    forward keeps no argmax (the backward finds it), so prediction pays for the values alone."""

    @staticmethod
    def forward(ctx, table: torch.Tensor, rows: torch.Tensor) -> torch.Tensor:
        gathered = table.index_select(0, rows.flatten()).view(*rows.shape, table.shape[1])
        values = gathered.amax(dim=0)
        ctx.save_for_backward(gathered, values, rows)
        ctx.table_rows = table.shape[0]
        return values

    @staticmethod
    def backward(ctx, grad: torch.Tensor) -> tuple[torch.Tensor, None]:
        gathered, values, rows = ctx.saved_tensors
        # the first position t that attains the max: the largest of (L - t) over the hits
        small = torch.uint8 if len(rows) < 256 else torch.int32
        countdown = torch.arange(len(rows), 0, -1, dtype=small).view(-1, 1, 1)
        first = len(rows) - ((gathered == values) * countdown).amax(dim=0).long()   # (n, C)
        winner = rows.t().gather(1, first)                              # table row of each max
        return grad.new_zeros(ctx.table_rows, grad.shape[1]).scatter_add_(0, winner, grad), None


def _distinct_windows(ids: torch.Tensor, width: int) -> tuple[torch.Tensor, torch.Tensor]:
    """The distinct ``width``-character windows that start on a real character (padding ids
    past the word's end), and ``rows`` (L, n): the window of each position among them, or the
    extra last row for a padding position."""
    n, length = ids.shape
    block = ids.numpy()
    real = block != PAD_ID
    small = np.int16 if block.max(initial=0) < 2**15 else np.int64    # shorter keys to sort
    padded = np.pad(block.astype(small), ((0, 0), (0, width - 1)))
    windows = np.lib.stride_tricks.sliding_window_view(padded, width, axis=1)[real]
    distinct, inverse = _distinct_rows(windows)
    rows = np.full((length, n), len(distinct), dtype=np.int64)
    rows.T[real] = inverse
    return torch.from_numpy(distinct.astype(np.int64)), torch.from_numpy(rows)


def _distinct_rows(block: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct rows of ``block`` in the order of their bytes, and each row's index among
    them. NumPy compares a row as one block of bytes; ``torch.unique(dim=0)`` compares element
    by element and is ~10x slower here. Byte columns that are zero in every row (the high bytes
    of small ids) are dropped first: they change no comparison; a key of at most 8 bytes is then
    compared as one big-endian integer, the same order as its bytes."""
    block = np.ascontiguousarray(block)
    raw = block.view(np.uint8).reshape(len(block), block.dtype.itemsize * block.shape[1])
    raw = raw[:, raw.any(axis=0)]
    if raw.shape[1] <= 8:
        wide = np.zeros((len(raw), 8), dtype=np.uint8)
        wide[:, :raw.shape[1]] = raw
        keys = wide.view(">u8").ravel().astype(np.uint64)
    else:
        keys = np.ascontiguousarray(raw).view(np.dtype((np.void, raw.shape[1]))).ravel()
    _, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
    return block[first], inverse.ravel()
