"""`python -m mutation.run --again`: a run folder goes on with new tests only while its mutated
modules are still the checkout's; otherwise its verdicts would be of other code."""

from __future__ import annotations

import pytest

from mutation.run import ROOT, refresh

MODULE = "dochar/metrics/seen_unseen.py"
TEST = "tests/splits/test_seen_unseen.py"


def _run_folder(tmp_path, module_text: str):
    folder = tmp_path / "run"
    (folder / "mutants").mkdir(parents=True)
    (folder / MODULE).parent.mkdir(parents=True)
    (folder / MODULE).write_text(module_text, encoding="utf-8")
    return folder


def test_a_folder_whose_module_changed_is_refused(tmp_path):
    folder = _run_folder(tmp_path, "# the module as it was at the run\n")
    with pytest.raises(SystemExit, match="seen_unseen.py'\\] changed since the run"):
        refresh(folder, {MODULE: [TEST]}, "forkserver")


def test_a_folder_without_a_run_is_refused(tmp_path):
    with pytest.raises(SystemExit, match="holds no mutmut run"):
        refresh(tmp_path, {MODULE: [TEST]}, "forkserver")


def test_the_tests_are_refreshed_and_the_mutated_module_kept(tmp_path):
    folder = _run_folder(tmp_path, (ROOT / MODULE).read_text(encoding="utf-8"))
    refresh(folder, {MODULE: [TEST]}, "forkserver")
    assert (folder / TEST).read_bytes() == (ROOT / TEST).read_bytes()
    settings = (folder / "pyproject.toml").read_text(encoding="utf-8")
    assert f'only_mutate = ["{MODULE}"]' in settings
    assert f'pytest_add_cli_args_test_selection = ["{TEST}"]' in settings
