"""Properties of the synthetic certificate generator (no expected numbers are hard-coded:
every check follows from the word-table contract, the API definitions or a brute-force oracle)."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from pandas.testing import assert_frame_equal

import data_synth
from data_synth import LABELS, LAYOUT_IDS, NoiseConfig, generate
from data_synth.__main__ import main
from data_synth.layouts import LAYOUTS
from data_synth.noise import CONFUSIONS
from dochar.data.word_table import read_word_table, validate_word_table

# ISO 216 A4 is 210 x 297 mm; at 72 points per inch that is 595.3 x 841.9 pt, used rounded.
A4_POINTS = (595.0, 842.0)


@pytest.fixture(scope="module")
def table() -> pd.DataFrame:
    return generate(50, seed=11)


def _by_layout(layout_id: str, count: int, seed: int = 5) -> pd.DataFrame:
    return generate(count, seed=seed, layouts=[layout_id])


def _entities(frame: pd.DataFrame) -> pd.DataFrame:
    """One row per (document, entity): label, first word's x0, top y0, number of line tops."""
    grouped = frame.groupby(["doc_id", "entity_id"], sort=False)
    return grouped.agg(label=("label", "first"), labels=("label", "nunique"),
                       x0=("x0", "first"), y0=("y0", "min"), lines=("y0", "nunique"),
                       text=("text", " ".join)).reset_index()


# --- determinism ---------------------------------------------------------------------------

def test_same_seed_gives_identical_frame() -> None:
    assert_frame_equal(generate(20, seed=3), generate(20, seed=3))


def test_different_seed_gives_different_frame() -> None:
    first, second = generate(20, seed=3), generate(20, seed=4)
    assert not (len(first) == len(second) and first["text"].tolist() == second["text"].tolist())


def test_document_depends_only_on_seed_and_index() -> None:
    short, long = generate(4, seed=2), generate(9, seed=2)
    assert_frame_equal(short, long[long["doc_id"].isin(short["doc_id"])].reset_index(drop=True))


def test_clean_noise_config_changes_nothing() -> None:
    assert_frame_equal(generate(6, seed=1), generate(6, seed=1, noise=NoiseConfig()))


# --- layouts and labels --------------------------------------------------------------------

def test_layouts_cycle_and_cover_at_least_eight_families(table: pd.DataFrame) -> None:
    assert len(set(LAYOUT_IDS)) == len(LAYOUT_IDS) >= 8
    per_doc = table.groupby("doc_id", sort=True)["layout_id"].agg(["first", "nunique"])
    assert (per_doc["nunique"] == 1).all()
    expected = [LAYOUT_IDS[i % len(LAYOUT_IDS)] for i in range(len(per_doc))]
    assert per_doc["first"].tolist() == expected
    assert set(table["layout_id"]) == set(LAYOUT_IDS)


def test_layout_selection_is_honoured_and_checked() -> None:
    chosen = [LAYOUT_IDS[2], LAYOUT_IDS[0]]
    assert set(generate(5, layouts=chosen)["layout_id"]) == set(chosen)
    with pytest.raises(ValueError, match="no_such_layout"):
        generate(2, layouts=["no_such_layout"])
    with pytest.raises(ValueError, match="empty"):
        generate(2, layouts=[])
    with pytest.raises(TypeError):
        generate(2, layouts=LAYOUT_IDS[0])


@pytest.mark.parametrize("kwargs", [{"n_documents": -1}, {"n_documents": 2, "seed": -1},
                                    {"n_documents": 2.5}])
def test_bad_arguments_are_rejected(kwargs: dict) -> None:
    with pytest.raises(ValueError):
        generate(**kwargs)


def test_zero_documents_give_empty_table_with_all_columns() -> None:
    empty = generate(0)
    assert len(empty) == 0 and list(empty.columns) == list(generate(1).columns)


def test_label_set_is_the_published_one_and_fully_used(table: pd.DataFrame) -> None:
    assert data_synth.LABELS == ("lab_name", "client", "cert_no", "sample_id", "date", "key",
                                 "column_header", "analyte", "method", "result", "unit",
                                 "limit", "verdict", "other")
    assert set(table["label"]) == set(LABELS)


def test_output_passes_the_word_table_validator(table: pd.DataFrame) -> None:
    report = validate_word_table(table, labels=LABELS, strict=True)
    assert report.problems == []
    assert report.documents_used == report.documents_in == table["doc_id"].nunique()


def test_boxes_lie_inside_an_a4_page(table: pd.DataFrame) -> None:
    assert (table["page_width"] == A4_POINTS[0]).all()
    assert (table["page_height"] == A4_POINTS[1]).all()
    for low, high, limit in (("x0", "x1", "page_width"), ("y0", "y1", "page_height")):
        assert ((0 <= table[low]) & (table[low] < table[high])
                & (table[high] <= table[limit])).all()
    assert not table["text"].str.contains(" ").any() and (table["text"].str.len() > 0).all()


def test_clean_words_never_overlap(table: pd.DataFrame) -> None:
    # brute-force oracle: every pair of boxes on a page, intersection area must be zero
    for _, page in table.groupby(["doc_id", "page"]):
        b = page[["x0", "y0", "x1", "y1"]].to_numpy()
        width = np.minimum(b[:, None, 2], b[None, :, 2]) - np.maximum(b[:, None, 0], b[None, :, 0])
        height = np.minimum(b[:, None, 3], b[None, :, 3]) - np.maximum(b[:, None, 1], b[None, :, 1])
        area = np.clip(width, 0, None) * np.clip(height, 0, None)
        np.fill_diagonal(area, 0.0)
        assert area.max() < 1e-6


def test_entities_carry_one_label_and_header_fields_occur_once(table: pd.DataFrame) -> None:
    entities = _entities(table)
    assert (entities["labels"] == 1).all()
    assert entities["entity_id"].str.fullmatch(r"e\d+").all()
    counts = entities.groupby(["doc_id", "label"]).size().unstack(fill_value=0)
    for label in ("client", "cert_no", "sample_id"):
        assert (counts[label] == 1).all(), label
    assert (counts["date"] == 2).all()            # received and reported
    assert (counts["lab_name"] >= 1).all()


def test_page_numbers_and_table_spill(table: pd.DataFrame) -> None:
    longer = generate(150, seed=0)
    pages = longer.groupby("doc_id")["page"].max()
    assert (pages >= 1).all() and (pages == 2).any()
    table_spills = 0
    for doc_id in pages[pages == 2].index:
        second = longer[(longer["doc_id"] == doc_id) & (longer["page"] == 2)]
        rows = second[second["label"] == "analyte"]
        if len(rows):                       # the table went on: its heading is repeated above
            table_spills += 1
            headings = second[second["label"] == "column_header"]
            assert len(headings) and headings["y1"].max() <= rows["y0"].min()
    assert table_spills > 0
    texts = " ".join(table["text"])
    page_count = table.groupby("doc_id")["page"].nunique().sum()
    assert len(re.findall(r"Page \d+ of \d+", texts)) == page_count


def test_layout_families_differ_in_real_ways(table: pd.DataFrame) -> None:
    cells = table[table["label"].isin(["analyte", "method", "result", "unit", "limit", "verdict"])]
    first_rows = cells[cells["y0"] == cells.groupby("doc_id")["y0"].transform("min")]
    orders = first_rows.sort_values("x0").groupby("layout_id")["label"].agg(tuple)
    assert orders.nunique() >= 4                                   # column order
    shapes = _entities(table[table["label"] == "date"])["text"].map(
        lambda t: re.sub(r"[A-Za-z]+", "a", re.sub(r"\d", "9", t)))
    assert shapes.nunique() >= 4                                   # date formats
    verdicts = table[table["label"] == "verdict"].groupby("layout_id")["text"].agg(frozenset)
    assert verdicts.nunique() >= 4                                 # verdict wording
    assert (table.groupby("layout_id")["label"].agg(lambda s: "unit" in set(s))).nunique() == 2


def test_two_column_header_has_two_key_columns_side_by_side() -> None:
    two_column = [layout.layout_id for layout in LAYOUTS if layout.fields == "two_column"]
    one_column = [layout.layout_id for layout in LAYOUTS if layout.fields == "left"]
    assert two_column and one_column
    for layout_id, expected_columns in [(two_column[0], 2), (one_column[0], 1)]:
        frame = _by_layout(layout_id, 4)
        keys = _entities(frame[frame["label"] == "key"])
        for _, doc_keys in keys.groupby("doc_id"):
            starts = np.sort(doc_keys["x0"].unique())
            assert len(starts) == expected_columns, (layout_id, starts)
            if expected_columns == 2:
                assert starts[1] - starts[0] > A4_POINTS[0] / 4    # clearly apart
                left = doc_keys[doc_keys["x0"] == starts[0]]["y0"]
                right = doc_keys[doc_keys["x0"] == starts[1]]["y0"]
                assert left.min() <= right.max() and right.min() <= left.max()  # same rows


def test_narrow_columns_wrap_analyte_names_over_two_lines() -> None:
    narrow = min(LAYOUTS, key=lambda layout: layout.analyte_max_width).layout_id
    analytes = _entities(_by_layout(narrow, 6).query("label == 'analyte'"))
    wrapped = analytes[analytes["lines"] >= 2]
    assert len(wrapped) > 0
    assert (wrapped["text"].str.split().str.len() >= 2).all()   # wraps only at spaces


# --- noise ---------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def clean() -> pd.DataFrame:
    return generate(10, seed=7)


def test_noise_config_rejects_bad_values() -> None:
    for bad in ({"box_jitter": -0.1}, {"split_rate": 1.5}, {"merge_rate": -1.0},
                {"char_confusion_rate": float("nan")}):
        with pytest.raises(ValueError, match=next(iter(bad))):
            NoiseConfig(**bad)


def test_noise_is_deterministic() -> None:
    noise = NoiseConfig(0.4, 0.05, 0.05, 0.02)
    assert_frame_equal(generate(5, seed=9, noise=noise), generate(5, seed=9, noise=noise))


def test_jitter_moves_boxes_by_the_configured_std(clean: pd.DataFrame) -> None:
    std = 0.6
    noisy = generate(10, seed=7, noise=NoiseConfig(box_jitter=std))
    kept = ["doc_id", "page", "word_id", "text", "label", "entity_id"]
    assert_frame_equal(noisy[kept], clean[kept])
    moves = (noisy[["x0", "y0", "x1", "y1"]] - clean[["x0", "y0", "x1", "y1"]]).to_numpy()
    assert np.abs(moves).max() > 0
    # Gaussian noise of standard deviation std (NoiseConfig docstring); a rough check
    assert abs(moves.std() - std) < 0.1 * std
    assert validate_word_table(noisy, labels=LABELS).problems == []


def test_split_raises_word_count_and_keeps_entities(clean: pd.DataFrame) -> None:
    noisy = generate(10, seed=7, noise=NoiseConfig(split_rate=1.0))
    splittable = (clean["text"].str.len() >= 2).sum()
    assert len(noisy) == len(clean) + splittable
    for frame in (clean, noisy):
        assert not frame.duplicated(["doc_id", "page", "word_id"]).any()
    joined = [f.groupby(["doc_id", "entity_id"])[["text", "label"]].agg(
        {"text": "".join, "label": "first"}) for f in (clean, noisy)]
    assert_frame_equal(joined[0], joined[1])
    partial = generate(10, seed=7, noise=NoiseConfig(split_rate=0.1))
    assert len(clean) < len(partial) < len(noisy)


def test_merge_lowers_word_count_and_takes_the_first_label(clean: pd.DataFrame) -> None:
    noisy = generate(10, seed=7, noise=NoiseConfig(merge_rate=0.5))
    assert len(noisy) < len(clean)
    # oracle: walk both tables in reading order; each noisy word is one clean word or two
    # consecutive ones written together, labelled like the first
    for doc_id, words in noisy.groupby("doc_id"):
        source = clean[clean["doc_id"] == doc_id].reset_index(drop=True)
        cursor = 0
        for word in words.itertuples():
            first = source.iloc[cursor]
            if word.text == first.text:
                cursor += 1
            else:
                second = source.iloc[cursor + 1]
                assert word.text == first.text + second.text
                assert first.page == second.page
                assert word.x0 == first.x0 and word.x1 == second.x1
                cursor += 2
            assert (word.label, word.entity_id) == (first.label, first.entity_id)
        assert cursor == len(source)


def test_confusion_changes_characters_only(clean: pd.DataFrame) -> None:
    noisy = generate(10, seed=7, noise=NoiseConfig(char_confusion_rate=0.3))
    kept = ["doc_id", "page", "word_id", "x0", "y0", "x1", "y1", "label", "entity_id"]
    assert_frame_equal(noisy[kept], clean[kept])
    assert (noisy["text"] != clean["text"]).any()
    confusable = "[" + re.escape("".join(sorted(set("".join(CONFUSIONS) + "".join(
        CONFUSIONS.values()))))) + "]"
    assert (noisy["text"].str.replace(confusable, "", regex=True)
            == clean["text"].str.replace(confusable, "", regex=True)).all()


def test_full_confusion_swaps_look_alike_pairs(clean: pd.DataFrame) -> None:
    noisy = "".join(generate(10, seed=7, noise=NoiseConfig(char_confusion_rate=1.0))["text"])
    original = "".join(clean["text"])
    # with certainty every S becomes 5 and every 5 becomes S (and likewise O and 0)
    for a, b in (("S", "5"), ("O", "0")):
        assert noisy.count(a) == original.count(b) and noisy.count(b) == original.count(a)


# --- command line --------------------------------------------------------------------------

@pytest.mark.parametrize("suffix", [".parquet", ".csv"])
def test_cli_writes_a_readable_word_table(tmp_path, capsys, suffix: str) -> None:
    out = tmp_path / f"synth{suffix}"
    code = main(["--documents", "12", "--seed", "1", "--out", str(out),
                 "--layouts", f"{LAYOUT_IDS[0]},{LAYOUT_IDS[1]}", "--jitter", "0.3",
                 "--split-rate", "0.02", "--merge-rate", "0.02", "--confusion-rate", "0.01"])
    assert code == 0 and out.exists()
    assert "12 documents" in capsys.readouterr().out
    report = validate_word_table(read_word_table(out), labels=LABELS)
    assert report.problems == [] and report.documents_used == 12
    expected = generate(12, seed=1, layouts=LAYOUT_IDS[:2],
                        noise=NoiseConfig(0.3, 0.02, 0.02, 0.01))
    assert report.table["text"].tolist() == expected["text"].tolist()
    assert np.allclose(report.table["x0"], expected["x0"])


def test_cli_rejects_unknown_suffix_and_layout(tmp_path) -> None:
    with pytest.raises(SystemExit):
        main(["--documents", "2", "--out", str(tmp_path / "synth.txt")])
    with pytest.raises(SystemExit):
        main(["--documents", "2", "--out", str(tmp_path / "s.csv"), "--layouts", "nope"])


def test_generated_links_follow_the_layout_truth():
    # key -> value: the source is a key phrase, the target the value right after it (the value
    # entity is the next entity created); heading -> cell: the cell lies in the heading's column
    from data_synth.generator import iter_documents_with_links
    from data_synth.layouts import FIELD_LABELS

    for words, links in iter_documents_with_links(12, seed=4):
        entity = _entities(words).set_index("entity_id")
        boxes = words.groupby("entity_id").agg(x0=("x0", "min"), x1=("x1", "max"),
                                               y0=("y0", "min"))
        key_value = links[links["kind"] == "key_value"]
        assert set(entity.loc[key_value["source"], "label"]) == {"key"}
        assert set(entity.loc[key_value["target"], "label"]) <= set(FIELD_LABELS.values())
        assert (key_value["target"].str[1:].astype(int)
                == key_value["source"].str[1:].astype(int) + 1).all()
        # every key phrase has exactly one value
        assert sorted(key_value["source"]) == sorted(entity.index[entity["label"] == "key"])
        cells = links[links["kind"] == "column_cell"]
        assert set(entity.loc[cells["source"], "label"]) == {"column_header"}
        source, target = boxes.loc[cells["source"]], boxes.loc[cells["target"]]
        overlap = (np.minimum(source["x1"].to_numpy(), target["x1"].to_numpy())
                   - np.maximum(source["x0"].to_numpy(), target["x0"].to_numpy()))
        assert (overlap > 0).all() and (target["y0"].to_numpy() > source["y0"].to_numpy()).all()


def test_row_links_chain_the_cells_of_each_table_row():
    # kind row: each cell points to the next cell of its row, left to right, on one line
    # (cells of a row share their top edge when the page is clean)
    from data_synth.generator import iter_documents_with_links
    from data_synth.layouts import COLUMNS

    for words, links in iter_documents_with_links(12, seed=4):
        first = words.groupby("entity_id").agg(page=("page", "first"), x0=("x0", "min"),
                                               y0=("y0", "min"), label=("label", "first"))
        rows = links[links["kind"] == "row"]
        source, target = first.loc[rows["source"]], first.loc[rows["target"]]
        assert set(source["label"]) | set(target["label"]) <= set(COLUMNS)
        assert (source["y0"].to_numpy() == target["y0"].to_numpy()).all()
        assert (source["x0"].to_numpy() < target["x0"].to_numpy()).all()
        # every body cell is in its row's chain: a chain of k cells has k - 1 links
        cells = first[first["label"].isin(COLUMNS)]
        table_rows = cells.groupby(["page", "y0"]).ngroups
        assert len(rows) == len(cells) - table_rows
