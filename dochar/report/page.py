"""HTML assembly for the report: escaped tables, sections and the one-file page.

Every string that reaches the page passes through :func:`esc` here or in the overlay module, so
document text and config values can never inject markup. Fragments built by this package are
wrapped in :class:`Html` to mark them as already safe.
"""

from __future__ import annotations

import html
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass


@dataclass(frozen=True)
class Html:
    """A fragment of markup built from escaped parts; passed through unchanged."""

    markup: str

    def __str__(self) -> str:
        return self.markup


def esc(value: object) -> str:
    return html.escape(str(value), quote=True)


def number(value: float | None, digits: int = 3) -> str:
    """Fixed-decimal text; a missing or non-finite value shows as an en dash."""
    if value is None:
        return "–"
    value = float(value)
    if not math.isfinite(value):
        return "–"
    return f"{value:.{digits}f}"


def amount(value: float | None) -> str:
    """Cost figures: three decimals below 1, one below 100, whole numbers above."""
    if value is None or not math.isfinite(float(value)):
        return "–"
    value = float(value)
    if abs(value) < 1:
        return f"{value:.3f}"
    if abs(value) < 100:
        return f"{value:.1f}"
    return f"{value:,.0f}"


def count(value: float | None) -> str:
    if value is None or not math.isfinite(float(value)):
        return "–"
    return f"{int(round(float(value))):,}"


def interval(low: float | None, high: float | None) -> str:
    if low is None or high is None:
        return ""
    return f"[{number(low)}, {number(high)}]"


def _cell(value: object) -> str:
    if isinstance(value, Html):
        return value.markup
    if value is None:
        return "–"
    return esc(value)


def table(headers: Sequence[str], rows: Iterable[Sequence[object]], *, numeric: Iterable[int] = (),
          nowrap: Iterable[int] = (), table_id: str | None = None,
          row_classes: Sequence[str] | None = None, titles: Sequence[str] | None = None) -> Html:
    """A plain table; ``numeric`` columns are right-aligned, ``nowrap`` columns never wrap."""
    numeric, nowrap = set(numeric), set(nowrap)

    def css(i: int) -> str:
        return " class=num" if i in numeric else " class=name" if i in nowrap else ""

    header_titles = list(titles) if titles is not None else [""] * len(headers)
    head_cells = []
    for i, heading in enumerate(headers):
        hover = f' title="{esc(header_titles[i])}"' if header_titles[i] else ""
        head_cells.append(f"<th{css(i)}{hover}>{esc(heading)}</th>")
    body = []
    for r, row in enumerate(rows):
        row_css = f' class="{esc(row_classes[r])}"' if row_classes and row_classes[r] else ""
        cells = "".join(f"<td{css(i)}>{_cell(v)}</td>" for i, v in enumerate(row))
        body.append(f"<tr{row_css}>{cells}</tr>")
    id_attr = f' id="{esc(table_id)}"' if table_id else ""
    return Html(f"<table{id_attr}><thead><tr>{''.join(head_cells)}</tr></thead>"
                f"<tbody>{''.join(body)}</tbody></table>")


def image(data_uri: str, alt: str) -> Html:
    return Html(f'<img src="{esc(data_uri)}" alt="{esc(alt)}">')


def note(text: str) -> Html:
    return Html(f'<p class="note">{esc(text)}</p>')


def paragraph(text: str) -> Html:
    return Html(f"<p>{esc(text)}</p>")


def preformatted(text: str) -> Html:
    return Html(f"<pre>{esc(text)}</pre>")


def details(summary: str, parts: Iterable[Html]) -> Html:
    inner = "".join(p.markup for p in parts)
    return Html(f"<details><summary>{esc(summary)}</summary>{inner}</details>")


def section(section_id: str, heading: str, parts: Iterable[Html]) -> Html:
    inner = "".join(p.markup for p in parts)
    return Html(f'<section id="{esc(section_id)}"><h2>{esc(heading)}</h2>{inner}</section>')


STYLE = """
:root{--ink:#1f2328;--muted:#59636e;--line:#d1d9e0;--band:#f6f8fa;--accent:#0b5cad}
*{box-sizing:border-box}
body{margin:0;color:var(--ink);background:#fff;font:15px/1.5 system-ui,-apple-system,"Segoe UI",
Roboto,"Helvetica Neue",Arial,"Noto Sans","Liberation Sans",sans-serif}
main{max-width:1220px;margin:0 auto;padding:24px 28px 64px}
h1{font-size:26px;margin:0 0 4px}
h2{font-size:19px;margin:36px 0 10px;padding-bottom:4px;border-bottom:1px solid var(--line)}
h3{font-size:15px;margin:18px 0 6px}
p{margin:6px 0}
.lede{color:var(--muted);margin-bottom:14px}
.note{color:var(--muted);font-size:13px}
table{border-collapse:collapse;margin:8px 0;font-size:13.5px}
th,td{padding:5px 7px;border-bottom:1px solid var(--line);text-align:left;vertical-align:top}
th{background:var(--band);font-weight:600;vertical-align:bottom;white-space:nowrap}
td.name{white-space:nowrap}
td.num,th.num{text-align:right;font-variant-numeric:tabular-nums}
td.num{white-space:nowrap}
tbody tr:nth-child(even){background:#fbfcfd}
tr.reference td{background:#eef5fc}
tr.best td:first-child{border-left:3px solid var(--accent)}
img{max-width:100%;height:auto;display:block;margin:8px 0}
pre{background:var(--band);border:1px solid var(--line);padding:10px;overflow:auto;
font:12.5px/1.45 ui-monospace,SFMono-Regular,Menlo,Consolas,"Liberation Mono",monospace}
details{margin:6px 0;border:1px solid var(--line);border-radius:4px;padding:4px 10px}
summary{cursor:pointer;font-weight:600}
.scroll{overflow-x:auto}
.overlay{display:flex;gap:20px;align-items:flex-start;flex-wrap:wrap;margin:10px 0 24px}
.overlay svg{border:1px solid var(--line);flex:none}
.errors{max-height:640px;overflow:auto;flex:1 1 320px;min-width:280px}
.errors table{margin-top:0}
.legend{display:flex;flex-wrap:wrap;gap:4px 16px;font-size:13px;margin:6px 0}
.legend span{display:inline-flex;align-items:center;gap:6px}
.swatch{width:14px;height:14px;display:inline-block;border:1px solid #0003}
.swatch.error{background:#fff;border:3px solid #000}
""".strip()


def document(title: str, lede: str, sections: Iterable[Html], extra_style: str = "") -> str:
    body = "".join(s.markup for s in sections)
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{esc(title)}</title><style>{STYLE}\n{extra_style}</style></head>"
            f"<body><main><h1>{esc(title)}</h1><p class=\"lede\">{esc(lede)}</p>{body}"
            "</main></body></html>\n")
