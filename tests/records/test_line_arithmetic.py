"""A line of count and unit price goes to the item whose amount their product is
(``line_arithmetic`` with ``row_anchor``; docs/records.md). Receipts drawn by hand; the
expected items worked out from count × unit price = amount (common practice: a receipt's own
arithmetic)."""

from __future__ import annotations

from dataclasses import replace

import pytest

from dochar.records.assemble import assemble_records
from dochar.records.shape import RecordShape, RecordShapeError
from tests.records.test_records import _words

SHAPE = RecordShape((), ("nm", "cnt", "unitprice", "price"), items_name="menu",
                    row_anchor="nm", once_per_item=("price", "unitprice"),
                    line_arithmetic=("cnt", "unitprice", "price"))


def _items(words, shape=SHAPE):
    (record,) = assemble_records(words, shape, label_col="label", group_col="entity_id")
    return record.parse(shape).get("menu", [])


# counts and unit prices printed above the item's name: 2 x 24,000 = 48,000 is the item below
ABOVE = _words([
    ("CAPPUCCINO", 40, 100, 100, 110, "nm", "l0"), ("28,000", 150, 100, 186, 110, "price", "l1"),
    ("2X", 40, 114, 52, 124, "cnt", "l2"), ("24,000", 70, 114, 106, 124, "unitprice", "l3"),
    ("ORANGE JUICE", 40, 128, 110, 138, "nm", "l4"),
    ("48,000", 150, 128, 186, 138, "price", "l5")])


def test_a_count_line_above_its_name_joins_the_item_below():
    assert _items(ABOVE) == [
        {"nm": "CAPPUCCINO", "price": "28,000"},
        {"nm": "ORANGE JUICE", "cnt": "2X", "unitprice": "24,000", "price": "48,000"}]
    # without the arithmetic the count line stays with the item above it
    assert _items(ABOVE, replace(SHAPE, line_arithmetic=())) == [
        {"nm": "CAPPUCCINO", "cnt": "2X", "unitprice": "24,000", "price": "28,000"},
        {"nm": "ORANGE JUICE", "price": "48,000"}]


@pytest.mark.parametrize("first, count, unit, second", [
    # 2 x 12.00 = 24.00, the price on the name's own line; the next item costs 24.00 too, so
    # the product names both and the line stays where the anchor rule puts it ("x12.00" reads
    # as 12.00)
    (("Tea", "24.00"), "2", "x12.00", ("Cake", "24.00")),
    # 3 x 5.00 = 15.00 is neither 20.00 (above) nor 16.00 (below)
    (("Rice", "20.00"), "3", "@5.00", ("Soup", "16.00")),
], ids=["product-is-both-amounts", "product-is-no-amount"])
def test_a_count_line_stays_with_the_item_above_unless_only_the_item_below_fits(
        first, count, unit, second):
    words = _words([
        (first[0], 40, 100, 64, 110, "nm", "l0"), (first[1], 150, 100, 180, 110, "price", "l1"),
        (count, 40, 114, 46, 124, "cnt", "l2"), (unit, 60, 114, 96, 124, "unitprice", "l3"),
        (second[0], 40, 128, 64, 138, "nm", "l4"),
        (second[1], 150, 128, 180, 138, "price", "l5")])
    assert _items(words) == [
        {"nm": first[0], "cnt": count, "unitprice": unit, "price": first[1]},
        {"nm": second[0], "price": second[1]}]


def test_a_unit_price_after_x_or_at_reads_as_its_amount():
    for mark in ("x", "@", "X "):
        words = ABOVE.copy()
        words.loc[3, "text"] = mark + "24,000"                       # the unit price's word
        assert _items(words)[1]["unitprice"] == mark + "24,000"     # moved: 2 x 24,000 = 48,000


def test_the_shape_reads_and_checks_line_arithmetic():
    block = {"item_columns": ["nm", "cnt", "unitprice", "price"], "row_anchor": "nm",
             "line_arithmetic": {"count": "cnt", "unit_price": "unitprice", "amount": "price"}}
    shape = RecordShape.from_mapping(block)
    assert shape.line_arithmetic == ("cnt", "unitprice", "price")
    assert RecordShape.from_mapping(shape.to_dict()) == shape      # a saved model's round trip
    bad = [({**block, "line_arithmetic": {"count": "cnt", "amount": "price"}},
            "line_arithmetic=.*expected a mapping of count, unit_price and amount"),
           ({**block, "line_arithmetic": {"count": "cnt", "unit_price": "unitprice",
                                          "amount": "total"}},
            "line_arithmetic.amount: label 'total' is not one of data.record.item_columns"),
           ({**block, "row_anchor": ""}, "line_arithmetic: .* set data.record.row_anchor")]
    for mapping, says in bad:
        with pytest.raises(RecordShapeError, match=f"config key data.record.{says}"):
            RecordShape.from_mapping(mapping)
