"""``dochar predict`` and the MLflow model against a real run: the run's own test words come
out with the probabilities the run recorded, through a run folder, a run id prefix and MLflow's
own pyfunc loader; rendered PDFs the model never saw are labelled and scored against the
generator's truth, and their records written; unknown labels are located and left out of the scores.

References: the run's ``predictions.parquet`` (written while training, by the live model);
scikit-learn's ``accuracy_score`` and ``f1_score`` for the printed scores; the grouped fields
worked out by hand on a small page.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys

import mlflow
import pandas as pd
import pytest
from sklearn.metrics import accuracy_score, f1_score

from dochar.data.word_table import REQUIRED_COLUMNS
from dochar.predict import fields, main

TRAIN = ["run", "data.documents=30", "model=random_forest", "model.options.n_estimators=20",
         "split=random", "evaluation.bootstrap_resamples=50", "train.progress=false",
         "tracking.experiment=predict-test"]


@pytest.fixture(scope="module")
def trained(tmp_path_factory) -> dict:
    """A random forest trained on 30 synthetic certificates (generator seed 0), logged."""
    cwd = tmp_path_factory.mktemp("trained")
    result = subprocess.run([sys.executable, "-m", "dochar.cli", *TRAIN], cwd=cwd,
                            capture_output=True, text=True, timeout=900)
    assert result.returncode == 0, result.stderr[-3000:]
    folder = next((cwd / "outputs" / "runs").glob("*/run"))
    run_id = json.loads((folder / "summary.json").read_text())["run_id"]
    test_words = pd.read_parquet(folder / "predictions.parquet")
    table = cwd / "test_words.csv"
    test_words[[*REQUIRED_COLUMNS, "label"]].to_csv(table, index=False)
    return {"cwd": cwd, "folder": folder, "run_id": run_id, "uri": f"sqlite:///{cwd}/mlflow.db",
            "test_words": test_words, "table": table}


def predict(capsys, *args: str) -> tuple[int, str]:
    code = main([str(a) for a in args])
    captured = capsys.readouterr()
    return code, captured.out + captured.err


def by_word(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.sort_values(["doc_id", "page", "word_id"]).reset_index(drop=True)


def test_the_runs_test_words_get_the_probabilities_the_run_recorded(trained, tmp_path, capsys):
    code, out = predict(capsys, "--model", trained["folder"], "--input", trained["table"],
                        "--out", tmp_path)
    assert code == 0, out
    words = by_word(pd.read_csv(tmp_path / "words.csv", keep_default_na=False))
    recorded = by_word(trained["test_words"])
    assert (words["predicted"] == recorded["predicted"]).all()
    pd.testing.assert_series_equal(words["probability"], recorded["confidence"],
                                   check_names=False, atol=1e-12, rtol=0)
    # top-3 are the three largest recorded probabilities, in order
    columns = [c for c in recorded.columns if c.startswith("prob:")]
    third = recorded[columns].apply(lambda row: sorted(row, reverse=True)[2], axis=1)
    pd.testing.assert_series_equal(words["top3_probability"], third, check_names=False,
                                   atol=1e-12, rtol=0)
    # printed scores against scikit-learn on the same words (macro over the present classes)
    present = sorted(set(recorded["label"]) | set(recorded["predicted"]))
    accuracy = accuracy_score(recorded["label"], recorded["predicted"])
    macro = f1_score(recorded["label"], recorded["predicted"], labels=present, average="macro")
    assert f"word accuracy {accuracy:.4f}, macro-F1 {macro:.4f}" in out
    documents = json.loads((tmp_path / "fields.json").read_text())
    assert [d["doc_id"] for d in documents] == list(dict.fromkeys(words["doc_id"]))


def test_a_run_id_prefix_is_found_in_the_store(trained, tmp_path, capsys):
    code, out = predict(capsys, "--model", trained["run_id"][:12], "--tracking-uri",
                        trained["uri"], "--input", trained["table"], "--out", tmp_path,
                        "--words-format", "parquet")
    assert code == 0, out
    words = by_word(pd.read_parquet(tmp_path / "words.parquet"))
    assert (words["predicted"] == by_word(trained["test_words"])["predicted"]).all()
    code, out = predict(capsys, "--model", "0123456789ab", "--tracking-uri", trained["uri"],
                        "--input", trained["table"], "--out", tmp_path)
    assert code == 2 and "no run with this id" in out


def test_mlflow_loads_and_applies_the_logged_model(trained, monkeypatch):
    # runs:/ URIs are read from the current store; the variable (unlike mlflow.set_tracking_uri,
    # which also exports it) is restored after the test, so later subprocesses do not inherit it
    monkeypatch.setenv("MLFLOW_TRACKING_URI", trained["uri"])
    model = mlflow.pyfunc.load_model(f"runs:/{trained['run_id']}/word_labeller")
    words = by_word(model.predict(pd.read_csv(trained["table"], keep_default_na=False)))
    recorded = by_word(trained["test_words"])
    assert (words["predicted"] == recorded["predicted"]).all()
    pd.testing.assert_series_equal(words["probability"], recorded["confidence"],
                                   check_names=False, atol=1e-12, rtol=0)


def test_unknown_labels_are_located_and_not_scored(trained, tmp_path, capsys):
    table = pd.read_csv(trained["table"], keep_default_na=False)
    table.loc[[0, 1, 2], "label"] = "stamp"
    table.loc[3, "label"] = "seal"
    path = tmp_path / "words.csv"
    table.to_csv(path, index=False)
    code, out = predict(capsys, "--model", trained["folder"], "--input", path, "--out",
                        tmp_path / "out")
    assert code == 0, out
    first = table.iloc[0]
    assert "labels the model does not know, not scored: ['seal', 'stamp'] on 4 words" in out
    assert f"{first.doc_id} page {first.page} word {first.word_id} 'stamp'" in out
    known = table.iloc[4:]
    words = pd.read_csv(tmp_path / "out" / "words.csv", keep_default_na=False)
    scored = words[~words["label"].isin(["stamp", "seal"])]
    accuracy = accuracy_score(scored["label"], scored["predicted"])
    assert f"scored {len(known)} of {len(table)} words" in out
    assert f"word accuracy {accuracy:.4f}" in out


def test_a_model_refuses_a_label_set_or_task_it_was_not_trained_for(trained, tmp_path, capsys):
    code, out = predict(capsys, "--model", trained["folder"], "--input", trained["table"],
                        "--out", tmp_path, "--labels", "key,value,other")
    assert code == 2 and "trained on the label set" in out and "config gives" in out
    code, out = predict(capsys, "--model", trained["folder"], "--input", trained["table"],
                        "--out", tmp_path, "--task", "links")
    assert code == 2 and "trained for task 'word_labels'" in out


def test_rendered_pdfs_the_model_never_saw_are_labelled_and_scored(trained, tmp_path, capsys):
    """Generator seed 41 (training used seed 0): PDF -> import -> predict, truth moved on by IoU."""
    pages = tmp_path / "pages"
    subprocess.run([sys.executable, "-m", "data_synth", "--documents", "4", "--seed", "41",
                    "--out", str(tmp_path / "truth.parquet"), "--render", "pdf",
                    "--render-dir", str(pages)], check=True, capture_output=True)
    code, out = predict(capsys, "--model", trained["folder"], "--input", pages,
                        "--labels-from", tmp_path / "truth.parquet", "--out", tmp_path / "out")
    assert code == 0, out
    truth = pd.read_parquet(tmp_path / "truth.parquet")
    words = pd.read_csv(tmp_path / "out" / "words.csv", keep_default_na=False)
    assert len(words) == len(truth)   # every generated word read back from the PDFs
    printed = float(re.search(r"word accuracy (\d\.\d+)", out).group(1))
    assert printed == pytest.approx(accuracy_score(words["label"], words["predicted"]), abs=1e-4)
    # floor worked from the data, not from a run: the model must beat always answering the
    # most common true label (the majority-class baseline, common practice)
    majority = truth["label"].value_counts(normalize=True).iloc[0]
    assert printed > majority
    # records of the PDFs: one per rendered certificate, each value made of words the model
    # gave its label, their texts as read from the PDF, each labelled word in one value at most
    records = json.loads((tmp_path / "out" / "records.json").read_text())
    assert sorted(r["doc_id"] for r in records) == sorted(set(words["doc_id"]))
    by_word = words.set_index(["doc_id", "word_id"])
    for record in records:
        doc = record["doc_id"]
        values = [(label, v) for label, found in record["fields"].items()
                  for v in (found if isinstance(found, list) else [found])]
        values += [(column, v) for item in record["results"] for column, v in item.items()]
        for label, value in values:
            assert {by_word.loc[(doc, w), "predicted"] for w in value["word_ids"]} == {label}
            assert value["text"] == " ".join(str(by_word.loc[(doc, w), "text"])
                                             for w in value["word_ids"])
        mine = words[(words["doc_id"] == doc) & words["predicted"].isin(
            ["lab_name", "client", "cert_no", "sample_id", "date", "analyte", "method",
             "result", "unit", "limit", "verdict"])]
        used = [w for _, v in values for w in v["word_ids"]]
        assert len(used) == len(set(used)) and set(used) <= set(mine["word_id"])
        # left out: other pieces of a single field (client, cert_no, sample_id) kept once, and
        # the words of line items lacking a required column (synth.yaml: analyte, result), so
        # every item kept has both
        left_out = mine[~mine["word_id"].isin(used)]
        columns = {"analyte", "method", "result", "unit", "limit", "verdict"}
        assert set(left_out["predicted"]) - columns <= {"client", "cert_no", "sample_id"} & set(
            record["fields"])
        assert all({"analyte", "result"} <= set(item) for item in record["results"])
    table = pd.read_csv(tmp_path / "out" / "records.csv", keep_default_na=False)
    assert len(table) == sum(max(1, len(r["results"])) for r in records)


def test_fields_are_runs_of_one_label_in_reading_order():
    """Worked by hand: two lines on page 1, one on page 2; 'other' is not a field."""
    rows = [  # doc, page, word, text, x0, y0, x1, y1, predicted, probability
        ("d", 1, 0, "Lot", 10, 10, 30, 20, "key", 0.9),
        ("d", 1, 1, "A-12", 40, 10, 70, 20, "cert_no", 0.8),
        ("d", 1, 2, "B7", 75, 11, 90, 21, "cert_no", 0.6),
        ("d", 1, 3, "C9", 10, 30, 25, 40, "cert_no", 0.7),     # next line, same label: same run
        ("d", 1, 4, "Pass", 40, 30, 60, 40, "verdict", 0.95),
        ("d", 1, 5, "note", 70, 30, 90, 40, "other", 0.99),
        ("d", 2, 0, "D1", 10, 10, 20, 20, "cert_no", 0.5),     # a new page starts a new run
    ]
    words = pd.DataFrame(rows, columns=["doc_id", "page", "word_id", "text", "x0", "y0", "x1",
                                        "y1", "predicted", "probability"])
    found = fields(words.iloc[::-1].reset_index(drop=True), ignore=["other"])
    assert found[["page", "label", "text", "word_ids"]].values.tolist() == [
        [1, "key", "Lot", "0"], [1, "cert_no", "A-12 B7 C9", "1 2 3"],
        [1, "verdict", "Pass", "4"], [2, "cert_no", "D1", "0"]]
    assert found.loc[1, ["x0", "y0", "x1", "y1", "probability"]].tolist() == [10, 10, 90, 40, 0.6]


def test_records_come_with_the_models_record_shape_and_from_a_shape_file(trained, tmp_path,
                                                                         capsys):
    # the forest was trained on data=synth, whose record block names five header fields and six
    # item columns: every document gets a record whose items are the table rows
    code, out = predict(capsys, "--model", trained["folder"], "--input", trained["table"],
                        "--out", tmp_path / "saved")
    assert code == 0, out
    records = json.loads((tmp_path / "saved" / "records.json").read_text())
    documents = sorted(set(trained["test_words"]["doc_id"]))
    assert sorted(r["doc_id"] for r in records) == documents
    assert all({"doc_id", "fields", "results"} == set(r) for r in records)
    table = pd.read_csv(tmp_path / "saved" / "records.csv", keep_default_na=False)
    assert sorted(set(table["doc_id"])) == documents
    assert {"cert_no", "analyte", "verdict", "probability"} <= set(table.columns)
    # each line item's values are words the model labelled with that column's label
    words = pd.read_csv(tmp_path / "saved" / "words.csv", keep_default_na=False)
    labelled = words.set_index(["doc_id", "word_id"])["predicted"]
    for record in records:
        for item in record["results"]:
            for column, value in item.items():
                assert {labelled[(record["doc_id"], w)] for w in value["word_ids"]} == {column}
    shape = tmp_path / "shape.yaml"
    shape.write_text("record:\n  header_fields: [cert_no]\n")
    code, out = predict(capsys, "--model", trained["folder"], "--input", trained["table"],
                        "--out", tmp_path / "file", "--record-shape", shape)
    assert code == 0, out
    records = json.loads((tmp_path / "file" / "records.json").read_text())
    assert all(set(r["fields"]) <= {"cert_no"} and r["items"] == [] for r in records)
    shape.write_text("header_fields: [cert_number]\n")
    code, out = predict(capsys, "--model", trained["folder"], "--input", trained["table"],
                        "--out", tmp_path / "bad", "--record-shape", shape)
    assert code == 2 and "label 'cert_number' is not one of data.labels" in out
