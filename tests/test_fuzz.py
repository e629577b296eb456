"""Generated inputs for the validator, the importers and the graph builders (hypothesis).

Each property runs twice: about 50 examples in the default suite and a few thousand under the
``slow`` mark. What must hold for every input (the house rules in DEVELOPERS.md):

- nothing but a DocharError escapes: no other exception for any input;
- nothing is lost: documents in = used + reported; words read = kept + dropped (by kind);
- what comes out obeys the word-table rules: the validator finds nothing wrong in a table it
  returned, nor in any importer's output; a builder's edges join words of its own page.
"""

from __future__ import annotations

import math
import xml.sax.saxutils as sax

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from dochar import graphs
from dochar.data.importers import import_sources
from dochar.data.word_table import BOX_TOLERANCE, Page, validate_word_table
from dochar.errors import DocharError

SHORT = settings(max_examples=50, deadline=None, derandomize=True,
                 suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
LONG = settings(max_examples=2000, deadline=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
LABELS = ["key", "value", "other"]

numbers = st.one_of(st.floats(allow_nan=True, allow_infinity=True, width=32),
                    st.integers(-5, 300), st.sampled_from(["", "abc", "1e3", None, "  7 "]))
texts = st.text(st.characters(codec="utf-8"), max_size=12)
cell = st.one_of(numbers, texts)
COLUMNS = ["doc_id", "page", "word_id", "text", "x0", "y0", "x1", "y1", "page_width",
           "page_height", "label"]
row = st.fixed_dictionaries({
    "doc_id": st.one_of(st.sampled_from(["a", "b", "c", "", " "]), st.integers(0, 3)),
    "page": st.one_of(st.integers(-1, 3), st.sampled_from([0.5, 1.0, math.nan, "x"])),
    "word_id": st.one_of(st.integers(-1, 6), st.sampled_from([0.5, 2.0, math.nan, 1e12])),
    "text": st.one_of(texts, st.none(), st.integers()),
    "x0": numbers, "y0": numbers, "x1": numbers, "y1": numbers,
    "page_width": st.one_of(numbers, st.just(100.0)), "page_height": st.one_of(numbers,
                                                                               st.just(200.0)),
    "label": st.sampled_from([*LABELS, "", "price"]),
})
mostly_good_row = st.fixed_dictionaries({
    "doc_id": st.sampled_from(["a", "b", "c"]), "page": st.integers(1, 2),
    "word_id": st.integers(0, 8), "text": texts,
    "x0": st.floats(-2, 99), "y0": st.floats(-2, 199), "x1": st.floats(0, 103),
    "y1": st.floats(0, 204), "page_width": st.sampled_from([100.0, 100.0, 101.0]),
    "page_height": st.just(200.0), "label": st.sampled_from([*LABELS, "other", "price"]),
})
tables = st.one_of(st.lists(row, max_size=12), st.lists(mostly_good_row, max_size=25))


def check_validator(rows: list[dict], repair: str | None) -> None:
    frame = pd.DataFrame(rows, columns=COLUMNS)
    try:
        report = validate_word_table(frame, LABELS, source="fuzz.csv", repair=repair)
    except DocharError:
        event("table refused whole")
        return
    event(f"documents used: {min(report.documents_used, 2)}+")
    assert report.documents_in == report.documents_used + report.documents_reported
    kept = report.table
    assert kept["doc_id"].nunique() == report.documents_used
    again = validate_word_table(kept, LABELS)
    assert again.problems == [], [str(p) for p in again.problems[:3]]
    if len(kept):
        boxes = kept[["x0", "y0", "x1", "y1"]].to_numpy(float)
        assert np.isfinite(boxes).all()
        assert (boxes[:, 2] >= boxes[:, 0]).all() and (boxes[:, 3] >= boxes[:, 1]).all()
        assert (boxes[:, 2] <= kept["page_width"].to_numpy() + BOX_TOLERANCE).all()
        assert not kept.duplicated(["doc_id", "page", "word_id"]).any()


@SHORT
@given(tables, st.sampled_from([None, "clip"]))
def test_validator_short(rows, repair):
    check_validator(rows, repair)


@pytest.mark.slow
@LONG
@given(tables, st.sampled_from([None, "clip"]))
def test_validator_long(rows, repair):
    check_validator(rows, repair)


# --- importers: hOCR, ALTO and form JSON written from generated structures ---------------------

coordinate = st.one_of(st.integers(-20, 1200), st.sampled_from(["x", "", "1e999", "nan", "-0"]))
words = st.lists(st.tuples(texts, coordinate, coordinate, coordinate, coordinate), max_size=8)
pages = st.lists(st.tuples(st.integers(-5, 1000), st.integers(-5, 1000), words), min_size=0,
                 max_size=3)


def hocr(generated) -> str:
    body = []
    for width, height, page_words in generated:
        spans = "".join(f'<span class="ocrx_word" title="bbox {a} {b} {c} {d}">'
                        f'{sax.escape(text)}</span>' for text, a, b, c, d in page_words)
        body.append(f'<div class="ocr_page" title="bbox 0 0 {width} {height}">{spans}</div>')
    return f"<html><body>{''.join(body)}</body></html>"


def alto(generated) -> str:
    layout = []
    for width, height, page_words in generated:
        strings = "".join(f'<String CONTENT={sax.quoteattr(text)} HPOS="{a}" VPOS="{b}" '
                          f'WIDTH="{c}" HEIGHT="{d}"/>' for text, a, b, c, d in page_words)
        layout.append(f'<Page WIDTH="{width}" HEIGHT="{height}"><PrintSpace><TextBlock>'
                      f'<TextLine>{strings}</TextLine></TextBlock></PrintSpace></Page>')
    return ('<alto xmlns="http://www.loc.gov/standards/alto/ns-v4#"><Description>'
            '<MeasurementUnit>pixel</MeasurementUnit></Description>'
            f'<Layout>{"".join(layout)}</Layout></alto>')


def form_json(generated) -> str:
    import json

    def number(value):
        try:
            return int(value)
        except ValueError:
            return value

    entities = [{"id": i, "label": "other", "words": [
        {"text": text, "box": [number(a), number(b), number(c), number(d)]}
        for text, a, b, c, d in page_words]} for i, (_, _, page_words) in enumerate(generated)]
    return json.dumps({"form": entities})


WRITERS = {"hocr": (hocr, ".hocr"), "alto": (alto, ".xml"), "form_json": (form_json, ".json")}


def check_importer(kind: str, generated, folder) -> None:
    write, suffix = WRITERS[kind]
    path = folder / f"doc{suffix}"
    path.write_text(write(generated), encoding="utf-8")
    try:
        table, summary = import_sources([path], format=kind)
    except DocharError:
        event(f"{kind}: no words imported")
        return
    event(f"{kind}: words imported")
    assert summary.words_read == summary.words_kept + sum(summary.dropped.values())
    assert len(table) == summary.words_kept
    report = validate_word_table(table)
    assert report.problems == [], [str(p) for p in report.problems[:3]]


@SHORT
@given(st.sampled_from(sorted(WRITERS)), pages)
def test_importers_short(tmp_path, kind, generated):
    check_importer(kind, generated, tmp_path)


@pytest.mark.slow
@LONG
@given(st.sampled_from(sorted(WRITERS)), pages)
def test_importers_long(tmp_path, kind, generated):
    check_importer(kind, generated, tmp_path)


# --- graph builders on valid pages of any shape ------------------------------------------------

@st.composite
def valid_pages(draw) -> Page:
    n = draw(st.integers(0, 30))
    width = draw(st.sampled_from([1.0, 100.0, 612.0]))
    grid = draw(st.booleans())     # coincident and collinear words are the hard cases
    coords = st.integers(0, 4).map(float) if grid else st.floats(0, 1)
    xs = np.array([draw(coords) for _ in range(n)]) * (width / (4 if grid else 1))
    ys = np.array([draw(coords) for _ in range(n)]) * (width / (4 if grid else 1))
    sizes = np.array([draw(st.sampled_from([0.0, 0.5, 3.0])) for _ in range(n)])
    boxes = np.column_stack([xs, ys, np.minimum(xs + sizes, width), np.minimum(ys + sizes, width)])
    return Page(doc_id="d", page=1, word_ids=np.arange(n, dtype=np.int64),
                texts=[draw(texts) for _ in range(n)], boxes=boxes.reshape(n, 4), width=width,
                height=width)


def check_builders(page: Page, options: dict) -> None:
    for name in graphs.BUILDERS:
        edges = graphs.from_config({"name": name, "options": {}, **options})(page)
        edges.check_nodes(len(page), name)
        index = np.asarray(edges.edge_index)
        if index.size:
            assert index.min() >= 0 and index.max() < len(page)
            if not options.get("self_loops"):
                assert (index[0] != index[1]).all(), name


graph_options = st.fixed_dictionaries({"self_loops": st.booleans(),
                                       "reverse_edges": st.booleans(),
                                       "prune_gutters": st.booleans()})


@SHORT
@given(valid_pages(), graph_options)
def test_builders_short(page, options):
    check_builders(page, options)


@pytest.mark.slow
@LONG
@given(valid_pages(), graph_options)
def test_builders_long(page, options):
    check_builders(page, options)
