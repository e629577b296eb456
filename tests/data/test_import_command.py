"""`dochar import`, `python -m data_synth --render` and the data=pdf source, end to end."""

from __future__ import annotations

import pandas as pd

from data_synth import LABELS
from data_synth.__main__ import main as synth_main
from dochar.cli import main
from dochar.data.sources import load_data


def test_render_then_import_with_labels(tmp_path, capsys) -> None:
    truth = tmp_path / "truth.parquet"
    assert synth_main(["--documents", "3", "--seed", "1", "--out", str(truth), "--render", "pdf",
                       "--render-dir", str(tmp_path / "pages")]) == 0
    assert sorted(p.name for p in (tmp_path / "pages").iterdir()) == [
        "coa-00000.pdf", "coa-00001.pdf", "coa-00002.pdf"]
    out = tmp_path / "imported.csv"
    code = main(["import", str(tmp_path / "pages"), "--out", str(out), "--labels-from",
                 str(truth)])
    printed = capsys.readouterr().out
    expected = pd.read_parquet(truth)
    assert code == 0
    assert f"3 files, 3 pages, {len(expected)} words read, {len(expected)} kept" in printed
    assert f"{len(expected)} of {len(expected)} labelled words matched (100.0%)" in printed
    written = pd.read_csv(out, keep_default_na=False)
    keys = ["doc_id", "page", "text", "label", "entity_id", "layout_id"]
    assert sorted(written[keys].itertuples(index=False)) == \
        sorted(expected[keys].itertuples(index=False))


def test_import_of_nothing_usable_exits_2_with_the_reasons(tmp_path, capsys) -> None:
    (tmp_path / "a.pdf").write_bytes(b"%PDF-1.4 broken")
    code = main(["import", str(tmp_path / "a.pdf"), str(tmp_path / "missing.xml"),
                 "--out", str(tmp_path / "t.parquet")])
    error = capsys.readouterr().err
    assert code == 2 and "a.pdf: not a readable PDF" in error
    assert "missing.xml: no such file or folder" in error
    assert not (tmp_path / "t.parquet").exists()


def test_data_pdf_source_imports_at_run_time(tmp_path) -> None:
    truth = tmp_path / "truth.parquet"
    synth_main(["--documents", "2", "--out", str(truth), "--render", "pdf", "--render-dir",
                str(tmp_path / "pages")])
    data = load_data({"source": "pdf", "path": str(tmp_path / "pages"), "ocr": False,
                      "labels_from": str(truth), "label_transfer": {"min_iou": 0.5},
                      "labels": list(LABELS)})
    assert data.notes["documents_used"] == 2 and data.notes["label_transfer_recall"] == 1.0
    assert data.notes["import_words_kept"] == len(pd.read_parquet(truth)) == len(data.table)


def test_both_commands_and_the_writer_refuse_an_unknown_table_suffix(tmp_path, capsys) -> None:
    """One rule for output names (Parquet or CSV), checked before any work is done."""
    import pytest

    from dochar.data.word_table import write_word_table

    with pytest.raises(SystemExit) as stop:
        main(["import", str(tmp_path), "--out", str(tmp_path / "t.xlsx")])
    assert stop.value.code == 2
    assert "--out " + str(tmp_path / "t.xlsx") + ": use a .parquet or .csv file name" in \
        capsys.readouterr().err
    with pytest.raises(SystemExit) as stop:
        synth_main(["--documents", "2", "--out", str(tmp_path / "s.csv"),
                    "--links-out", str(tmp_path / "links.json")])
    assert stop.value.code == 2
    assert "--links-out " + str(tmp_path / "links.json") + ": use a .parquet or .csv" in \
        capsys.readouterr().err
    assert not (tmp_path / "s.csv").exists()
    with pytest.raises(ValueError, match="use a .parquet or .csv file name"):
        write_word_table(pd.DataFrame({"doc_id": ["a"]}), tmp_path / "t.json")
    assert not (tmp_path / "t.json").exists()
