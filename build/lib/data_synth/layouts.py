"""The layout families: every way two synthetic certificates may differ apart from content.

A layout is pure data; the renderer reads it. Families differ in header placement, key wording
and arrangement, table column order and headings, date and number style, verdict wording,
unit placement and analyte column width (narrow columns wrap long analyte names).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

FIELDS: tuple[str, ...] = ("cert_no", "client", "sample_id", "description", "lot",
                           "received", "reported")
FIELD_LABELS: dict[str, str] = {"cert_no": "cert_no", "client": "client",
                                "sample_id": "sample_id", "description": "other",
                                "lot": "other", "received": "date", "reported": "date"}
COLUMNS: tuple[str, ...] = ("analyte", "method", "result", "unit", "limit", "verdict")


@dataclass(frozen=True)
class Layout:
    """One layout family.

    lab_block: where the laboratory name and address sit ("banner" centred, "left", "right").
    fields: how the key-value header is arranged ("left", "right", "two_column", "strip").
    key_above: key printed above its value instead of left of it ("strip" always stacks).
    keys: key phrase per field of FIELDS, in printing order.
    columns / headers: table column order and the heading printed for each.
    unit_in_header: units leave the table and join the result heading, "Result (mg/L)"; such
    certificates test one unit group only.
    """

    layout_id: str
    lab_block: str
    fields: str
    key_above: bool
    keys: tuple[tuple[str, str], ...]
    key_suffix: str
    title: str
    date_style: str
    columns: tuple[str, ...]
    headers: tuple[str, ...]
    verdicts: tuple[str, str]
    limit_style: str
    range_style: str
    ruled: bool
    analyte_max_width: float
    font_size: float = 9.0
    unit_in_header: bool = False
    decimal_comma: bool = False
    result_right: bool = False
    sign_on_behalf: bool = False

    def __post_init__(self) -> None:
        fields = [f for f, _ in self.keys]
        if sorted(fields) != sorted(FIELDS):
            raise ValueError(f"layout {self.layout_id}: keys must cover {FIELDS}, got {fields}")
        if len(self.columns) != len(self.headers) or not set(self.columns) <= set(COLUMNS):
            raise ValueError(f"layout {self.layout_id}: columns/headers mismatch")
        if ("unit" in self.columns) == self.unit_in_header:
            raise ValueError(f"layout {self.layout_id}: a unit column xor unit_in_header")


def _keys(*phrases: str) -> tuple[tuple[str, str], ...]:
    return tuple(zip(FIELDS, phrases))


LAYOUTS: tuple[Layout, ...] = (
    Layout("coa_banner_left", "banner", "left", False,
           _keys("Certificate No.", "Client", "Sample ID", "Sample description", "Lot",
                 "Date received", "Date reported"), ":", "CERTIFICATE OF ANALYSIS", "iso",
           COLUMNS, ("Parameter", "Method", "Result", "Unit", "Limit", "Verdict"),
           ("Pass", "Fail"), "le", "dash_spaced", True, 200.0),
    Layout("coa_side_block", "left", "right", False,
           _keys("Report number", "Customer", "Lab sample no.", "Matrix", "Batch", "Received",
                 "Reported"), "", "Analytical Report", "dmy_slash",
           ("method", "analyte", "result", "unit", "limit", "verdict"),
           ("Test method", "Analyte", "Result", "Units", "Specification", "Assessment"),
           ("Complies", "Does not comply"), "max_prefix", "dash_tight", False, 190.0),
    Layout("coa_twin_column", "left", "two_column", False,
           _keys("Certificate No.", "Client", "Sample reference", "Product", "Lot/Batch no.",
                 "Receipt date", "Date of issue"), ":", "Certificate of Analysis", "d_mon_y",
           ("analyte", "result", "unit", "limit", "method", "verdict"),
           ("Determinand", "Result", "Unit", "Max. permitted", "Method ref.", "Status"),
           ("OK", "NOK"), "le", "to", True, 90.0, font_size=8.5),
    Layout("coa_stacked_keys", "right", "left", True,
           _keys("Ref.", "Issued to", "Specimen code", "Description", "Lot", "Received on",
                 "Issued"), "", "TEST CERTIFICATE", "mdy",
           ("analyte", "method", "limit", "result", "unit", "verdict"),
           ("Analyte", "Method", "Limit", "Result", "Unit", "Outcome"),
           ("Conforms", "Non-conforming"), "max_suffix", "dash_spaced", False, 170.0,
           sign_on_behalf=True),
    Layout("coa_unit_heading", "banner", "strip", True,
           _keys("Certificate of Analysis No.", "Client name", "Sample ID", "Sample type",
                 "Batch", "Date received", "Date reported"), "", "Report of Analysis", "iso",
           ("analyte", "method", "result", "limit", "verdict"),
           ("Analyte", "Method", "Result", "Limit", "Verdict"),
           ("Pass", "Fail"), "bare", "dash_tight", True, 200.0, unit_in_header=True,
           result_right=True),
    Layout("coa_narrow_wrap", "left", "left", False,
           _keys("Our reference", "Submitted by", "Lab ref.", "Matrix", "Lot",
                 "Date of receipt", "Report date"), ":", "Laboratory Test Report", "dmy_dot",
           ("analyte", "limit", "result", "unit", "method", "verdict"),
           ("Test", "Requirement", "Found", "Unit", "Procedure", "Conformity"),
           ("Compliant", "Non-compliant"), "le", "dash_spaced", True, 80.0, font_size=8.5,
           decimal_comma=True),
    Layout("coa_compact_ref", "right", "left", False,
           _keys("Ref.", "Cust.", "Sample", "Matrix", "Lot", "Rcvd", "Rptd"), ":",
           "Certificate of Analysis", "d_mon_y",
           ("method", "analyte", "limit", "result", "unit", "verdict"),
           ("Code", "Parameter", "Spec.", "Result", "Unit", "Eval."),
           ("Within spec", "Out of spec"), "max_prefix", "to", False, 150.0, font_size=8.0),
    Layout("coa_banner_twin", "banner", "two_column", True,
           _keys("Report ID", "Client", "Sample no.", "Sample description", "Lot no.",
                 "Date received", "Date of report"), "", "CERTIFICATE OF ANALYSIS",
           "dmy_slash", ("analyte", "result", "limit", "method", "verdict"),
           ("Parameter", "Result", "Limit value", "Test method", "Verdict"),
           ("Complies", "Does not comply"), "le", "dash_spaced", False, 100.0,
           unit_in_header=True, sign_on_behalf=True),
    Layout("coa_form_grid", "left", "strip", True,
           _keys("CoA number", "Customer", "Sample code", "Product", "Batch", "Arrival date",
                 "Release date"), "", "Certificate of Analysis", "iso",
           ("analyte", "unit", "result", "limit", "verdict", "method"),
           ("Characteristic", "Unit", "Result", "Specification", "Verdict", "Method"),
           ("Pass", "Fail"), "bare", "dash_tight", True, 180.0, result_right=True),
    Layout("coa_banner_right", "banner", "right", False,
           _keys("Certificate no.", "Client", "Sample ID", "Description", "Lot", "Received",
                 "Completed"), ":", "Test Report", "d_month_y", COLUMNS,
           ("Parameter", "Test method", "Value", "Unit", "Acceptance criteria", "Evaluation"),
           ("OK", "Not OK"), "max_prefix", "to", False, 160.0, sign_on_behalf=True),
)
LAYOUT_IDS: tuple[str, ...] = tuple(layout.layout_id for layout in LAYOUTS)
_BY_ID = {layout.layout_id: layout for layout in LAYOUTS}


def resolve_layouts(layout_ids: Sequence[str] | None) -> tuple[Layout, ...]:
    """Look up layout ids; an unknown or empty selection is an error that lists the choices."""
    if layout_ids is None:
        return LAYOUTS
    if isinstance(layout_ids, str):
        raise TypeError("layouts must be a sequence of layout ids, not one string")
    layout_ids = list(layout_ids)
    if len(layout_ids) == 0:
        raise ValueError(f"layouts: empty selection; choose from {list(LAYOUT_IDS)}")
    unknown = [name for name in layout_ids if name not in _BY_ID]
    if unknown:
        raise ValueError(f"layouts: unknown layout id(s) {unknown}; choose from {list(LAYOUT_IDS)}")
    return tuple(_BY_ID[name] for name in layout_ids)
