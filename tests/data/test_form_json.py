"""Form-annotation JSON import, checked against FUNSD's own published counts."""

from __future__ import annotations

import json
import struct

import pytest

from dochar.data.importers.form_json import import_form_json, png_size
from dochar.data.word_table import validate_word_table

FUNSD_LABELS = ["header", "question", "answer", "other"]


def test_funsd_counts_match_the_dataset_readme(funsd_root):
    frame, report = import_form_json([funsd_root], empty_text="keep")
    # FUNSD README / Jaume et al. 2019: 199 forms, 31,485 words; 149 training, 50 test forms
    assert report.files == 199
    assert len(frame) == 31485
    assert frame.groupby("split")["doc_id"].nunique().to_dict() == {"test": 50, "train": 149}
    # entity counts from the dataset README: 7,411 training and 2,332 test entities
    entities = frame.groupby("split").apply(lambda f: f[["doc_id", "entity_id"]]
                                            .drop_duplicates().shape[0], include_groups=False)
    assert entities.to_dict() == {"test": 2332, "train": 7411}


def test_empty_words_are_counted_never_silently_dropped(funsd_root):
    kept, kept_report = import_form_json([funsd_root], empty_text="keep")
    dropped, drop_report = import_form_json([funsd_root], empty_text="drop")
    blank = drop_report.dropped["words without text"]
    assert blank == kept_report.kept_as_given["words without text"] > 0
    assert len(dropped) + blank == len(kept)
    # words read = words kept + words dropped, under either choice
    for frame, report in ((kept, kept_report), (dropped, drop_report)):
        assert report.words_read == report.words_kept + sum(report.dropped.values()) == \
            len(frame) + sum(report.dropped.values())
    report = validate_word_table(dropped, FUNSD_LABELS)
    assert report.problems == [] and report.documents_used == 199


def test_page_size_read_from_the_scan(funsd_root):
    image = next((funsd_root / "training_data" / "images").glob("*.png"))
    width, height = png_size(image)
    frame, _ = import_form_json([funsd_root / "training_data" / "annotations" /
                                 f"{image.stem}.json"])
    assert (frame["page_width"].iloc[0], frame["page_height"].iloc[0]) == (width, height)
    assert (frame["x1"] <= width).all() and (frame["y1"] <= height).all()


def test_reversed_and_overhanging_boxes_are_repaired(tmp_path):
    form = {"form": [{"id": 3, "label": "answer", "text": "7 8", "box": [0, 0, 0, 0],
                      "words": [{"text": "7", "box": [30, 20, 10, 5]},
                                {"text": "8", "box": [40, 5, 5000, 20]},
                                {"text": " ", "box": [1, 1, 2, 2]}]}]}
    (tmp_path / "annotations").mkdir()
    (tmp_path / "images").mkdir()
    path = tmp_path / "annotations" / "form.json"
    path.write_text(json.dumps(form))
    # a PNG signature and IHDR chunk (PNG spec, ISO/IEC 15948: width, height as big-endian u32)
    ihdr = struct.pack(">I4sIIBBBBB", 13, b"IHDR", 100, 50, 8, 0, 0, 0, 0)
    (tmp_path / "images" / "form.png").write_bytes(b"\x89PNG\r\n\x1a\n" + ihdr + b"\0" * 4)
    frame, report = import_form_json([path])
    assert frame[["x0", "y0", "x1", "y1"]].values.tolist() == [[10, 5, 30, 20], [40, 5, 100, 20]]
    assert report.repairs == {"boxes with swapped corners put in order": 1,
                              "boxes clipped to the page": 1}
    assert report.dropped == {"words without text": 1}
    assert (report.words_read, report.words_kept) == (3, 2)
    assert frame["entity_id"].tolist() == ["e3", "e3"]


def test_broken_file_is_reported(tmp_path):
    (tmp_path / "bad.json").write_text("{not json")
    frame, report = import_form_json([tmp_path])
    assert len(frame) == 0 and len(report.problems) == 1 and "bad.json" in str(report.problems[0])


def test_bad_option():
    with pytest.raises(ValueError, match="empty_text"):
        import_form_json([], empty_text="maybe")


def test_funsd_linking_fields_become_key_value_links(funsd_root):
    # FUNSD testing_data/annotations/82092117.json, read by hand: entity 1 "TO:" (question) and
    # 14 "George Baroody" (answer) list [1, 14]; 13 "FAX NO." (question) and 12 "(614) 466-
    # 5087" (answer) list [13, 12]; 3 "3" (answer) and 19 "NUMBER OF PAGES INCLUDING COVER
    # SHEET:" (question) list [19, 3]; 22 "SPECIAL INSTRUCTIONS:" (question) lists none.
    # The file lists 9 distinct pairs, each on both of its entities.
    path = funsd_root / "testing_data" / "annotations" / "82092117.json"
    _, report = import_form_json([path])
    links = report.links_frame()
    pairs = set(zip(links["source"], links["target"]))
    assert {("e1", "e14"), ("e13", "e12"), ("e19", "e3")} <= pairs   # question -> answer
    assert ("e14", "e1") not in pairs and ("e3", "e19") not in pairs
    assert not any("e22" in pair for pair in pairs)
    assert len(links) == 9
    assert set(links["kind"]) == {"key_value"} and set(links["doc_id"]) == {"82092117"}
    # the one pair of FUNSD written question-first towards its heading, read by hand from
    # training_data/annotations/00866042.json: entity 43 "PROTECTIVE PRECAUTIONS REQUIRED:" (question)
    # and 44 "HAZARDOUS, COMPOUND" (header) list [43, 44]; the heading is the source
    _, report = import_form_json([funsd_root / "training_data" / "annotations" /
                                  "00866042.json"])
    pairs = set(zip(report.links_frame()["source"], report.links_frame()["target"]))
    assert ("e44", "e43") in pairs and ("e43", "e44") not in pairs


def test_link_orientation_follows_the_labels(tmp_path):
    # header -> question -> answer whatever order the pair is written in; 'other' keeps it
    form = {"form": [
        {"id": 0, "label": "answer", "words": [{"text": "A", "box": [0, 0, 5, 5]}],
         "linking": [[0, 1]]},
        {"id": 1, "label": "question", "words": [{"text": "Q", "box": [6, 0, 9, 5]}],
         "linking": [[0, 1], [2, 1]]},
        {"id": 2, "label": "header", "words": [{"text": "H", "box": [0, 6, 5, 9]}],
         "linking": [[2, 1]]},
        {"id": 3, "label": "other", "words": [{"text": "O", "box": [6, 6, 9, 9]}],
         "linking": [[3, 0]]}]}
    path = tmp_path / "form.json"
    path.write_text(json.dumps(form))
    _, report = import_form_json([path])
    assert report.links_frame()[["source", "target"]].values.tolist() == [
        ["e1", "e0"], ["e2", "e1"], ["e3", "e0"]]
