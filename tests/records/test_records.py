"""Records from words: shape checks, normalisation, row grouping, the synthetic round trip."""

from __future__ import annotations

import json
import math
from dataclasses import replace

import pandas as pd
import pytest

from dochar.records.assemble import assemble_records, parses, true_records
from dochar.records.normalise import NORMALISED, RAW, as_amount, as_date, normalise
from dochar.records.output import write_records
from dochar.records.shape import RecordShape, RecordShapeError

SHAPE = RecordShape(("cert_no", "date"), ("analyte", "result"), items_name="results",
                    date_fields=("date",), amount_fields=("result",))


def test_dates_become_iso_8601_day_first():
    # 05/03/2024 read day first is 5 March 2024 (the certificates' convention, common practice)
    assert as_date("05/03/2024") == "2024-03-05"
    assert as_date("05.03.2024") == "2024-03-05"
    assert as_date("Mar 5,  2024") == "2024-03-05"
    assert as_date("not a date") == "not a date"


def test_amounts_become_plain_decimals_and_other_texts_stay():
    # price-parser reads "45.000" with a point before three digits as 45 thousand
    assert as_amount("Rp 45.000") == "45000"
    assert as_amount("$ 3.50") == "3.5"
    assert as_amount("-2") == "-2"
    assert as_amount("<0.01") == "<0.01"          # a sign of limit is no amount sign: kept
    assert normalise("cert_no", " A  1 ", SHAPE, NORMALISED) == "A 1"
    assert normalise("cert_no", " A  1 ", SHAPE, RAW) == " A  1 "


def test_a_shape_names_known_labels_in_one_role():
    labels = ["cert_no", "date", "analyte", "result", "other"]
    shape = RecordShape.from_mapping({"header_fields": ["cert_no"], "item_columns": ["analyte"]},
                                     labels=labels)
    assert shape.labels == ("cert_no", "analyte") and shape.items_name == "items"
    with pytest.raises(RecordShapeError, match=r"data.record.item_columns: label 'analite' .*"
                                               r"did you mean analyte"):
        RecordShape.from_mapping({"item_columns": ["analite"]}, labels=labels)
    with pytest.raises(RecordShapeError, match="also in data.record.header_fields"):
        RecordShape.from_mapping({"header_fields": ["date"], "item_columns": ["date"]})
    with pytest.raises(RecordShapeError, match="data.record.date_fields: label 'lot'"):
        RecordShape.from_mapping({"header_fields": ["date"], "date_fields": ["lot"]})
    with pytest.raises(RecordShapeError, match="data.record.columns: unknown"):
        RecordShape.from_mapping({"columns": ["date"]})


def _words(rows):
    frame = pd.DataFrame(rows, columns=["text", "x0", "y0", "x1", "y1", "label", "entity_id"])
    return frame.assign(doc_id="d", page=1, word_id=range(len(frame)), probability=0.9)


# A drawn page: key "No." and its value, two dates stacked with their keys, then a table whose
# first row's analyte wraps onto a second line (9-point type, 11.7-point line pitch).
PAGE = _words([
    ("No.", 40, 40, 60, 49, "key", "k1"), ("C-17", 100, 40, 120, 49, "cert_no", "v1"),
    ("Received", 40, 52, 80, 61, "key", "k2"), ("05/03/2024", 100, 52, 145, 61, "date", "v2"),
    ("Reported", 40, 65, 80, 74, "key", "k3"), ("07/03/2024", 100, 65, 145, 74, "date", "v3"),
    ("Total", 40, 100, 62, 109, "analyte", "a1"), ("lead", 65, 100, 83, 109, "analyte", "a1"),
    ("0.50", 200, 100, 218, 109, "result", "r1"),
    ("content", 40, 111.7, 72, 120.7, "analyte", "a1"),
    ("Zinc", 40, 125, 58, 134, "analyte", "a2"), ("1.20", 200, 125, 218, 134, "result", "r2"),
])
TRUE_PARSE = {"cert_no": "C-17", "date": ["05/03/2024", "07/03/2024"],
              "results": [{"analyte": "Total lead content", "result": "0.50"},
                          {"analyte": "Zinc", "result": "1.20"}]}


def test_the_layout_rule_joins_wrapped_cells_and_keeps_stacked_dates_apart():
    (record,) = assemble_records(PAGE, SHAPE, label_col="label")
    assert record.parse(SHAPE) == TRUE_PARSE
    assert record.parse(SHAPE, NORMALISED)["date"] == ["2024-03-05", "2024-03-07"]
    assert record.parse(SHAPE, NORMALISED)["results"][0]["result"] == "0.5"


def test_rows_from_row_links_are_connected_components():
    links = pd.DataFrame({"doc_id": "d", "page": 1, "source": ["a1", "a2"],
                          "target": ["r1", "r2"], "kind": "row"})
    (record,) = true_records(PAGE, SHAPE, links)
    assert record.parse(SHAPE) == TRUE_PARSE
    # no links: every cell a row of its own
    (alone,) = true_records(PAGE, SHAPE, links.iloc[:0])
    assert len(alone.items) == 4


def test_records_files(tmp_path):
    records = assemble_records(PAGE, SHAPE, label_col="label")
    json_path, csv_path = write_records(records, SHAPE, tmp_path)
    (written,) = json.loads(json_path.read_text())
    assert written["fields"]["cert_no"]["text"] == "C-17"
    assert [d["text"] for d in written["fields"]["date"]] == ["05/03/2024", "07/03/2024"]
    first = written["results"][0]["analyte"]
    # the wrapped analyte: three words, union box, least probability
    assert first["word_ids"] == [6, 7, 9] and first["box"] == [40, 100, 83, 120.7]
    assert first["probability"] == 0.9
    table = pd.read_csv(csv_path, keep_default_na=False)
    assert table["item"].tolist() == [1, 2]
    assert table["date"].tolist() == ["05/03/2024 | 07/03/2024"] * 2
    assert table["analyte"].tolist() == ["Total lead content", "Zinc"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["records.csv", "records.json"]


def test_synthetic_round_trip_recovers_the_generators_records_from_true_labels():
    # true labels without groups or rows (the layout rule) against the generator's entities
    # and row links, on noisy certificates of every layout family
    from data_synth.generator import iter_documents_with_links
    from data_synth.layouts import LAYOUTS
    from data_synth.noise import NoiseConfig

    shape = RecordShape(("lab_name", "client", "cert_no", "sample_id", "date"),
                        ("analyte", "method", "result", "unit", "limit", "verdict"))
    documents = list(iter_documents_with_links(len(LAYOUTS) * 2, seed=3,
                                               noise=NoiseConfig(0.6, 0.01, 0.01, 0.01)))
    words = pd.concat([w for w, _ in documents], ignore_index=True)
    links = pd.concat([k for _, k in documents], ignore_index=True)
    truth = parses(true_records(words, shape, links), shape)
    assert all(len(tree["items"]) >= 3 for tree in truth.values())
    assert parses(assemble_records(words, shape, label_col="label"), shape) == truth


# A drawn receipt (10-point lines, 14-point pitch): an item whose count stands before its name,
# a sub-item line under it, an item of a name and a price, and an item whose count, unit price
# and price are on the line under its name, then a count and price of no name. A note line
# above the first name belongs to the first item.
RECEIPT_SHAPE = RecordShape(("total",), ("nm", "cnt", "unitprice", "price", "sub_nm"),
                            items_name="menu", row_anchor="nm", amount_fields=("price", "total"),
                            once_per_item=("price",))
RECEIPT = _words([
    ("TAKEAWAY", 40, 86, 90, 96, "sub_nm", "l0"),
    ("2", 20, 100, 26, 110, "cnt", "l1"), ("Green", 40, 100, 70, 110, "nm", "l2"),
    ("Tea", 72, 101, 90, 111, "nm", "l2"), ("20.00", 150, 100, 180, 110, "price", "l3"),
    ("less", 50, 114, 70, 124, "sub_nm", "l4"), ("ice", 72, 114, 86, 124, "sub_nm", "l4"),
    ("Cake", 40, 128, 64, 138, "nm", "l5"), ("5.00", 150, 129, 174, 139, "price", "l6"),
    ("Soup", 40, 142, 64, 152, "nm", "l7"),
    ("3", 20, 156, 26, 166, "cnt", "l8"), ("x4.00", 40, 156, 70, 166, "unitprice", "l9"),
    ("12.00", 150, 156, 180, 166, "price", "l10"),
    ("1", 20, 170, 26, 180, "cnt", "l13"), ("2.00", 150, 170, 174, 180, "price", "l14"),
    ("Total", 20, 194, 50, 204, "key", "k11"), ("39.00", 150, 194, 180, 204, "total", "l12"),
])


def test_an_anchor_column_opens_each_line_item():
    # worked by hand from the drawing above: three items, each opened by its name's line, and
    # a fourth opened by a second price under the third (an item has one price)
    expected = {"total": "39.00", "menu": [
        {"nm": "Green Tea", "cnt": "2", "price": "20.00", "sub_nm": "TAKEAWAY less ice"},
        {"nm": "Cake", "price": "5.00"},
        {"nm": "Soup", "cnt": "3", "unitprice": "x4.00", "price": "12.00"},
        {"cnt": "1", "price": "2.00"}]}
    (record,) = assemble_records(RECEIPT, RECEIPT_SHAPE, label_col="label",
                                 group_col="entity_id")
    assert record.parse(RECEIPT_SHAPE) == expected
    # the layout rule on the same receipt cuts the first and last items at their line breaks
    (by_layout,) = assemble_records(RECEIPT, replace(RECEIPT_SHAPE, row_anchor=""),
                                    label_col="label", group_col="entity_id")
    assert len(by_layout.items) > 3
    with pytest.raises(RecordShapeError, match="row_anchor: label 'total' is not one of "
                                               "data.record.item_columns"):
        RecordShape.from_mapping({"header_fields": ["total"], "item_columns": ["nm"],
                                  "row_anchor": "total"})
    assert RecordShape.from_mapping({"item_columns": ["nm"], "row_anchor": "nm"}).row_anchor == "nm"
    with pytest.raises(RecordShapeError, match="once_per_item: label 'total' is not one of "
                                               "data.record.item_columns"):
        RecordShape.from_mapping({"header_fields": ["total"], "item_columns": ["nm"],
                                  "once_per_item": ["total"]})


def test_sub_item_prices_and_discounts_repeat_within_one_item():
    # drawn by hand: a set menu with its price, two sub-item lines each with a price of its
    # own, a discount line, a second discount line; then the next item's count and price on a
    # line of no name. Only a second value of a once-per-item column (price) opens an item.
    words = _words([
        ("Paket", 40, 100, 70, 110, "nm", "l0"), ("45.00", 150, 100, 180, 110, "price", "l1"),
        ("Fries", 50, 114, 80, 124, "sub_nm", "l2"), ("0", 150, 114, 156, 124, "sub_price", "l3"),
        ("Cola", 50, 128, 74, 138, "sub_nm", "l4"), ("5.00", 150, 128, 174, 138, "sub_price", "l5"),
        ("-4.50", 150, 142, 180, 152, "discount", "l6"),
        ("-1.00", 150, 156, 180, 166, "discount", "l7"),
        ("2", 20, 170, 26, 180, "cnt", "l8"), ("9.00", 150, 170, 174, 180, "price", "l9")])
    shape = RecordShape((), ("nm", "cnt", "price", "discount", "sub_nm", "sub_price"),
                        items_name="menu", row_anchor="nm", once_per_item=("price",))
    (record,) = assemble_records(words, shape, label_col="label", group_col="entity_id")
    assert record.parse(shape)["menu"] == [
        {"nm": "Paket", "price": "45.00", "discount": "-4.50 -1.00", "sub_nm": "Fries Cola",
         "sub_price": "0 5.00"},
        {"cnt": "2", "price": "9.00"}]


def test_a_single_field_keeps_its_likeliest_piece_and_the_truth_keeps_every_piece():
    # two pieces labelled cert_no on two lines, least word probabilities 0.6 and 0.8 (worked by
    # hand): the prediction keeps "C-17" (0.8); the truth, whatever the shape, keeps both
    words = _words([
        ("No.", 40, 40, 60, 49, "key", "k1"), ("C-17", 100, 40, 120, 49, "cert_no", "v1"),
        ("Lot", 40, 80, 60, 89, "key", "k2"), ("L", 100, 80, 110, 89, "cert_no", "v2"),
        ("9", 112, 80, 118, 89, "cert_no", "v2"),
    ]).assign(probability=[0.9, 0.8, 0.9, 0.6, 0.95])
    single = replace(SHAPE, single_fields=("cert_no",))
    (record,) = assemble_records(words, single, label_col="label")
    assert record.parse(single) == {"cert_no": "C-17"}
    (plain,) = assemble_records(words, SHAPE, label_col="label")
    assert plain.parse(SHAPE) == {"cert_no": ["C-17", "L 9"]}
    (truth,) = true_records(words, single)
    assert truth.parse(single) == {"cert_no": ["C-17", "L 9"]}
    with pytest.raises(RecordShapeError, match="single_fields: label 'analyte' is not one of "
                                               "data.record.header_fields"):
        RecordShape.from_mapping({"header_fields": ["cert_no"], "item_columns": ["analyte"],
                                  "single_fields": ["analyte"]})


def test_an_item_lacking_a_required_column_is_left_out_and_the_truth_keeps_it():
    # a drawn table (9-point type, rows 20 points apart): a column-header word "Max." read as a
    # result stands alone on its line, then two full rows; worked by hand: with analyte
    # required, the lone "Max." row is left out and the two full rows stay; without the
    # requirement (and in the truth, whatever the shape) it is an item of its own
    words = _words([
        ("Max.", 200, 20, 230, 29, "result", "h1"),
        ("Lead", 40, 40, 70, 49, "analyte", "a1"), ("0.2", 200, 40, 215, 49, "result", "r1"),
        ("Zinc", 40, 60, 70, 69, "analyte", "a2"), ("4.1", 200, 60, 215, 69, "result", "r2"),
    ])
    full = [{"analyte": "Lead", "result": "0.2"}, {"analyte": "Zinc", "result": "4.1"}]
    required = replace(SHAPE, required_columns=("analyte",))
    (record,) = assemble_records(words, required, label_col="label", group_col="entity_id")
    assert record.parse(required) == {"results": full}
    (plain,) = assemble_records(words, SHAPE, label_col="label", group_col="entity_id")
    assert plain.parse(SHAPE) == {"results": [{"result": "Max."}, *full]}
    rows = pd.DataFrame({"doc_id": "d", "page": 1, "source": ["a1", "a2"],
                         "target": ["r1", "r2"], "kind": "row"})
    (truth,) = true_records(words, required, rows)
    assert truth.parse(required) == {"results": [{"result": "Max."}, *full]}
    assert RecordShape.from_mapping({"item_columns": ["analyte", "result"],
                                     "required_columns": ["analyte"]}).required_columns == (
        "analyte",)
    with pytest.raises(RecordShapeError, match="required_columns: label 'cert_no' is not one of "
                                               "data.record.item_columns"):
        RecordShape.from_mapping({"header_fields": ["cert_no"], "item_columns": ["analyte"],
                                  "required_columns": ["cert_no"]})


def _tilted_receipt(degrees: float) -> pd.DataFrame:
    """Four line items (count, a three-word name, price; 20-unit type, 30-unit line pitch)
    photographed turned by ``degrees`` about the page's top-left corner: each word's box is the
    upright bounding box of its turned rectangle."""
    turn = math.radians(degrees)
    rows = []
    for item in range(4):
        top = 100 + 30 * item
        cells = [("1", 10, 25, "menu.cnt"), ("Kopi", 40, 90, "menu.nm"),
                 ("susu", 95, 145, "menu.nm"), (f"gula{item}", 150, 200, "menu.nm"),
                 (f"{item + 1}0.000", 400, 460, "menu.price")]
        for text, x0, x1, label in cells:
            corners = [(x, y) for x in (x0, x1) for y in (top, top + 20)]
            xs = [x * math.cos(turn) - y * math.sin(turn) for x, y in corners]
            ys = [x * math.sin(turn) + y * math.cos(turn) for x, y in corners]
            rows.append((text, min(xs), min(ys), max(xs), max(ys), label, ""))
    return _words(rows)


def test_a_tilted_photo_keeps_each_price_with_its_item():
    # Words on one line turned by 4 degrees have centres on a line of slope tan(4°) = 0.0699
    # (plane geometry, worked by hand): the price, 400 units right of the count, sits 29 units
    # higher, a whole line pitch, so level bands would give it to the item above.
    from dochar.records.rows import page_slope

    words = _tilted_receipt(4.0)
    boxes = words[["x0", "y0", "x1", "y1"]].to_numpy(float)
    assert page_slope(boxes) == pytest.approx(math.tan(math.radians(4.0)), abs=1e-9)
    assert page_slope(_tilted_receipt(0.0)[["x0", "y0", "x1", "y1"]].to_numpy(float)) == 0.0
    shape = RecordShape((), ("menu.nm", "menu.cnt", "menu.price"), items_name="menu",
                        row_anchor="menu.nm", once_per_item=("menu.price",))
    (record,) = assemble_records(words, shape, label_col="label")
    assert record.parse(shape)["menu"] == [
        {"menu.nm": f"Kopi susu gula{i}", "menu.cnt": "1", "menu.price": f"{i + 1}0.000"}
        for i in range(4)]
