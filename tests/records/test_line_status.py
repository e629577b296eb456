"""Each printed line read whole, as an item or as a sub-item (dochar.records.line_status).

The rule (docs/records.md): the cells whose best label is an item or a sub-item column are cut
into line bands; a band takes the reading, item or sub-item, whose product of its cells'
probabilities is larger, and a cell's label becomes its column in that reading, with the
probability of both forms together. Expected values are worked by hand below; the brute-force
check multiplies probabilities directly instead of summing logarithms.
"""

from __future__ import annotations

import itertools
from types import SimpleNamespace

import numpy as np
import pytest

from dochar.records.line_status import column_pairs, settle_lines, settle_pages
from dochar.records.shape import RecordShape, RecordShapeError

LABELS = ["other", "nm", "sub_nm", "cnt", "sub_cnt", "price", "sub_price"]
SHAPE = RecordShape(header_fields=("other",), item_columns=tuple(LABELS[1:]),
                    sub_item_columns=(("sub_nm", "nm"), ("sub_cnt", "cnt"),
                                      ("sub_price", "price")))
PAIRS = column_pairs(SHAPE, LABELS)


def row(**chances: float) -> list[float]:
    return [chances.get(label, 0.0) for label in LABELS]


def test_a_line_takes_the_reading_with_the_larger_product():
    # one line of three cells: count, name, price (x0 10, 40, 200; same height)
    boxes = np.array([[10, 100, 20, 110], [40, 100, 150, 110], [200, 101, 240, 111]], float)
    found = np.array([row(other=0.1, cnt=0.6, sub_cnt=0.3),
                      row(other=0.05, nm=0.1, sub_nm=0.85),
                      row(other=0.1, price=0.5, sub_price=0.4)])
    # items: 0.6 * 0.1 * 0.5 = 0.030; sub-items: 0.3 * 0.85 * 0.4 = 0.102 -> sub-items
    settled = settle_lines(boxes, found, PAIRS)
    assert [LABELS[i] for i in settled.argmax(axis=1)] == ["sub_cnt", "sub_nm", "sub_price"]
    assert settled[:, LABELS.index("sub_cnt")][0] == pytest.approx(0.9)     # 0.6 + 0.3
    assert settled[:, LABELS.index("sub_nm")][1] == pytest.approx(0.95)     # 0.1 + 0.85
    assert settled[:, LABELS.index("sub_price")][2] == pytest.approx(0.9)   # 0.5 + 0.4
    assert settled[:, [1, 3, 5]].sum() == 0.0                               # no item form left
    assert settled.sum(axis=1) == pytest.approx([1.0, 1.0, 1.0])
    assert settled[:, 0] == pytest.approx(found[:, 0])                      # other untouched


def test_a_network_s_float32_probabilities_stay_probabilities():
    """Two float32 probabilities of a row summing past 1 by rounding are cut to 1, and the
    array keeps its dtype (a probability above 1 is refused by the scores downstream)."""
    boxes = np.array([[10, 100, 20, 110]], float)
    found = np.array([row(nm=0.6, sub_nm=0.4)], dtype=np.float32)
    found[0, LABELS.index("sub_nm")] = np.float32(0.4) + np.float32(1e-7)
    assert found[0].sum(dtype=np.float32) > np.float32(1.0)
    settled = settle_lines(boxes, found, PAIRS)
    assert settled.dtype == np.float32
    assert settled.max() == 1.0


def test_lines_are_decided_apart_and_other_cells_stay():
    boxes = np.array([[10, 100, 20, 110], [40, 100, 150, 110],        # line 1: count, name
                      [10, 130, 20, 140], [40, 130, 150, 140],        # line 2: count, name
                      [200, 130, 240, 140]], float)                   # line 2: a total
    found = np.array([row(cnt=0.8, sub_cnt=0.2), row(nm=0.45, sub_nm=0.55),
                      row(cnt=0.4, sub_cnt=0.6), row(nm=0.3, sub_nm=0.7),
                      row(other=0.9, price=0.1)])
    # line 1: items 0.8 * 0.45 = 0.36 > sub 0.2 * 0.55 = 0.11; line 2: sub 0.42 > items 0.12
    settled = settle_lines(boxes, found, PAIRS)
    assert [LABELS[i] for i in settled.argmax(axis=1)] == ["cnt", "nm", "sub_cnt", "sub_nm",
                                                           "other"]
    assert settled[4] == pytest.approx(found[4])


def test_a_tilted_line_is_one_band():
    """A photo held at a slant (slope 0.1): the price at a line's right end sits 40 px above
    the name at its left end, four line heights, yet both are one printed line. Words between
    them (other labels) give the page its slope, as on a receipt."""
    xs = np.arange(0, 401, 40.0)
    lines = [[x, 100 + 60 * k + 0.1 * x, x + 30, 110 + 60 * k + 0.1 * x]
             for k in range(3) for x in xs]
    boxes = np.array(lines)
    found = np.array([row(other=1.0)] * len(boxes))
    name, price = 0, len(xs) - 1          # the first line's two ends
    found[name] = row(nm=0.1, sub_nm=0.9)
    found[price] = row(price=0.55, sub_price=0.45)
    # one band: sub-items 0.9 * 0.45 = 0.405 > items 0.1 * 0.55 = 0.055; apart, the price
    # would stay an item price
    settled = settle_lines(boxes, found, PAIRS)
    assert LABELS[settled[price].argmax()] == "sub_price"
    assert LABELS[settled[name].argmax()] == "sub_nm"


def test_a_tie_keeps_the_item_reading():
    boxes = np.array([[10, 100, 20, 110], [40, 100, 150, 110]], float)
    found = np.array([row(cnt=0.5, sub_cnt=0.5), row(nm=0.2, sub_nm=0.8)])
    found_swapped = np.array([row(cnt=0.8, sub_cnt=0.2), row(nm=0.5, sub_nm=0.5)])
    assert LABELS[settle_lines(boxes, found, PAIRS).argmax(axis=1)[0]] == "sub_cnt"
    # 0.8 * 0.5 = 0.4 against 0.2 * 0.5 = 0.1: items
    assert [LABELS[i] for i in settle_lines(boxes, found_swapped, PAIRS).argmax(axis=1)] == [
        "cnt", "nm"]
    equal = np.array([row(cnt=0.5, sub_cnt=0.5), row(nm=0.5, sub_nm=0.5)])
    assert [LABELS[i] for i in settle_lines(boxes, equal, PAIRS).argmax(axis=1)] == ["cnt", "nm"]


def test_brute_force_agrees_on_random_lines():
    """Every band's reading against the product over its cells, multiplied directly."""
    rng = np.random.default_rng(11)
    for _ in range(200):
        cells = int(rng.integers(1, 5))
        boxes = np.array([[40 * i, 100, 40 * i + 30, 110] for i in range(cells)], float)
        found = rng.dirichlet(np.full(len(LABELS), 0.5), size=cells)
        best = found.argmax(axis=1)
        settled = settle_lines(boxes, found, PAIRS)
        menu = [i for i in range(cells) if best[i] != 0]
        if not menu:
            assert np.array_equal(settled, found)
            continue
        column = {i: (best[i] - 1) // 2 for i in menu}   # 0 nm, 1 cnt, 2 price
        products = {reading: np.prod([found[i, 1 + 2 * column[i] + reading] for i in menu])
                    for reading in (0, 1)}               # 0 item, 1 sub-item
        reading = 1 if products[1] > products[0] else 0
        for i in menu:
            assert settled[i].argmax() == 1 + 2 * column[i] + reading


def test_without_sub_item_columns_the_probabilities_are_as_given():
    page = SimpleNamespace(boxes=np.array([[0, 0, 10, 10]], float))
    found = [np.array([row(nm=0.4, sub_nm=0.6)])]
    plain = RecordShape(header_fields=("other",), item_columns=tuple(LABELS[1:]))
    assert settle_pages([page], found, LABELS, plain) is not None
    assert np.array_equal(settle_pages([page], found, LABELS, plain)[0], found[0])
    assert np.array_equal(settle_pages([page], found, LABELS, None)[0], found[0])


def test_the_shape_reads_and_checks_sub_item_columns():
    block = {"item_columns": ["nm", "sub_nm", "cnt"], "sub_item_columns": {"sub_nm": "nm"}}
    shape = RecordShape.from_mapping(block)
    assert shape.sub_item_columns == (("sub_nm", "nm"),)
    assert RecordShape.from_mapping(shape.to_dict()) == shape      # a saved model's round trip
    for bad, says in [({"sub_nm": "total"}, "label 'total' is not one of data.record.item_columns"),
                      (["sub_nm", "nm"], "expected a mapping"),
                      ({"nm": "nm"}, "names itself")]:
        with pytest.raises(RecordShapeError, match=f"data.record.sub_item_columns.*{says}"
                           if says != "expected a mapping" else says):
            RecordShape.from_mapping({**block, "sub_item_columns": bad})


def test_pairs_skip_labels_a_model_does_not_know():
    assert column_pairs(SHAPE, ["other", "nm", "sub_nm"]).tolist() == [[2, 1]]
    assert list(itertools.chain(*column_pairs(None, LABELS))) == []
