"""Cheap surface flags of a word's text: what kind of token it is, not what it says.

Choices:

* date-like uses dateparser (English only, no language detection) and asks for a full date:
  day, month and year must all be present (``REQUIRE_PARTS``), so "12.50", "2026" or "3/4" are
  not dates while "2026-03-14", "14/03/2026" and "14Mar2026" are. Only strings with at least
  three digits are handed to it (a full date needs a day and a year of two digits or more), which
  skips most words, and results are cached per string. dateutil was not used: it turns almost
  any number into a date.
* amount-like uses price-parser, which finds a number inside any string ("A12" -> 12), so the
  flag also asks that nothing but the number, its currency and a sign or comparison mark
  ("<0.01") be left over.
* word frequency is wordfreq's Zipf frequency in English divided by 8: Zipf values run from 0
  to about 8, so the column stays near [0, 1].

Every value is a float in a small fixed range, finite for any string including the empty one.
"""

from __future__ import annotations

import math
import unicodedata
from functools import lru_cache

import numpy as np
from price_parser import Price
from wordfreq import zipf_frequency

TEXT_FLAG_NAMES: tuple[str, ...] = (
    "empty", "log_length",
    "has_digit", "has_letter", "letters_and_digits", "numeric",
    "digit_share", "letter_share", "punct_share",
    "upper", "title", "lower", "ends_with_colon",
    "date_like", "month_name", "amount_like", "currency_amount",
    "word_freq",
)
LENGTH_SCALE = math.log1p(64)   # log_length reaches 1 at 64 characters
_AMOUNT_RESIDUE = set(" +-−±<>≤≥~()")
# English month names and their usual abbreviations (common practice)
_MONTHS = frozenset("january february march april may june july august september october "
                    "november december jan feb mar apr jun jul aug sep sept oct nov dec".split())
_CACHE_SIZE = 1 << 18


@lru_cache(maxsize=1)
def _date_parser():
    """One shared English-only parser; built lazily because construction is slow."""
    from dateparser.date import DateDataParser

    return DateDataParser(languages=["en"],
                          settings={"REQUIRE_PARTS": ["day", "month", "year"]})


@lru_cache(maxsize=_CACHE_SIZE)
def is_date_like(text: str) -> bool:
    """True when dateparser reads a complete date (day, month, year) in the text."""
    text = text.strip()
    if sum(ch.isdigit() for ch in text) < 3 or len(text) > 40:
        return False
    return _date_parser().get_date_data(text).date_obj is not None


@lru_cache(maxsize=_CACHE_SIZE)
def parse_amount(text: str) -> tuple[bool, bool]:
    """(amount_like, with_currency): the text is one number, maybe with currency and sign."""
    price = Price.fromstring(text)
    if price.amount is None or price.amount_text is None:
        return False, False
    residue = text.replace(price.amount_text, "", 1)
    if price.currency:
        residue = residue.replace(price.currency, "", 1)
    if not set(residue) <= _AMOUNT_RESIDUE:
        return False, False
    return True, price.currency is not None


def _is_number(text: str) -> bool:
    """A plain number: digits with optional sign and decimal point, commas allowed, no exponent."""
    if (not any(ch.isdigit() for ch in text) or "_" in text
            or any(ch.isalpha() for ch in text)):
        return False
    try:
        float(text.replace(",", ""))
    except ValueError:
        return False
    return True


@lru_cache(maxsize=_CACHE_SIZE)
def text_flag_row(text: str) -> tuple[float, ...]:
    """The TEXT_FLAG_NAMES values for one string (cached: pages repeat their words a lot)."""
    stripped = text.strip()
    n = len(stripped)
    if n == 0:
        return (1.0,) + (0.0,) * (len(TEXT_FLAG_NAMES) - 1)
    digits = sum(ch.isdigit() for ch in stripped)
    letters = sum(ch.isalpha() for ch in stripped)
    punct = sum(unicodedata.category(ch).startswith("P") for ch in stripped)
    amount_like, currency_amount = parse_amount(stripped)
    return (
        0.0, math.log1p(n) / LENGTH_SCALE,
        float(digits > 0), float(letters > 0), float(digits > 0 and letters > 0),
        float(_is_number(stripped)),
        digits / n, letters / n, punct / n,
        float(stripped.isupper()), float(stripped.istitle()),
        float(stripped.islower()), float(stripped.endswith(":")),
        float(is_date_like(stripped)),
        float(stripped.strip(".,:;()").casefold() in _MONTHS),
        float(amount_like), float(currency_amount),
        zipf_frequency(stripped, "en") / 8.0,
    )


def text_flag_features(texts: list[str]) -> np.ndarray:
    """(n_words, len(TEXT_FLAG_NAMES)) float32 block; each distinct string is computed once."""
    if not texts:
        return np.zeros((0, len(TEXT_FLAG_NAMES)), dtype=np.float32)
    distinct = {text: row for row, text in enumerate(dict.fromkeys(texts))}
    rows = np.array([text_flag_row(text) for text in distinct], dtype=np.float32)
    return rows[[distinct[text] for text in texts]]
