"""Receipt JSON import, checked against CORD's own files read independently (json and plain
Python here) and against the counts its README gives (../shared/datasets/cord/README.md)."""

from __future__ import annotations

import json
from collections import Counter, defaultdict

import pytest

from dochar.data.importers import detect_format, import_sources
from dochar.data.importers.cord import COARSE_LABELS, import_receipts, read_receipt_file
from dochar.data.importers.base import ImportSummary
from dochar.data.word_table import WordTableError, validate_word_table


def _independent_counts(folder):
    """Words, lines, value lines, row links and splits, read straight from the JSON files."""
    words = blank = lines = 0
    value_lines = 0
    row_links = 0
    categories: Counter = Counter()
    splits: dict[str, str] = {}
    for path in sorted(folder.glob("*.json")):
        receipt = json.loads(path.read_text())
        number = receipt["meta"]["image_id"]
        splits[path.stem] = "test" if number % 5 == 0 else "val" if number % 10 == 1 else "train"
        items = defaultdict(int)
        for line in receipt["valid_line"]:
            lines += 1
            categories[line["category"]] += 1
            texts = [w["text"].strip() for w in line["words"]]
            words += len(texts)
            blank += sum(1 for t in texts if not t)
            has_value = any(t and not w["is_key"] for t, w in zip(texts, line["words"]))
            value_lines += has_value
            if has_value and line["category"].split(".")[0] in ("menu", "void_menu"):
                items[line["group_id"]] += 1
        # a line item of n value lines is chained by n - 1 row links
        row_links += sum(n - 1 for n in items.values())
    return words, blank, lines, value_lines, row_links, categories, splits


def test_cord_matches_an_independent_reading(cord_root):
    folder = cord_root / "json"
    frame, report = import_receipts([folder])
    words, blank, lines, value_lines, row_links, categories, splits = _independent_counts(folder)
    # CORD README here: 600 receipts, 14,345 words on 8,268 lines in 29 categories
    assert (report.files, words, lines, len(categories)) == (600, 14345, 8268, 29)
    assert report.words_read == words and len(frame) == words - blank
    assert report.dropped["words without text"] == blank
    assert frame.groupby("doc_id")["split"].first().to_dict() == splits
    assert Counter(splits.values()) == {"train": 420, "val": 60, "test": 120}
    assert len(report.links) == row_links
    assert {link["kind"] for link in report.links} == {"row"}
    # one value entity per line with a value word (key words are entities of their own)
    values = frame[frame["label"] != "key"][["doc_id", "entity_id"]].drop_duplicates()
    assert len(values) == value_lines
    checked = validate_word_table(frame, [*categories, "key"])
    assert checked.problems == [] and checked.documents_used == 600


def test_first_line_item_of_receipt_3(cord_root):
    # receipt_00003.json by eye: "Bintang Bremer" (menu.nm) | "1" (menu.cnt) | "59,000"
    # (menu.price) on one printed row, group_id 32; the quad of "Bintang" spans x 183..317,
    # y 765..806
    frame, report = import_receipts([cord_root / "json" / "receipt_00003.json"])
    first = frame.iloc[:4]
    assert first["text"].tolist() == ["Bintang", "Bremer", "1", "59,000"]
    assert first["label"].tolist() == ["menu.nm", "menu.nm", "menu.cnt", "menu.price"]
    assert first.iloc[0][["x0", "y0", "x1", "y1"]].tolist() == [183, 765, 317, 806]
    chained = [(link["source"], link["target"]) for link in report.links]
    names = dict(zip(frame["entity_id"], frame["text"]))
    assert (first["entity_id"].iloc[1], first["entity_id"].iloc[2]) in chained
    assert names[first["entity_id"].iloc[2]] == "1"
    assert frame["split"].iloc[0] == "train"      # id 3: neither 3 % 5 == 0 nor 3 % 10 == 1


def test_coarse_map_covers_every_category_seen(cord_root):
    frame, _ = import_receipts([cord_root / "json"], label_map="coarse")
    fine, _ = import_receipts([cord_root / "json"])
    assert set(frame["label"]) <= {*COARSE_LABELS, "key"}
    # the coarse label of each word is the one its fine category maps to
    mapping = {fine_name: coarse for coarse, names in COARSE_LABELS.items()
               for fine_name in names}
    expected = [label if label == "key" else mapping[label] for label in fine["label"]]
    assert frame["label"].tolist() == expected


def _receipt(lines, size=(100, 50)):
    return {"meta": {"image_id": 7, "image_size": {"width": size[0], "height": size[1]}},
            "valid_line": lines}


def _word(text, x0, y0, x1, y1, key=0, row=1):
    return {"text": text, "is_key": key, "row_id": row,
            "quad": {"x1": x0, "y1": y0, "x2": x1, "y2": y0, "x3": x1, "y3": y1,
                     "x4": x0, "y4": y1}}


def test_bad_input_is_located_and_counted(tmp_path):
    broken = tmp_path / "receipt_00001.json"
    broken.write_text('{"valid_line": [ {"category": ')
    summary = ImportSummary()
    assert read_receipt_file(broken, summary) == []
    assert str(broken) in str(summary.problems[0]) and "file skipped" in str(summary.problems[0])
    odd = tmp_path / "receipt_00002.json"
    bad = _word("12", 0, 0, 10, 10)
    bad["quad"]["x3"] = "wide"
    odd.write_text(json.dumps(_receipt([
        {"category": "menu.nm", "group_id": 1, "words": [_word("Tea", 90, 5, 130, 15), bad]},
        {"category": "menu.price", "group_id": 1, "words": [_word(" ", 50, 5, 60, 15)]}])))
    rows = read_receipt_file(odd, summary)
    # "Tea" reaches x 130 on a page 100 wide: clipped to 100 (counted); the quad with "wide"
    # is a located problem; the blank word is dropped (counted): read 3 = kept 1 + dropped 2
    assert [(r["text"], r["x1"]) for r in rows] == [("Tea", 100.0)]
    assert summary.repairs["boxes clipped to the page"] == 1
    assert "valid_line[0].words[1]" in str(summary.problems[1])
    assert summary.words_read == 3 and summary.words_kept == 1
    assert sum(summary.dropped.values()) == 2
    with pytest.raises(WordTableError, match="label_map"):
        import_receipts([odd], label_map="medium")


def test_receipts_are_told_from_forms_by_content(tmp_path):
    receipt = tmp_path / "a.json"
    receipt.write_text(json.dumps(_receipt([
        {"category": "total.total_price", "group_id": 3,
         "words": [_word("TOTAL", 5, 5, 30, 15, key=1), _word("9,000", 60, 5, 90, 15)]}])))
    form = tmp_path / "b.json"
    form.write_text(json.dumps({"form": []}))
    assert detect_format(receipt) == "receipt_json" and detect_format(form) == "form_json"
    table, summary = import_sources([receipt])
    # key word and value word: same line, entities kept apart, the key labelled "key"
    assert table["label"].tolist() == ["key", "total.total_price"]
    assert table["entity_id"].tolist() == ["l0.key", "l0"]
    assert summary.links == []     # no line item, no row links
