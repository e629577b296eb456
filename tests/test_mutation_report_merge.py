"""`python -m mutation.run --report-only --workdir A B`: separate module runs merge into one
report, in the order of mutation/targets.py, and a module found in two run folders is refused
(which of the two would count is not for the report to guess)."""

from __future__ import annotations

from collections import Counter

import pytest

from mutation.run import ModuleResult, merged, report

TARGETS = {"dochar/a.py": [], "dochar/b.py": [], "dochar/c.py": []}


def _result(killed: int, survived: int) -> ModuleResult:
    return ModuleResult(counts=Counter({"killed": killed, "survived": survived}))


def test_runs_of_separate_modules_merge_in_the_order_of_the_targets():
    c, a = _result(3, 1), _result(4, 0)
    together = merged([{"dochar/c.py": c}, {"dochar/a.py": a}], TARGETS)
    assert list(together) == ["dochar/a.py", "dochar/c.py"]
    text = report(together, "python -m mutation.run --report-only", "full")
    # by hand: a 4/4 = 100%, c 3/4 = 75%, both 7/8 = 87.5%
    assert "| dochar/a.py | 4 | 4 | 0 | 0 | 0 | 0 | 0 | 100.0% |" in text
    assert "| dochar/c.py | 4 | 3 | 1 | 0 | 0 | 0 | 0 | 75.0% |" in text
    assert "| **all** | 8 | 7 | 1 | 0 | 0 | 0 | 0 | 87.5% |" in text


def test_a_module_in_two_run_folders_is_refused():
    with pytest.raises(SystemExit, match="dochar/a.py"):
        merged([{"dochar/a.py": _result(1, 0)}, {"dochar/a.py": _result(0, 1)}], TARGETS)


def test_a_module_run_on_an_older_version_is_marked_in_its_row(tmp_path):
    from mutation.run import ROOT, stale_modules

    module = "dochar/metrics/seen_unseen.py"
    old, current = tmp_path / "old", tmp_path / "current"
    for folder, text in ((old, "# an older version\n"),
                         (current, (ROOT / module).read_text(encoding="utf-8"))):
        (folder / module).parent.mkdir(parents=True)
        (folder / module).write_text(text, encoding="utf-8")
    assert stale_modules({old: [module], current: [module]}) == [module]
    assert stale_modules({current: [module], old: []}) == []   # old's run is of other modules
    text = report({module: _result(1, 0)}, "python -m mutation.run --report-only", "full",
                  [module])
    assert f"| {module} (run on an older version of the module) | 1 | 1 |" in text
