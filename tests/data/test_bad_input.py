"""Bad input, class by class: each gives a located error or a documented, counted repair.

The ``BI-nn`` numbers are the rows of the "Bad input" table in docs/data-formats.md. Expected locations and
counts are worked out by hand from the tiny inputs written here; the rules are the word-table
format in docs/data-formats.md (common practice for OCR word tables: one row per word, a box inside its
page). "Located" means the message names the file and the row/column, page or element.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from dochar.data.importers import import_sources
from dochar.data.sources import load_data
from dochar.data.word_table import (
    REQUIRED_COLUMNS,
    WordTableError,
    iter_pages,
    read_word_table,
    validate_word_table,
    write_word_table,
)
from dochar.errors import DocharError

LABELS = ["key", "value", "other"]


def word(doc: str = "d", word_id=0, x0=10.0, y0=10.0, x1=20.0, y1=15.0, **extra) -> dict:
    row = {"doc_id": doc, "page": 1, "word_id": word_id, "text": f"w{word_id}", "x0": x0,
           "y0": y0, "x1": x1, "y1": y1, "page_width": 100.0, "page_height": 200.0,
           "label": "other"}
    return {**row, **extra}


def check(rows: list[dict], **options):
    return validate_word_table(pd.DataFrame(rows), LABELS, source="words.csv", **options)


def only_problem(report):
    assert len(report.problems) == 1, [str(p) for p in report.problems]
    return report.problems[0]


def balanced(report) -> None:
    """documents in = documents used + documents reported, and the table holds only the used."""
    assert report.documents_in == report.documents_used + report.documents_reported
    assert report.table["doc_id"].nunique() == report.documents_used


def write_csv(path, text: str):
    path.write_text(text, encoding="utf-8")
    return path


HEADER = ",".join(REQUIRED_COLUMNS)


# --- files that cannot be read whole ---------------------------------------------------------

def test_bi01_malformed_csv_names_file_and_line(tmp_path):
    path = write_csv(tmp_path / "w.csv", f"{HEADER}\nd,1,0,a,1,1,2,2,10,10\n"
                                         f"d,1,1,b,1,1,2,2,10,10,surplus,field\n")
    with pytest.raises(WordTableError, match=r"w\.csv: malformed CSV .*line 3"):
        read_word_table(path)


def test_bi02_truncated_csv_row_is_located(tmp_path):
    path = write_csv(tmp_path / "w.csv", f"{HEADER}\nd,1,0,a,1,1,2,2,10,10\ne,1,0,b,1,1,2")
    report = validate_word_table(read_word_table(path))
    columns = {p.column for p in report.problems}
    assert columns == {"y1", "page_width", "page_height"} and {p.row for p in report.problems} == {2}
    assert (report.documents_in, report.documents_used) == (2, 1)
    balanced(report)


def test_bi03_truncated_parquet_is_named(tmp_path):
    good = write_word_table(pd.DataFrame([word()]), tmp_path / "w.parquet")
    good.write_bytes(good.read_bytes()[:-20])
    with pytest.raises(WordTableError, match=r"w\.parquet: not a readable Parquet file"):
        read_word_table(good)


def test_bi04_not_utf8_csv(tmp_path):
    path = tmp_path / "w.csv"
    path.write_bytes(f"{HEADER}\n".encode() + b"d,1,0,\xff\xfe,1,1,2,2,10,10\n")
    with pytest.raises(WordTableError, match=r"w\.csv: not UTF-8 text"):
        read_word_table(path)


def test_bi05_unreadable_file_is_named(tmp_path):
    (tmp_path / "w.csv").mkdir()       # a folder where a file should be: open() fails
    with pytest.raises(WordTableError, match=r"w\.csv: cannot read the file"):
        read_word_table(tmp_path / "w.csv")
    with pytest.raises(WordTableError, match=r"nothere\.csv: no such word table"):
        read_word_table(tmp_path / "nothere.csv")


def test_bi06_empty_file(tmp_path):
    with pytest.raises(WordTableError, match=r"w\.csv: empty file"):
        read_word_table(write_csv(tmp_path / "w.csv", ""))


# --- columns ---------------------------------------------------------------------------------

def test_bi07_missing_column_names_it():
    frame = pd.DataFrame([word()]).drop(columns=["page_height"])
    with pytest.raises(WordTableError, match=r"words\.csv: missing required column.*page_height"):
        validate_word_table(frame, LABELS, source="words.csv")


def test_bi08_duplicated_column_is_refused(tmp_path):
    path = write_csv(tmp_path / "w.csv", f"{HEADER},x0\nd,1,0,a,1,1,2,2,10,10,5\n")
    with pytest.raises(WordTableError, match=r"w\.csv: column\(s\) \['x0'\] appear more than once"):
        read_word_table(path)
    frame = pd.concat([pd.DataFrame([word()]), pd.DataFrame({"x0": [3.0]})], axis=1)
    with pytest.raises(WordTableError, match=r"\['x0'\] appear more than once"):
        validate_word_table(frame, LABELS)


def test_bi09_extra_columns_are_carried_unused():
    report = check([word(colour="red")])
    assert report.problems == [] and report.table["colour"].tolist() == ["red"]


def test_bi10_wrong_types_are_located_or_read_as_text():
    report = check([word("a"), word("b", x0="left")])
    problem = only_problem(report)
    assert (problem.doc_id, problem.row, problem.column) == ("b", 2, "x0")
    assert "'left' is not a finite number" in problem.message
    numbers_as_text = check([word(doc=7, text=12345)])     # a Parquet file may hold numbers
    assert numbers_as_text.table[["doc_id", "text"]].values.tolist() == [["7", "12345"]]


# --- ids and pages ---------------------------------------------------------------------------

def test_bi11_fractional_word_id_is_not_merged_with_its_neighbour():
    """The issue's case: ids 0 and 0.5 on one page were cast to 0 and 0 and merged."""
    problem = only_problem(check([word(word_id=0), word(word_id=0.5, x0=30, x1=40)]))
    assert (problem.row, problem.column) == (2, "word_id")
    assert "0.5 is not a whole number" in problem.message


def test_bi12_fractional_page_is_located():
    problem = only_problem(check([word(page=0), word(word_id=1, page=0.7)]))
    assert (problem.row, problem.column, problem.message) == (2, "page", "0.7 is not a whole number")


def test_bi13_negative_ids_and_pages():
    report = check([word("a", word_id=-1), word("b", page=-2)])
    assert [(p.row, p.column) for p in report.problems] == [(2, "page"), (1, "word_id")]
    assert all("is negative" in p.message for p in report.problems)
    assert report.documents_used == 0


def test_bi14_huge_id_is_located():
    problem = only_problem(check([word(word_id=1e15)]))
    assert problem.column == "word_id" and "larger than" in problem.message


# --- coordinates -----------------------------------------------------------------------------

@pytest.mark.parametrize("value, shown", [(math.nan, "nan"), (math.inf, "inf"),
                                          (-math.inf, "-inf")])
def test_bi15_nan_and_infinite_coordinates(value, shown):
    problem = only_problem(check([word(y0=value)]))
    assert problem.column == "y0" and problem.message == f"{shown} is not a finite number"


def test_bi16_negative_coordinate_is_left_of_the_page():
    problem = only_problem(check([word(x0=-3)]))
    assert problem.column == "x0" and "left of the page" in problem.message


def test_bi17_huge_page_size():
    problem = only_problem(check([word(page_width=1e12, x1=20)]))
    assert problem.column == "page_width" and "larger than 1e+06" in problem.message


def test_bi18_zero_area_box_is_kept_and_builds_graphs():
    """A full stop or a rule can be read with zero width: kept (documented), and every
    builder handles it."""
    from dochar import graphs

    rows = [word(word_id=0, x0=10, x1=10, y0=10, y1=10), word(word_id=1, x0=30, x1=40),
            word(word_id=2, x0=10, x1=20, y0=50, y1=60)]
    report = check(rows)
    assert report.problems == []
    page = next(iter_pages(report.table))
    for name in graphs.BUILDERS:
        edges = graphs.make_graph_builder(name)(page)
        edges.check_nodes(len(page), name)


def test_bi19_inverted_box_is_located():
    problem = only_problem(check([word(y0=30, y1=20)]))
    assert (problem.column, problem.message) == ("y1", "y1 20 is above y0 30")


def test_bi20_overhang_is_named_by_its_side():
    """The issue's case: an x1 past the right edge was reported in column x0."""
    report = check([word("a", x1=150), word("b", y1=250)])
    assert [(p.doc_id, p.column) for p in report.problems] == [("a", "x1"), ("b", "y1")]
    assert "x1 150 is right of the page" in report.problems[0].message


def test_bi21_clip_repair_within_tolerance_is_counted():
    """OCR boxes a few pixels past the edge: repair=clip clips overhangs up to 1% of the page
    (page 100 x 200: 1 unit in x, 2 in y); farther out is still reported."""
    rows = [word("a", x1=100.9), word("b", y0=-1.5, y1=5), word("c", x1=102)]
    plain = check(rows)
    assert {p.doc_id for p in plain.problems} == {"a", "b", "c"}
    repaired = check(rows, repair="clip", clip_tolerance=0.01)
    assert [(p.doc_id, p.column) for p in repaired.problems] == [("c", "x1")]
    assert repaired.repairs["boxes clipped to the page"] == 2
    clipped = repaired.table.set_index("doc_id")
    assert clipped.at["a", "x1"] == 100.0 and clipped.at["b", "y0"] == 0.0
    assert (repaired.documents_in, repaired.documents_used, repaired.documents_reported) == \
        (3, 2, 1)
    balanced(repaired)


def test_bi22_page_size_disagreeing_within_a_page():
    report = check([word("a", word_id=0), word("a", word_id=1, page_width=120.0)])
    problem = only_problem(report)
    assert (problem.row, problem.column) == (2, "page_width")
    assert "120 differs from 100" in problem.message and report.documents_used == 0


# --- empty things ----------------------------------------------------------------------------

def test_bi23_empty_table_and_empty_document(tmp_path):
    path = write_csv(tmp_path / "w.csv", HEADER + "\n")
    report = validate_word_table(read_word_table(path), LABELS)
    assert (report.documents_in, report.documents_used) == (0, 0)
    with pytest.raises(WordTableError, match=r"w\.csv: no valid documents"):
        load_data({"source": "word_table", "path": str(path), "labels": LABELS})


def test_bi24_empty_page_and_document_in_hocr(tmp_path):
    page = ('<div class="ocr_page" title="bbox 0 0 100 100">{}</div>')
    word_span = '<span class="ocrx_word" title="bbox 1 1 9 9">Lot</span>'
    body = page.format(word_span) + page.format("")
    (tmp_path / "a.hocr").write_text(f"<html><body>{body}</body></html>", encoding="utf-8")
    (tmp_path / "b.hocr").write_text(f"<html><body>{page.format('')}</body></html>",
                                     encoding="utf-8")
    table, summary = import_sources([tmp_path / "a.hocr", tmp_path / "b.hocr"])
    assert summary.pages == 3 and summary.words_kept == 1     # empty pages counted, no words
    assert set(table["doc_id"]) == {"a"}
    with pytest.raises(WordTableError, match=r"no words imported from .*b\.hocr"):
        import_sources([tmp_path / "b.hocr"])


def test_bi25_empty_document_id_is_located():
    problem = only_problem(check([word(doc="  ")]))
    assert (problem.column, problem.message) == ("doc_id", "empty document id")


# --- words -----------------------------------------------------------------------------------

def featurize(table: pd.DataFrame, groups=("geometry", "text_flags", "char_cnn")):
    from dochar.features import WordFeaturizer

    pages = list(iter_pages(table))
    featurizer = WordFeaturizer(groups=groups, max_chars=16).fit(pages)
    return [featurizer.transform(p) for p in pages], [featurizer.char_ids(p) for p in pages]


@pytest.mark.parametrize("text", ["", "   \t ", "x" * 10_000],
                         ids=["empty", "whitespace", "10000-chars"])
def test_bi26_odd_word_texts_flow_through_features(text):
    rows = [word(word_id=0, text=text), word(word_id=1, x0=30, x1=40)]
    report = check(rows)
    assert report.problems == [] and report.table["text"].tolist()[0] == text  # kept as is
    (matrix,), (ids,) = featurize(report.table)
    assert matrix.shape[0] == 2 and np.isfinite(matrix).all()
    assert ids.shape == (2, 16)          # a long word is cut to max_chars characters


def test_bi27_duplicate_word_id_is_located():
    problem = only_problem(check([word(word_id=3), word(word_id=3, x0=40, x1=50)]))
    assert (problem.row, problem.column) == (2, "word_id")
    assert problem.message == "duplicate word_id 3 on page 1"


@pytest.mark.parametrize("label, shown", [("price", "'price'"), ("", "''")])
def test_bi28_label_outside_the_set(label, shown):
    problem = only_problem(check([word(label=label)]))
    assert problem.column == "label" and problem.message.startswith(f"label {shown} outside")


MIXED = ["合格証明書", "نتيجة", "שלום", "e\u0301\u0301", "🧪✅", "ﬁ", "Ωmg/L", "\u200f123"]


def test_bi29_mixed_scripts_flow_through_files_features_and_graphs(tmp_path):
    """CJK, Arabic and Hebrew (right to left), combining marks, emoji, ligatures, marks."""
    from dochar import graphs

    rows = [word(word_id=i, text=t, x0=5 + 10 * i, x1=12 + 10 * i) for i, t in enumerate(MIXED)]
    for suffix in ("csv", "parquet"):
        back = read_word_table(write_word_table(pd.DataFrame(rows), tmp_path / f"w.{suffix}"))
        report = validate_word_table(back, LABELS)
        assert report.problems == [] and report.table["text"].tolist() == MIXED
    (matrix,), (ids,) = featurize(report.table)
    assert np.isfinite(matrix).all() and (ids >= 0).all()
    page = next(iter_pages(report.table))
    for name in graphs.BUILDERS:
        graphs.make_graph_builder(name)(page).check_nodes(len(page), name)


def huge_page(words: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x0, y0 = rng.uniform(0, 9990, words), rng.uniform(0, 9995, words)
    return pd.DataFrame({"doc_id": "big", "page": 1, "word_id": np.arange(words), "text": "w",
                         "x0": x0, "y0": y0, "x1": x0 + 8, "y1": y0 + 4, "page_width": 10_000.0,
                         "page_height": 10_000.0, "label": "other"})


def test_bi30_page_of_100000_words_validates_and_builds_a_delaunay_graph():
    """About 13 s on two shared cores (2026-12-02), so in the default suite."""
    from dochar import graphs

    report = validate_word_table(huge_page(100_000), LABELS)
    assert report.problems == [] and len(report.table) == 100_000
    page = next(iter_pages(report.table))
    edges = graphs.make_graph_builder("delaunay")(page)
    edges.check_nodes(100_000, "delaunay")
    # a planar triangulation of n points has at most 3n - 6 sides, each an edge both ways
    assert 0 < edges.num_edges <= 2 * (3 * 100_000 - 6)


# --- importers -------------------------------------------------------------------------------

def test_bi31_pdf_without_text_layer_is_located(tmp_path):
    Image.new("RGB", (200, 100), "white").save(tmp_path / "scan.pdf")   # a page, no text
    Image.new("RGB", (200, 100), "white").save(tmp_path / "words.png")
    with pytest.raises(WordTableError, match=r"scan\.pdf, page 1: no text layer"):
        import_sources([tmp_path / "scan.pdf"])


def test_bi32_image_that_is_not_an_image(tmp_path):
    (tmp_path / "notes.png").write_text("not a picture", encoding="utf-8")
    (tmp_path / "a.hocr").write_text('<html><body><div class="ocr_page" title="bbox 0 0 9 9">'
                                     '<span class="ocrx_word" title="bbox 1 1 2 2">x</span>'
                                     '</div></body></html>', encoding="utf-8")
    table, summary = import_sources([tmp_path / "notes.png", tmp_path / "a.hocr"])
    assert [str(p) for p in summary.problems] == \
        [f"{tmp_path / 'notes.png'}: not an image Pillow can read; file skipped"]
    assert len(table) == 1


def test_bi33_malformed_xml_names_line_and_column(tmp_path):
    (tmp_path / "cut.xml").write_text('<?xml version="1.0"?>\n<alto xmlns="http://www.loc.gov/'
                                      'standards/alto/ns-v4#">\n<Layout><Page WIDTH="9"',
                                      encoding="utf-8")
    with pytest.raises(WordTableError, match=r"cut\.xml, line 3, column \d+: malformed XML"):
        import_sources([tmp_path / "cut.xml"], format="alto")


def test_bi34_truncated_form_json_is_named(tmp_path):
    (tmp_path / "f.json").write_text('{"form": [{"words": [{"box": [1, 2', encoding="utf-8")
    with pytest.raises(WordTableError, match=r"f\.json: not a form-annotation file"):
        import_sources([tmp_path / "f.json"])


def test_bi35_form_json_word_without_box_is_located_and_counted(tmp_path):
    """The issue's case: a KeyError naming no file."""
    form = {"form": [{"id": 0, "label": "key", "words": [
        {"text": "Lot", "box": [1, 1, 9, 9]}, {"text": "B-7"}, {"text": "x", "box": "1 2 3 4"}]}]}
    (tmp_path / "f.json").write_text(json.dumps(form), encoding="utf-8")
    table, summary = import_sources([tmp_path / "f.json"])
    messages = [str(p) for p in summary.problems]
    assert any("f.json, form[0].words[1]: 'box' must be four finite numbers" in m
               for m in messages)
    assert any("form[0].words[2]" in m for m in messages)
    assert summary.dropped["words with an unreadable box"] == 2
    assert summary.words_read == summary.words_kept + sum(summary.dropped.values()) == 3


def test_bi36_xml_image_path_outside_the_folder_is_not_opened(tmp_path):
    page = '<div class="ocr_page" title=\'image "../../etc/passwd"\'>' \
           '<span class="ocrx_word" title="bbox 1 1 5 5">x</span></div>'
    (tmp_path / "a.hocr").write_text(f"<html><body>{page}</body></html>", encoding="utf-8")
    _, summary = import_sources([tmp_path / "a.hocr"])
    assert any("lies outside the file's folder" in str(p) for p in summary.problems)


def test_every_word_table_error_is_a_docharerror():
    assert issubclass(WordTableError, DocharError) and issubclass(DocharError, ValueError)
