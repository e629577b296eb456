"""A run folder is written file by file, whole or not at all, with its summary last: a save that
dies half-way leaves a folder that is never taken for a run."""

from __future__ import annotations

import pandas as pd
import pytest

from dochar.data.files import OutputWriteError
from dochar.runs.bundle import PREDICTION_COLUMNS, RunBundle
from dochar.runs.store import RunLookupError, find_run, run_folder


def _bundle(tables: dict) -> RunBundle:
    row = {column: 0 for column in PREDICTION_COLUMNS}
    row.update(doc_id="d", label="a", predicted="a", confidence=1.0, text="w")
    return RunBundle(name="r", labels=["a"], metrics={"macro_f1": 1.0},
                     predictions=pd.DataFrame([row]), tables=tables)


class _Broken(pd.DataFrame):
    def to_csv(self, *args, **kwargs):   # the disk fills up half-way through a table
        with open(args[0], "w") as handle:
            handle.write("a,b\n1,")
        raise OSError("No space left on device")


def test_a_save_that_dies_leaves_no_run_and_no_half_file(tmp_path):
    folder = tmp_path / "run"
    with pytest.raises(OutputWriteError, match="per_class.csv: No space"):
        _bundle({"per_class": _Broken({"a": [1]})}).save(folder)
    assert run_folder(folder) is None                     # no summary: not a run folder
    with pytest.raises(RunLookupError, match="not a dochar run folder"):
        find_run(str(folder), "sqlite:///unused.db")
    assert sorted(p.name for p in folder.iterdir()) == ["config.yaml", "predictions.parquet"]


def test_a_whole_save_reads_back(tmp_path):
    folder = _bundle({"per_class": pd.DataFrame({"f1": [1.0]}, index=["a"])}).save(tmp_path / "r")
    assert run_folder(folder) == folder
    back = RunBundle.load(folder)
    assert back.metrics == {"macro_f1": 1.0} and list(back.tables) == ["per_class"]
    assert not [p for p in folder.iterdir() if p.name.endswith(".partial")]
