"""Character-level inputs: fixed-vocabulary ids for the char CNN and hashed n-grams for baselines.

The vocabulary is fixed (not learned from data) so ids mean the same thing in every run, split
and checkpoint. Id 0 is padding, id 1 any character outside the vocabulary, then in order:

* printable ASCII, U+0020 space to U+007E tilde (95 characters);
* the printable Latin-1 supplement, U+00A0 to U+00FF (96 characters), which holds the
  micro sign, degree, plus-minus, superscripts, middle dot, multiplication sign and accents;
* a short list of symbols met on reports and forms: Greek mu (often typed for micro), dashes,
  curly quotes, bullet, ellipsis, euro, per-mille, comparison signs and ballot boxes.

Text is not normalised before lookup, so the micro sign and Greek mu keep separate ids.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from sklearn.feature_extraction.text import HashingVectorizer

PAD_ID = 0
UNKNOWN_ID = 1
_EXTRA_SYMBOLS = "μΩ–—‘’‚“”„•…€‰′″≤≥≈≠−√∞™☐☑☒✓✔✗"
CHAR_VOCAB: str = ("".join(chr(c) for c in range(0x20, 0x7F))
                   + "".join(chr(c) for c in range(0xA0, 0x100))
                   + _EXTRA_SYMBOLS)
CHAR_VOCAB_SIZE: int = 2 + len(CHAR_VOCAB)
_CHAR_TO_ID: dict[str, int] = {ch: index + 2 for index, ch in enumerate(CHAR_VOCAB)}
assert len(_CHAR_TO_ID) == len(CHAR_VOCAB), "character vocabulary holds a duplicate"
# id of every code point up to the highest in the vocabulary, plus one slot for all above it
_ID_OF_CODE_POINT = np.full(max(map(ord, CHAR_VOCAB)) + 2, UNKNOWN_ID, dtype=np.int64)
_ID_OF_CODE_POINT[0] = PAD_ID
_ID_OF_CODE_POINT[[ord(ch) for ch in CHAR_VOCAB]] = [_CHAR_TO_ID[ch] for ch in CHAR_VOCAB]


def char_ids(texts: Sequence[str], max_chars: int = 16) -> np.ndarray:
    """Map each text to its first ``max_chars`` character ids, right-padded with 0.

    Returns an (n, max_chars) int64 array. An empty text gives an all-padding row, which the
    char CNN pools to zeros.
    """
    if max_chars < 1:
        raise ValueError(f"char_ids: max_chars must be at least 1, got {max_chars}")
    texts = list(texts)
    for row, text in enumerate(texts):
        if not isinstance(text, str):
            raise TypeError(f"char_ids: text {row} is {type(text).__name__}, expected str")
    if not texts:
        return np.zeros((0, max_chars), dtype=np.int64)
    # NumPy's fixed-width strings cut each text at max_chars and pad it with code point 0,
    # so one table lookup maps every position; a real U+0000 in a text is redone by hand
    points = np.array(texts, dtype=f"<U{max_chars}").view(np.uint32).reshape(len(texts),
                                                                             max_chars)
    ids = _ID_OF_CODE_POINT[np.minimum(points, len(_ID_OF_CODE_POINT) - 1)]
    for row in (row for row, text in enumerate(texts) if "\0" in text):
        known = [_CHAR_TO_ID.get(ch, UNKNOWN_ID) for ch in texts[row][:max_chars]]
        ids[row] = known + [PAD_ID] * (max_chars - len(known))
    return ids


def char_ngram_hashes(texts: Sequence[str], n_features: int = 256,
                      ngram_range: tuple[int, int] = (1, 3)) -> np.ndarray:
    """Hashed, L2-normalised character n-gram counts: the random-forest stand-in for the char CNN.

    Uses scikit-learn's HashingVectorizer (char_wb analyser, n-grams padded with a space at word
    edges, non-negative counts); stateless, so nothing is fitted and train/test cannot leak.
    An empty text gives a zero row.
    """
    if n_features < 1:
        raise ValueError(f"char_ngram_hashes: n_features must be at least 1, got {n_features}")
    low, high = ngram_range
    if not 1 <= low <= high:
        raise ValueError(f"char_ngram_hashes: ngram_range must satisfy 1 <= low <= high, "
                         f"got {ngram_range}")
    if len(texts) == 0:
        return np.zeros((0, n_features), dtype=np.float32)
    vectorizer = HashingVectorizer(analyzer="char_wb", ngram_range=(low, high),
                                   n_features=n_features, alternate_sign=False, norm="l2")
    return vectorizer.transform(list(texts)).toarray().astype(np.float32)
