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

from dochar.runs.numbers import interval, number  # noqa: F401 - the report writes numbers so


@dataclass(frozen=True)
class Html:
    """A fragment of markup built from escaped parts; passed through unchanged."""

    markup: str

    def __str__(self) -> str:
        return self.markup


def esc(value: object) -> str:
    return html.escape(str(value), quote=True)


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


BREAKS = ("/", "+", ",")   # a long run name may wrap after these


def breakable(value: object) -> str:
    """Escaped text that may wrap after a slash, plus or comma (``<wbr>``), so a
    long run name takes several lines instead of widening its table past the page."""
    text = esc(value)
    for mark in BREAKS:
        text = text.replace(mark, mark + "<wbr>")
    return text


def _cell(value: object, wrap: bool = False) -> str:
    if isinstance(value, Html):
        return value.markup
    if value is None:
        return "–"
    return breakable(value) if wrap else esc(value)


def table(headers: Sequence[str], rows: Iterable[Sequence[object]], *, numeric: Iterable[int] = (),
          nowrap: Iterable[int] = (), table_id: str | None = None,
          row_classes: Sequence[str] | None = None, titles: Sequence[str] | None = None,
          wrap: Iterable[int] = (), wrap_headers: Iterable[int] = ()) -> Html:
    """A plain table; ``numeric`` columns are right-aligned, ``nowrap`` columns never wrap,
    ``wrap`` columns (and ``wrap_headers`` headings) may wrap inside long names."""
    numeric, nowrap, wrap, wrap_headers = set(numeric), set(nowrap), set(wrap), set(wrap_headers)

    def css(i: int) -> str:
        return " class=num" if i in numeric else " class=name" if i in nowrap else ""

    header_titles = list(titles) if titles is not None else [""] * len(headers)
    head_cells = []
    for i, heading in enumerate(headers):
        hover = f' title="{esc(header_titles[i])}"' if header_titles[i] else ""
        head_cells.append(f"<th{css(i)}{hover}>{_cell(heading, i in wrap_headers)}</th>")
    body = []
    for r, row in enumerate(rows):
        row_css = f' class="{esc(row_classes[r])}"' if row_classes and row_classes[r] else ""
        cells = "".join(f"<td{css(i)}>{_cell(v, i in wrap)}</td>" for i, v in enumerate(row))
        body.append(f"<tr{row_css}>{cells}</tr>")
    id_attr = f' id="{esc(table_id)}"' if table_id else ""
    return Html(f"<table{id_attr}><thead><tr>{''.join(head_cells)}</tr></thead>"
                f"<tbody>{''.join(body)}</tbody></table>")


def image(data_uri: str, alt: str) -> Html:
    return Html(f'<img src="{esc(data_uri)}" alt="{esc(alt)}">')


def note(text: str) -> Html:
    return Html(f'<p class="note">{esc(text)}</p>')


def paragraph(text: str, css: str | None = None, element_id: str | None = None) -> Html:
    attributes = (f' class="{esc(css)}"' if css else "") + \
        (f' id="{esc(element_id)}"' if element_id else "")
    return Html(f"<p{attributes}>{esc(text)}</p>")


def preformatted(text: str) -> Html:
    return Html(f"<pre>{esc(text)}</pre>")


def details(summary: str, parts: Iterable[Html]) -> Html:
    inner = "".join(p.markup for p in parts)
    return Html(f"<details><summary>{esc(summary)}</summary>{inner}</details>")


def section(section_id: str, heading: str, parts: Iterable[Html]) -> Html:
    inner = "".join(p.markup for p in parts)
    return Html(f'<section id="{esc(section_id)}"><h2>{esc(heading)}</h2>{inner}</section>')


def facts(items: Iterable[tuple[str, str]], list_id: str) -> Html:
    """A list of labelled facts (term, value), both escaped."""
    rows = "".join(f"<dt>{esc(term)}</dt><dd>{esc(value)}</dd>" for term, value in items)
    return Html(f'<dl class="facts" id="{esc(list_id)}">{rows}</dl>')


def contents(entries: Iterable[tuple[str, str]]) -> Html:
    """Links to the page's own sections (``#id`` only, nothing outside the file)."""
    links = "".join(f'<li><a href="#{esc(i)}">{esc(heading)}</a></li>' for i, heading in entries)
    return Html(f'<nav class="contents"><ol>{links}</ol></nav>')


# dochar's own look, made for reading numbers: figures in tables are tabular and right-aligned,
# prose is set in a serif and tables in a sans-serif with lining, equal-width digits. Ink is a
# blue-black on warm paper; the one accent (burnt orange) marks the best run and numbers the
# sections. Sections open with a numbered tab instead of a ruled heading. Colours of classes,
# lines and heatmaps are chosen for colour-blind readers (see overlay.py and plots.py).
STYLE = """
:root{--ink:#1b2631;--soft:#4f5d6b;--rule:#b8c4cc;--paper:#fcfcf9;--tint:#eef2ee;
--mark:#a64b00;--verdict:#f4efe1;--best:#fbf3e9;--reference:#e9f0f4}
*{box-sizing:border-box}
body{margin:0;color:var(--ink);background:var(--paper);counter-reset:part;
font:16px/1.55 Charter,"Bitstream Charter","Iowan Old Style",Georgia,"DejaVu Serif",serif}
main{max-width:1240px;margin:0 auto;padding:28px 32px 72px}
header{margin-bottom:8px}
h1{font-size:28px;font-weight:700;letter-spacing:.01em;margin:0 0 2px}
.lede{color:var(--soft);margin:0 0 16px;font-style:italic}
.verdict{font-size:20px;line-height:1.45;margin:0 0 14px;padding:14px 18px;
background:var(--verdict);border-left:6px solid var(--mark);font-variant-numeric:tabular-nums}
.facts{display:grid;grid-template-columns:max-content 1fr;gap:2px 18px;margin:0 0 14px;
font:13.5px/1.5 "Source Sans 3","Noto Sans","DejaVu Sans",Verdana,sans-serif}
.facts dt{color:var(--soft);text-transform:lowercase;font-variant:small-caps;letter-spacing:.04em}
.facts dd{margin:0;font-variant-numeric:tabular-nums;overflow-wrap:anywhere}
.contents ol{display:flex;flex-wrap:wrap;gap:4px 8px;list-style:none;margin:6px 0 0;padding:0;
font:13px/1.4 "Source Sans 3","Noto Sans","DejaVu Sans",Verdana,sans-serif}
.contents a{color:var(--ink);text-decoration:none;padding:2px 8px;border-radius:10px;
background:var(--tint)}
.contents a:hover{background:var(--rule)}
section{counter-increment:part;margin-top:40px}
h2{display:flex;align-items:baseline;gap:12px;font-size:22px;font-weight:700;margin:0 0 10px}
h2::before{content:counter(part);flex:none;min-width:30px;padding:1px 7px;text-align:center;
color:#fff;background:var(--mark);border-radius:3px;font:700 15px/1.6 "DejaVu Sans",sans-serif;
font-variant-numeric:tabular-nums}
h3{font-size:16px;margin:20px 0 6px}
p{margin:6px 0}
.note{color:var(--soft);font-size:13.5px}
table{border-collapse:collapse;margin:8px 0;font:13.5px/1.45 "Source Sans 3","Noto Sans",
"DejaVu Sans",Verdana,sans-serif;font-variant-numeric:tabular-nums lining-nums}
th,td{padding:5px 8px;text-align:left;vertical-align:top}
thead th{border-bottom:2px solid var(--ink);font-weight:700;vertical-align:bottom;
overflow-wrap:normal;hyphens:manual}
tbody td{border-bottom:1px solid var(--tint)}
td.name{white-space:nowrap}
td.num,th.num{text-align:right}
td.num{white-space:nowrap}
tr.best td{background:var(--best)}
tr.best td:first-child{box-shadow:inset 4px 0 var(--mark);font-weight:700}
tr.reference td{background:var(--reference)}
tr.unseen td{background:var(--tint)}
img{max-width:100%;height:auto;display:block;margin:8px 0}
pre{background:var(--tint);padding:10px 12px;overflow:auto;border-radius:3px;
font:12.5px/1.45 "DejaVu Sans Mono","Liberation Mono",Menlo,Consolas,monospace}
details{margin:6px 0;border-left:4px solid var(--rule);padding:4px 12px;background:#fff}
summary{cursor:pointer;font-weight:700}
.scroll{overflow-x:auto}
.overlay{display:flex;gap:20px;align-items:flex-start;flex-wrap:wrap;margin:10px 0 24px}
.overlay svg{border:1px solid var(--rule);flex:none}
.errors{max-height:640px;overflow:auto;flex:1 1 320px;min-width:280px}
.errors table{margin-top:0}
.legend{display:flex;flex-wrap:wrap;gap:4px 16px;margin:6px 0;
font:13px/1.4 "Source Sans 3","Noto Sans","DejaVu Sans",Verdana,sans-serif}
.legend span{display:inline-flex;align-items:center;gap:6px}
.swatch{width:14px;height:14px;display:inline-block;flex:none}
""".strip()


def document(title: str, lede: str, sections: Iterable[Html], extra_style: str = "",
             top: Iterable[Html] = ()) -> str:
    """The whole page; ``top`` (verdict, facts, contents) goes under the title."""
    head = "".join(t.markup for t in top)
    body = "".join(s.markup for s in sections)
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{esc(title)}</title><style>{STYLE}\n{extra_style}</style></head>"
            f"<body><main><header><h1>{esc(title)}</h1><p class=\"lede\">{esc(lede)}</p>{head}"
            f"</header>{body}</main></body></html>\n")
