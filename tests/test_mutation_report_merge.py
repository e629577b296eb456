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


# --- --carry-over: verdicts of a committed report for modules unchanged since ---------------

EARLIER = """# Mutation testing (full)

Generated 2026-11-30 09:15 UTC by `python -m mutation.run` (mutmut). Kill rate = ...

| module | mutants | killed | survived | equivalent | no tests | timeout | not run | kill rate |
| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |
| dochar/a.py | 10 | 6 | 2 | 1 | 1 | 0 | 0 | 66.7% |
| dochar/b.py (run on an older version of the module) | 3 | 3 | 0 | 0 | 0 | 0 | 0 | 100.0% |
| **all** | 13 | 9 | 2 | 1 | 1 | 0 | 0 | 75.0% |

Surviving mutants (not marked equivalent): 2

### dochar.a.x_f__mutmut_1

```diff
@@ -1,2 +1,2 @@
 def f(x):
-    return x + 1
+    return x + 2
```

### dochar.a.x_g__mutmut_4

```diff
@@ -1,2 +1,2 @@
 def g(x):
-    return float(x)
+    return x
```

## Marked equivalent (mutation/equivalent.toml)

- `dochar.a.x_h__mutmut_2`: h's result is rounded by every caller
"""


def _git_repo(tmp_path):
    import subprocess

    def git(*args):
        subprocess.run(["git", *args], cwd=tmp_path, check=True, capture_output=True)
    git("init", "-q")
    git("config", "user.email", "t@example.org")
    git("config", "user.name", "t")
    (tmp_path / "dochar").mkdir()
    for name in ("a.py", "b.py"):
        (tmp_path / "dochar" / name).write_text(f"# {name}\n", encoding="utf-8")
    (tmp_path / "reports").mkdir()
    (tmp_path / "reports" / "mutation.md").write_text(EARLIER, encoding="utf-8")
    git("add", "-A")
    git("commit", "-qm", "report")
    return tmp_path


def test_an_unchanged_module_keeps_the_verdicts_of_the_committed_report(tmp_path):
    from mutation.run import carried_over

    root = _git_repo(tmp_path)
    (root / "reports" / "mutation.md").write_text("edited after the commit\n", encoding="utf-8")
    results, made = carried_over(root / "reports" / "mutation.md", ["dochar/a.py"], [], root)
    assert made == "2026-11-30 09:15 UTC"   # the committed text is read, not the edited file
    text = report(results, "cmd", "full", carried={"dochar/a.py": made})
    # the row as written in EARLIER, with its note: 6 / (10 - 1 equivalent) = 66.7%
    assert ("| dochar/a.py (carried over from the report of 2026-11-30 09:15 UTC; module "
            "unchanged since) | 10 | 6 | 2 | 1 | 1 | 0 | 0 | 66.7% |") in text
    assert "### dochar.a.x_f__mutmut_1\n\n```diff\n@@ -1,2 +1,2 @@\n def f(x):\n" in text
    assert "- `dochar.a.x_h__mutmut_2`: h's result is rounded by every caller" in text


def test_a_survivor_marked_equivalent_since_leaves_the_survivors(tmp_path):
    from mutation.run import Equivalent, carried_over

    root = _git_repo(tmp_path)
    marked = [Equivalent("dochar/a.py", "return float(x)", "return x", "x is a float already")]
    results, made = carried_over(root / "reports" / "mutation.md", ["dochar/a.py"], marked, root)
    text = report(results, "cmd", "full", carried={"dochar/a.py": made})
    # by hand: survived 2 -> 1, equivalent 1 -> 2, rate 6 / (10 - 2) = 75.0%
    assert "| 10 | 6 | 1 | 2 | 1 | 0 | 0 | 75.0% |" in text
    assert "x_g__mutmut_4`: x is a float already" in text


def test_a_changed_or_never_judged_module_is_refused(tmp_path):
    from mutation.run import carried_over

    root = _git_repo(tmp_path)
    with pytest.raises(SystemExit, match=r"dochar/b.py"):   # judged on an older version
        carried_over(root / "reports" / "mutation.md", ["dochar/b.py"], [], root)
    (root / "dochar" / "a.py").write_text("# a.py, changed\n", encoding="utf-8")
    with pytest.raises(SystemExit, match=r"dochar/a.py changed since reports/mutation.md"):
        carried_over(root / "reports" / "mutation.md", ["dochar/a.py"], [], root)
