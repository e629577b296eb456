"""OCR-like damage applied to clean word placements, in a fixed order: merge, split,
character confusion, box jitter; then boxes are clipped to the page.

Merging two words writes their texts together without a space and keeps the label and
entity_id of the first (left) word; a split word keeps the label and entity_id of the original.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from data_synth.canvas import PAGE_HEIGHT, PAGE_WIDTH, Word

# Look-alike glyphs OCR engines swap (common practice; the usual O/0, l/1, S/5, rn/m pairs).
CONFUSIONS: dict[str, str] = {"O": "0", "0": "O", "l": "1", "1": "l", "I": "1", "S": "5",
                              "5": "S", "B": "8", "8": "B", "Z": "2", "2": "Z", "m": "rn",
                              "rn": "m"}


@dataclass(frozen=True)
class NoiseConfig:
    """Strength of each kind of damage; all zero means clean output.

    box_jitter: standard deviation, in points, of Gaussian noise on each box coordinate.
    split_rate: probability that a word of two or more characters becomes two boxes.
    merge_rate: probability that a word merges with the next word on the same line.
    char_confusion_rate: probability per character (or "rn" pair) of a look-alike swap.
    """

    box_jitter: float = 0.0
    split_rate: float = 0.0
    merge_rate: float = 0.0
    char_confusion_rate: float = 0.0

    def __post_init__(self) -> None:
        for spec in fields(self):
            value = getattr(self, spec.name)
            if not np.isfinite(value) or value < 0:
                raise ValueError(f"NoiseConfig.{spec.name} must be a finite number >= 0, "
                                 f"got {value!r}")
            if spec.name != "box_jitter" and value > 1:
                raise ValueError(f"NoiseConfig.{spec.name} is a probability, got {value!r}")

    @property
    def is_clean(self) -> bool:
        return not any(getattr(self, spec.name) for spec in fields(self))


def _same_line(left: Word, right: Word) -> bool:
    height = left.y1 - left.y0
    return (left.page == right.page and abs(left.y0 - right.y0) < 0.5 * height
            and 0 <= right.x0 - left.x1 <= 1.5 * height)


def _merge(words: list[Word], rate: float, rng: np.random.Generator) -> list[Word]:
    out: list[Word] = []
    index = 0
    while index < len(words):
        word = words[index]
        follower = words[index + 1] if index + 1 < len(words) else None
        if follower is not None and _same_line(word, follower) and rng.random() < rate:
            out.append(Word(word.page, word.text + follower.text, word.x0,
                            min(word.y0, follower.y0), follower.x1, max(word.y1, follower.y1),
                            word.label, word.entity))
            index += 2
        else:
            out.append(word)
            index += 1
    return out


def _split(words: list[Word], rate: float, rng: np.random.Generator) -> list[Word]:
    out: list[Word] = []
    for word in words:
        if len(word.text) >= 2 and rng.random() < rate:
            cut = int(rng.integers(1, len(word.text)))
            middle = word.x0 + (word.x1 - word.x0) * cut / len(word.text)
            out.append(Word(word.page, word.text[:cut], word.x0, word.y0, middle, word.y1,
                            word.label, word.entity))
            out.append(Word(word.page, word.text[cut:], middle, word.y0, word.x1, word.y1,
                            word.label, word.entity))
        else:
            out.append(word)
    return out


def confuse(text: str, rate: float, rng: np.random.Generator) -> str:
    """Swap look-alike characters left to right; a pair "rn" is tried before single letters."""
    out = []
    index = 0
    while index < len(text):
        pair = text[index:index + 2]
        if pair == "rn" and rng.random() < rate:
            out.append(CONFUSIONS[pair])
            index += 2
            continue
        char = text[index]
        out.append(CONFUSIONS[char] if char in CONFUSIONS and rng.random() < rate else char)
        index += 1
    return "".join(out)


def _jitter(words: list[Word], std: float, rng: np.random.Generator) -> None:
    noise = rng.normal(0.0, std, size=(len(words), 4))
    for word, (dx0, dy0, dx1, dy1) in zip(words, noise):
        x0, x1 = sorted((word.x0 + dx0, word.x1 + dx1))
        y0, y1 = sorted((word.y0 + dy0, word.y1 + dy1))
        word.x0, word.y0, word.x1, word.y1 = x0, y0, x1, y1


def clip(words: list[Word]) -> None:
    for word in words:
        word.x0 = min(max(word.x0, 0.0), PAGE_WIDTH)
        word.x1 = min(max(word.x1, word.x0), PAGE_WIDTH)
        word.y0 = min(max(word.y0, 0.0), PAGE_HEIGHT)
        word.y1 = min(max(word.y1, word.y0), PAGE_HEIGHT)


def apply_noise(words: list[Word], noise: NoiseConfig, rng: np.random.Generator) -> list[Word]:
    """Return damaged copies; the input list is left untouched."""
    words = [Word(**vars(w)) for w in words]
    if noise.merge_rate:
        words = _merge(words, noise.merge_rate, rng)
    if noise.split_rate:
        words = _split(words, noise.split_rate, rng)
    if noise.char_confusion_rate:
        for word in words:
            word.text = confuse(word.text, noise.char_confusion_rate, rng)
    if noise.box_jitter:
        _jitter(words, noise.box_jitter, rng)
    clip(words)
    return words
