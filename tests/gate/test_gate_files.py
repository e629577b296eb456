"""The baseline file: written whole (scratch file, then rename), cut short never read as good,
and stamped with the library versions and commit state the scores depend on."""

from __future__ import annotations

import pytest

from dochar.gate.baseline import Baseline, describe_update, library_versions, version_differences
from dochar.gate.rules import GateConfigError, Score


def baseline(**extra) -> Baseline:
    scores = {f"f1/class{i}": Score(0.5 + i / 100, 0.4, 0.6, 10.0) for i in range(30)}
    scores["macro_f1"] = Score(0.9, 0.85, 0.95)
    return Baseline(name="t", scores=scores, data_fingerprint="abc", git_commit="0" * 40,
                    git_dirty=False, libraries=library_versions(), **extra)


def test_round_trip_keeps_versions_and_commit_state(tmp_path):
    path = baseline().write(tmp_path / "b.yaml")
    back = Baseline.read(path)
    assert back.scores == baseline().scores
    assert back.git_dirty is False and back.libraries == library_versions()
    assert set(back.libraries) == {"torch", "torch-geometric", "scikit-learn", "numpy"}
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
