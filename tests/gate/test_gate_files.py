"""The baseline file: written whole (scratch file, then rename), cut short never read as good,
and stamped with the library versions, machine and commit state the scores depend on."""

from __future__ import annotations

import shutil
import subprocess
from types import SimpleNamespace

import pytest

from dochar.gate.baseline import (Baseline, describe_update, library_versions, machine_info,
                                  version_differences)
from dochar.gate.command import notes_for
from dochar.gate.rules import GateConfigError, Score


def baseline(**extra) -> Baseline:
    scores = {f"f1/class{i}": Score(0.5 + i / 100, 0.4, 0.6, 10.0) for i in range(30)}
    scores["macro_f1"] = Score(0.9, 0.85, 0.95)
    return Baseline(name="t", scores=scores, data_fingerprint="abc", git_commit="0" * 40,
                    git_dirty=False, libraries=library_versions(), machine=machine_info(),
                    **extra)


def test_round_trip_keeps_versions_and_commit_state(tmp_path):
    path = baseline().write(tmp_path / "b.yaml")
    back = Baseline.read(path)
    assert back.scores == baseline().scores
    assert back.git_dirty is False and back.libraries == library_versions()
    assert set(back.libraries) == {"torch", "torch-geometric", "scikit-learn", "numpy"}
    assert back.machine == machine_info()
    assert [p.name for p in tmp_path.iterdir()] == ["b.yaml"]     # no scratch file left


@pytest.mark.parametrize("keep", [0.5, 0.8, 0.97])
def test_a_baseline_cut_short_is_never_taken_for_a_good_one(tmp_path, keep):
    """Cut anywhere, the file either fails to parse, lacks its metrics or lacks its end line:
    with sorted keys, a cut inside ``metrics`` still parses as YAML (fewer metrics), which is
    why the end line exists."""
    path = baseline().write(tmp_path / "b.yaml")
    text = path.read_text(encoding="utf-8")
    path.write_text(text[: int(len(text) * keep)], encoding="utf-8")
    with pytest.raises(GateConfigError):
        Baseline.read(path)


def test_a_write_that_dies_midway_leaves_the_old_file(tmp_path):
    from dochar.data.files import atomic_write

    path = baseline().write(tmp_path / "b.yaml")
    before = path.read_text(encoding="utf-8")
    with pytest.raises(RuntimeError, match="disk full"):
        with atomic_write(path) as scratch:
            scratch.write_text(before[:100], encoding="utf-8")
            raise RuntimeError("disk full")
    assert path.read_text(encoding="utf-8") == before
    assert [p.name for p in tmp_path.iterdir()] == ["b.yaml"]


def test_version_changes_are_named():
    old = {"torch": "2.13.0", "numpy": "2.4.6", "scikit-learn": "1.9.1", "torch-geometric": "2.8.1"}
    new = {**old, "torch": "2.14.0"}
    assert version_differences(old, new) == ["torch 2.13.0 -> 2.14.0"]
    assert version_differences({}, new) == []
    first, second = baseline(), baseline()
    second.libraries = {**first.libraries, "numpy": "0.0"}
    second.git_dirty = True
    lines = describe_update(first, second)
    assert any(line.startswith("library numpy ") and line.endswith("-> 0.0") for line in lines)
    assert any("uncommitted changes" in line for line in lines)


def test_the_machine_names_the_cpu_lscpu_names():
    """lscpu (util-linux) is the independent reader of the CPU's model name."""
    if shutil.which("lscpu") is None:
        pytest.skip("no lscpu here")
    listing = subprocess.run(["lscpu"], capture_output=True, text=True, check=True).stdout
    named = [line.split(":", 1)[1].strip() for line in listing.splitlines()
             if line.startswith("Model name:")]
    assert machine_info()["cpu"] == named[0]
    assert machine_info()["cpu_instructions"] in {"DEFAULT", "VSX", "Z VECTOR", "NO AVX",
                                                  "AVX", "AVX2", "AVX512", "SVE256"}


def test_a_rerun_on_another_machine_is_told_what_differs():
    elsewhere = baseline()
    elsewhere.machine = {**elsewhere.machine, "cpu": "Example CPU 9000"}
    notes = notes_for(SimpleNamespace(checks=[]), elsewhere, SimpleNamespace(config={}))
    assert [n for n in notes if n.startswith("this machine is not the baseline's (cpu Example "
                                             "CPU 9000 -> ")]
    assert not [n for n in notes_for(SimpleNamespace(checks=[]), baseline(),
                                     SimpleNamespace(config={})) if "machine" in n]
    unrecorded = baseline()
    unrecorded.machine = {}
    assert "the baseline records no machine; `dochar gate --update` adds it" in notes_for(
        SimpleNamespace(checks=[]), unrecorded, SimpleNamespace(config={}))
    assert "machine cpu Example CPU 9000 -> " + machine_info()["cpu"] in describe_update(
        elsewhere, baseline())
    assert [line for line in describe_update(unrecorded, elsewhere)
            if line.startswith("machine recorded: ") and "cpu Example CPU 9000" in line]


def test_the_committed_baseline_records_what_judges_a_rerun_elsewhere():
    """Bit-identical reruns need the same libraries, machine and thread count
    (docs/crash-safety.md): the committed baseline names all three."""
    from tests.helpers import REPO

    committed = Baseline.read(REPO / "reports" / "baseline" / "reference.yaml")
    assert set(committed.libraries) == {"torch", "torch-geometric", "scikit-learn", "numpy"}
    assert {"cpu", "cpu_instructions", "architecture"} <= set(committed.machine)
    assert all(committed.machine[key] for key in ("cpu", "cpu_instructions"))
    assert committed.experiment_config["train.threads"] == 1
