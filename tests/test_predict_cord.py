"""``dochar predict`` on CORD receipt JSON: a forest trained on 40 receipts writes one record
per receipt, its values made of words the model gave their label, each predicted item value in
exactly one line item, items opened as the anchor rule says, and records.csv one row per line
item.

Skips without ``../shared/datasets/cord`` (a failure under ``DOCHAR_REQUIRE_DATASETS=1``, as in
CI). References: the receipts' own files (ids, word texts) and the run's ``words.csv``; the
partition and row checks follow from the record's definition (docs/records.md), not from code.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from collections import Counter

import pandas as pd
import pytest

from dochar.predict import main
from tests.helpers import REPO

TRAINED_ON = range(40)            # split by id: 0, 5, ... test; 1, 11, ... validation
PREDICTED = (100, 105, 233)       # receipts the model never saw


@pytest.fixture(scope="module")
def cord_forest(tmp_path_factory, cord_root) -> dict:
    """The CORD segment-label forest preset, 20 trees, on receipts 0-39 (about half a minute)."""
    root = tmp_path_factory.mktemp("cord")
    (root / "cord" / "json").mkdir(parents=True)
    for i in TRAINED_ON:
        shutil.copy(cord_root / "json" / f"receipt_{i:05d}.json", root / "cord" / "json")
    env = {**os.environ, "PYTHONPATH": str(REPO), "DOCHAR_DATASETS": str(root)}
    result = subprocess.run(
        [sys.executable, "-m", "dochar.cli", "run", "+experiment=cord_labels_forest",
         "model.options.n_estimators=20", "evaluation.bootstrap_resamples=50",
         "tracking.experiment=predict-cord"], cwd=root, env=env, capture_output=True, text=True,
        timeout=900)
    assert result.returncode == 0, result.stdout[-3000:] + result.stderr[-3000:]
    return {"folder": next((root / "outputs" / "runs").glob("*/run")), "root": cord_root}


def test_cord_json_in_records_out(cord_forest, tmp_path, capsys):
    inputs = [cord_forest["root"] / "json" / f"receipt_{i:05d}.json" for i in PREDICTED]
    code = main(["--model", str(cord_forest["folder"]), "--input", *map(str, inputs),
                 "--out", str(tmp_path)])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "scored" in out          # the JSON carries CORD's labels: the words are scored
    records = json.loads((tmp_path / "records.json").read_text())
    assert [r["doc_id"] for r in records] == [p.stem for p in inputs]
    # the record's keys are CORD's parse: header fields, and line items under "menu"
    assert all(set(r) == {"doc_id", "fields", "menu"} for r in records)
    words = pd.read_csv(tmp_path / "words.csv", keep_default_na=False)
    by_word = words.set_index(["doc_id", "word_id"])
    shape = json.loads((cord_forest["folder"] / "model" / "manifest.json").read_text()
                       )["data"]["record"]
    for record in records:
        doc = record["doc_id"]
        # a receipt's words all come back, texts as in its file
        source = json.loads((cord_forest["root"] / "json" / f"{doc}.json").read_text())
        texts = Counter(w["text"] for line in source["valid_line"] for w in line["words"]
                        if w["text"].strip())
        assert Counter(words.loc[words["doc_id"] == doc, "text"]) == texts
        values = [(label, v) for label, found in record["fields"].items()
                  for v in (found if isinstance(found, list) else [found])]
        values += [(column, v) for item in record["menu"] for column, v in item.items()]
        for label, value in values:
            assert value["text"] == " ".join(by_word.loc[(doc, w), "text"]
                                             for w in value["word_ids"])
            assert {by_word.loc[(doc, w), "predicted"] for w in value["word_ids"]} == {label}
        # every word predicted as a record label is in one value at most; the words left out
        # are other pieces of a single field, whose kept value is in the record
        used = Counter(w for _, value in values for w in value["word_ids"])
        wanted = words[(words["doc_id"] == doc) & words["predicted"].isin(
            shape["header_fields"] + shape["item_columns"])]
        assert max(used.values(), default=1) == 1 and set(used) <= set(wanted["word_id"])
        left_out = wanted[~wanted["word_id"].isin(list(used))]
        assert set(left_out["predicted"]) <= set(shape["single_fields"]) & set(record["fields"])
        # the anchor column (the item name) opens the items: one item per predicted name line
        # (no two name lines of these receipts share a line band); an item after the first
        # has a name or was opened by a second value of a column its predecessor holds once;
        # items run top to bottom
        names = wanted.loc[wanted["predicted"] == shape["row_anchor"], "entity"].nunique()
        assert sum(shape["row_anchor"] in item for item in record["menu"]) == names
        once = set(shape["once_per_item"])
        assert all(shape["row_anchor"] in item or set(item) & set(before) & once
                   for before, item in zip(record["menu"], record["menu"][1:]))
        tops = [min(v["box"][1] for v in item.values()) for item in record["menu"]]
        assert tops == sorted(tops)
    table = pd.read_csv(tmp_path / "records.csv", keep_default_na=False, dtype=str)
    for record in records:
        rows = table[table["doc_id"] == record["doc_id"]]
        names = [item.get("menu.nm", {}).get("text", "") for item in record["menu"]]
        assert rows["item"].tolist() == ([str(i + 1) for i in range(len(names))] or [""])
        assert rows["menu.nm"].tolist() == (names or [""])
