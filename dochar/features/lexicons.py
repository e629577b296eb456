"""Word lists as 0/1 features: does this word belong to a named list (units, verdict words...)?

A word matches a list when its key, or the key of the word with surrounding brackets, quotes and
sentence marks removed ("(mg/L)", "Pass."), is one of the list's keys. The key is the Unicode
NFKC form, case-folded, so "MG/L" matches "mg/L" and the micro sign matches Greek mu.
Entries are single words: a page's words never hold a space, so an entry with one could never
match and is refused.
"""

from __future__ import annotations

import unicodedata
from collections.abc import Mapping, Sequence
from functools import lru_cache

import numpy as np

from dochar.features.options import FeatureOptionError

# Common trade words on certificates of analysis (common practice); configs pick their own lists.
DEFAULT_LEXICONS: dict[str, tuple[str, ...]] = {
    "units": ("mg/L", "µg/L", "ng/L", "g/L", "mg/kg", "µg/kg", "g/kg", "g/100g", "mL", "%",
              "w/w", "v/v", "ppm", "ppb", "CFU/g", "CFU/mL", "MPN/100mL", "pH", "°C", "mS/cm",
              "µS/cm", "NTU", "mmol/L", "meq/L", "IU/g", "kcal", "kJ"),
    "verdicts": ("pass", "passed", "fail", "failed", "complies", "comply", "compliant",
                 "conforms", "conform", "conforming", "nonconforming", "accepted", "acceptable",
                 "rejected", "satisfactory", "unsatisfactory", "ok", "nd"),
}
_EDGE_MARKS = set(".,:;!?*'\"")
_EDGE_CATEGORIES = {"Ps", "Pe", "Pi", "Pf"}   # opening/closing brackets, initial/final quotes


def lexicon_key(text: str) -> str:
    return unicodedata.normalize("NFKC", text).casefold()


def _strip_edges(text: str) -> str:
    def edge(ch: str) -> bool:
        return ch in _EDGE_MARKS or unicodedata.category(ch) in _EDGE_CATEGORIES

    start, end = 0, len(text)
    while start < end and edge(text[start]):
        start += 1
    while end > start and edge(text[end - 1]):
        end -= 1
    return text[start:end]


@lru_cache(maxsize=1 << 18)
def word_keys(text: str) -> tuple[str, ...]:
    """The keys a word is looked up under: as written, and with its edge marks removed."""
    key = lexicon_key(text.strip())
    stripped = _strip_edges(key)
    return (key,) if stripped == key else (key, stripped)


def compile_lexicons(lexicons: Mapping[str, Sequence[str]] | None) -> dict[str, frozenset[str]]:
    """Check a name -> entries mapping (e.g. from a config) and turn each list into a key set."""
    if lexicons is None:
        return {}
    if not isinstance(lexicons, Mapping):
        raise TypeError(f"lexicons: expected a mapping of list name -> words, "
                        f"got {type(lexicons).__name__}")
    compiled: dict[str, frozenset[str]] = {}
    for name, entries in lexicons.items():
        if not isinstance(name, str) or not name.strip():
            raise FeatureOptionError(f"config key data.lexicons: list name {name!r} must be a "
                                     f"non-empty string")
        if isinstance(entries, str) or not isinstance(entries, Sequence):
            raise TypeError(f"config key data.lexicons.{name}: expected a list of words, "
                            f"got {type(entries).__name__} {entries!r}")
        keys = set()
        for position, entry in enumerate(entries):
            if not isinstance(entry, str) or not entry.strip():
                raise FeatureOptionError(f"config key data.lexicons.{name}[{position}]: "
                                         f"{entry!r} is not a non-empty string")
            if any(ch.isspace() for ch in entry.strip()):
                raise FeatureOptionError(f"config key data.lexicons.{name}[{position}]: "
                                         f"{entry!r} holds a space; entries are single words, "
                                         f"list each word separately")
            keys.add(lexicon_key(entry.strip()))
        if not keys:
            raise FeatureOptionError(f"config key data.lexicons.{name}: the list is empty")
        compiled[name] = frozenset(keys)
    return compiled


def lexicon_features(texts: Sequence[str], compiled: Mapping[str, frozenset[str]]) -> np.ndarray:
    """(n_words, n_lists) float32 of 0/1 membership, columns in the mapping's order; each
    distinct string is looked up once."""
    distinct = {text: row for row, text in enumerate(dict.fromkeys(texts))}
    found = np.zeros((len(distinct), len(compiled)), dtype=np.float32)
    for column, keys in enumerate(compiled.values()):
        for text, row in distinct.items():
            if any(key in keys for key in word_keys(text)):
                found[row, column] = 1.0
    return found[[distinct[text] for text in texts]].reshape(len(texts), len(compiled))
