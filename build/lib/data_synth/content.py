"""What one certificate says, drawn from a seeded generator and written in its layout's style.

Content is drawn before placement so that the renderer is a pure function of (content, layout)
and all randomness of a document comes from one numpy Generator.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np

from data_synth.layouts import Layout
from data_synth.vocabulary import (CLIENT_PATTERNS, DOMAINS, FOOTNOTES, GIVEN_NAMES,
                                   LAB_PATTERNS, LOQ_NOTE, POSITIONS, STREET_KINDS,
                                   UNACCREDITED_NOTE, Analyte,
                                   coin, phone, pick, postcode)

_MONTHS = ("January", "February", "March", "April", "May", "June", "July", "August",
           "September", "October", "November", "December")
_LETTERS = "ABCDEFGHJKLMNPRSTUVWXYZ"


@dataclass(frozen=True)
class Row:
    analyte: str
    method: str
    result: str
    unit: str
    limit: str
    verdict: str


@dataclass(frozen=True)
class Certificate:
    lab_name: str
    lab_lines: tuple[str, ...]
    client: str
    client_lines: tuple[str, ...]
    values: dict[str, str]            # header field -> printed value
    rows: tuple[Row, ...]
    table_unit: str | None            # the one unit of a unit-in-heading table
    footnotes: tuple[str, ...]
    signatories: tuple[tuple[str, str], ...]


def format_date(day: dt.date, style: str) -> str:
    """Locale-free date writing, so output never depends on the machine's settings."""
    month = _MONTHS[day.month - 1]
    formats = {
        "iso": f"{day.year:04d}-{day.month:02d}-{day.day:02d}",
        "dmy_slash": f"{day.day:02d}/{day.month:02d}/{day.year:04d}",
        "dmy_dot": f"{day.day:02d}.{day.month:02d}.{day.year:04d}",
        "d_mon_y": f"{day.day} {month[:3]} {day.year}",
        "d_month_y": f"{day.day} {month} {day.year}",
        "mdy": f"{month[:3]} {day.day}, {day.year}",
    }
    if style not in formats:
        raise ValueError(f"unknown date style '{style}'; known: {sorted(formats)}")
    return formats[style]


def _number(value: float, decimals: int, layout: Layout) -> str:
    text = f"{value:.{decimals}f}"
    return text.replace(".", ",") if layout.decimal_comma else text


def _count(value: float, layout: Layout) -> str:
    """Colony counts: plain below 10 000, else mantissa-exponent as many labs print them."""
    if value < 10000:
        return str(int(round(value)))
    exponent = int(np.floor(np.log10(value)))
    mantissa = _number(value / 10 ** exponent, 1, layout)
    return f"{mantissa}E+{exponent:02d}"


def _limit_text(analyte: Analyte, layout: Layout) -> str:
    if analyte.kind == "absent":
        return "Not detected"
    if analyte.kind == "range":
        low, high = (_number(v, analyte.decimals - 1 if analyte.decimals else 0, layout)
                     for v in analyte.limit)
        return {"dash_spaced": f"{low} - {high}", "dash_tight": f"{low}-{high}",
                "to": f"{low} to {high}"}[layout.range_style]
    if analyte.kind == "count":
        if analyte.limit[0] == 0:
            return "0"
        value = _count(analyte.limit[0], layout)
    else:
        value = _number(analyte.limit[0], max(analyte.decimals - 1, 0), layout)
    return {"le": f"≤ {value}", "max_prefix": f"max. {value}", "max_suffix": f"{value} max",
            "bare": value}[layout.limit_style]


def _result(rng: np.random.Generator, analyte: Analyte, layout: Layout) -> tuple[str, bool]:
    passed = bool(rng.random() < 0.88)
    if analyte.kind == "absent":
        return ("Not detected" if passed else "Detected"), passed
    if analyte.kind == "range":
        low, high = analyte.limit
        if passed:
            value = rng.uniform(low, high)
        else:
            value = high + rng.uniform(0.05, 0.3) * (high - low) if rng.random() < 0.5 \
                else low - rng.uniform(0.05, 0.3) * (high - low)
        return _number(value, analyte.decimals, layout), passed
    limit = analyte.limit[0]
    if analyte.kind == "count":
        if passed:
            floor = "<1" if limit == 0 else "<10"
            if limit == 0 or rng.random() < 0.4:
                return floor, True
            return _count(rng.uniform(10, limit), layout), True
        return _count(max(limit, 1.0) * rng.uniform(1.2, 40.0), layout), False
    if passed and rng.random() < 0.2:
        return "<" + _number(limit / 10, analyte.decimals, layout), True
    value = limit * (rng.uniform(0.02, 0.9) if passed else rng.uniform(1.05, 3.0))
    return _number(value, analyte.decimals, layout), passed


def _method_code(rng: np.random.Generator, prefix: str, group: str, style: int) -> str:
    number = int(rng.integers(1, 400))
    return (f"{prefix}-{group}-{number:03d}", f"{prefix} {group}{number:02d}",
            f"M-{group}/{number}", f"In-house {group}-{number}")[style]


def _choose_analytes(rng: np.random.Generator, layout: Layout) -> tuple[list[Analyte], str,
                                                                           str | None]:
    domain = DOMAINS[int(rng.integers(len(DOMAINS)))]
    pool = list(domain.analytes)
    table_unit = None
    if layout.unit_in_header:
        units: dict[str, int] = {}
        for analyte in pool:
            units[analyte.unit] = units.get(analyte.unit, 0) + 1
        table_unit = max(units, key=lambda u: units[u])   # first of the largest group
        pool = [a for a in pool if a.unit == table_unit]
    count = int(rng.integers(min(5, len(pool)), min(24, len(pool)) + 1))
    chosen = np.sort(rng.choice(len(pool), size=count, replace=False))
    return [pool[i] for i in chosen], pick(rng, domain.matrices), table_unit


def _address(rng: np.random.Generator) -> str:
    code = postcode(rng)
    return (f"{rng.integers(1, 240)} {coin(rng)} {pick(rng, STREET_KINDS)}, "
            f"{coin(rng)} {code}")


def draw_certificate(rng: np.random.Generator, layout: Layout) -> Certificate:
    """Draw every printed string of one certificate."""
    lab_name = pick(rng, LAB_PATTERNS).format(coin(rng), coin(rng))
    prefix = "".join(_LETTERS[rng.integers(len(_LETTERS))] for _ in range(3))
    lab_lines = (_address(rng), f"Tel. {phone(rng)}",
                 f"Accredited testing laboratory no. T{rng.integers(1000, 9999)}")
    client = pick(rng, CLIENT_PATTERNS).format(coin(rng))
    client_lines = (_address(rng),)
    received = dt.date(2024, 1, 1) + dt.timedelta(days=int(rng.integers(0, 3 * 365)))
    reported = received + dt.timedelta(days=int(rng.integers(2, 16)))
    analytes, matrix, table_unit = _choose_analytes(rng, layout)
    values = {
        "cert_no": f"{prefix}-{received.year}-{rng.integers(0, 99999):05d}",
        "client": client,
        "sample_id": (f"S{received.year % 100:02d}{rng.integers(0, 999999):06d}"
                      if rng.random() < 0.5 else f"{prefix}{rng.integers(100, 9999)}/"
                      f"{rng.integers(1, 12)}"),
        "description": matrix,
        "lot": f"L{rng.integers(10000, 99999)}" if rng.random() < 0.5
        else f"B-{rng.integers(100, 999)}-{_LETTERS[rng.integers(len(_LETTERS))]}",
        "received": format_date(received, layout.date_style),
        "reported": format_date(reported, layout.date_style),
    }
    note_count = int(rng.integers(2, 5))
    notes = [FOOTNOTES[i] for i in np.sort(rng.choice(len(FOOTNOTES), note_count, replace=False))]
    star = UNACCREDITED_NOTE in notes
    style = int(rng.integers(4))
    rows = []
    for analyte in analytes:
        result, passed = _result(rng, analyte, layout)
        method = _method_code(rng, prefix, analyte.group, style)
        if star and rng.random() < 0.3:
            method += "*"
        rows.append(Row(analyte.name, method, result, analyte.unit, _limit_text(analyte, layout),
                        layout.verdicts[0] if passed else layout.verdicts[1]))
    if any(row.result.startswith("<") for row in rows):
        notes.append(LOQ_NOTE)
    people = tuple((f"{pick(rng, GIVEN_NAMES)} {coin(rng)}", pick(rng, POSITIONS))
                   for _ in range(int(rng.integers(1, 3))))
    return Certificate(lab_name, lab_lines, client, client_lines, values, tuple(rows),
                       table_unit, tuple(notes), people)
