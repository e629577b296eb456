"""Value normalisation: what a person would not call a different value.

Scores are given twice, on raw values and on normalised ones (``NORMALISATIONS``). Normalised:

* every value: runs of whitespace become one space, ends stripped;
* a label in ``date_fields``: a complete date (day, month and year) read by ``dateparser``
  (English, numeric dates read day first: ``05/03/2024`` is 5 March) is written ISO 8601,
  ``2024-03-05``; a text with no complete date stays as it is;
* a label in ``amount_fields``: one number, maybe with a currency and sign (``price-parser``),
  becomes a plain decimal without currency, trailing zeros or group separators: ``Rp 45.000``
  -> ``45000``, ``$ 3.50`` -> ``3.5``. price-parser reads a point followed by exactly three
  digits as a group separator (``0.010`` -> ``10``), so results of analysis are no amounts;
  a text with anything else beside the number stays as it is.

A value that does not read as its kind is kept (whitespace-normalised) and so still compared,
never dropped.
"""

from __future__ import annotations

from decimal import Decimal
from functools import lru_cache

from dochar.records.shape import RecordShape

RAW, NORMALISED = "raw", "normalised"
NORMALISATIONS: tuple[str, ...] = (RAW, NORMALISED)
_AMOUNT_RESIDUE = set(" +-")


def squash(text: str) -> str:
    """Runs of whitespace to one space, ends stripped."""
    return " ".join(str(text).split())


@lru_cache(maxsize=1)
def _date_parser():
    from dateparser.date import DateDataParser

    return DateDataParser(languages=["en"], settings={
        "REQUIRE_PARTS": ["day", "month", "year"], "DATE_ORDER": "DMY",
        "PREFER_DAY_OF_MONTH": "first"})


@lru_cache(maxsize=1 << 16)
def as_date(text: str) -> str:
    """ISO 8601 date of a text holding one complete date, else the text."""
    text = squash(text)
    if sum(ch.isdigit() for ch in text) < 3 or len(text) > 40:
        return text
    found = _date_parser().get_date_data(text).date_obj
    return found.date().isoformat() if found is not None else text


@lru_cache(maxsize=1 << 16)
def as_amount(text: str) -> str:
    """A plain decimal for a text holding one amount (sign and currency allowed), else the text."""
    from price_parser import Price

    text = squash(text)
    price = Price.fromstring(text)
    if price.amount is None or price.amount_text is None:
        return text
    residue = text.replace(price.amount_text, "", 1)
    if price.currency:
        residue = residue.replace(price.currency, "", 1)
    if not set(residue) <= _AMOUNT_RESIDUE:
        return text
    amount = -price.amount if "-" in residue else price.amount
    return _plain(amount)


def _plain(amount: Decimal) -> str:
    text = format(amount.normalize(), "f")
    return "0" if text in ("-0", "") else text


def normalise(label: str, text: str, shape: RecordShape, how: str) -> str:
    """The value of ``text`` under label ``label``, raw or normalised."""
    if how == RAW:
        return text
    if how != NORMALISED:
        raise ValueError(f"normalisation {how!r}: choose one of {list(NORMALISATIONS)}")
    if label in shape.date_fields:
        return as_date(text)
    if label in shape.amount_fields:
        return as_amount(text)
    return squash(text)
