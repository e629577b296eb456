"""The package's shape: one direction of data flow, no import cycle, a short top level.

Stages in data-flow order (DESIGN.md): data → splits → tasks → graphs → features → models → records
→ metrics → runs → report → gate. A module may import its own stage and earlier ones; the wiring modules
(``experiment``, ``curve``, ``cli``) sit above every stage. Checked on the source with ``ast``,
so lazy imports inside functions count too.
"""

from __future__ import annotations

import ast
from pathlib import Path

from tests.helpers import REPO

PACKAGE = REPO / "dochar"
FOUNDATION = ("errors", "config", "__init__")       # imported by anything
STAGES = ("data", "splits", "tasks", "graphs", "features", "models", "records", "metrics", "runs",
          "report", "gate")
WIRING = ("experiment", "curve", "predict", "cli")
DRIVERS = ("dochar.gate.command",)   # the gate's command reruns a reference experiment


def _module_name(path: Path) -> str:
    parts = path.relative_to(REPO).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports(path: Path) -> set[str]:
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.add(node.module)
            found.update(f"{node.module}.{alias.name}" for alias in node.names)
        elif isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
    return found


def _graph() -> dict[str, set[str]]:
    modules = {_module_name(p): p for p in PACKAGE.rglob("*.py")}
    return {name: {m for m in _imports(path) if m in modules and m != name}
            for name, path in modules.items()}


def _rank(module: str) -> int:
    if module in DRIVERS:
        return len(STAGES)
    first = module.split(".")[1] if "." in module else "__init__"
    if first in FOUNDATION:
        return -1
    if first in STAGES:
        return STAGES.index(first)
    assert first in WIRING, f"dochar.{first} is neither a stage, the foundation nor wiring"
    return len(STAGES)


def test_no_module_reaches_up_to_a_later_stage():
    late = [(source, target) for source, targets in _graph().items() for target in targets
            if _rank(target) > _rank(source)]
    assert late == []


def test_no_import_cycle():
    # a package's __init__ importing its own submodules is how it exports names: not a cycle
    graph = {source: {t for t in targets if not t.startswith(source + ".")}
             for source, targets in _graph().items()}
    state: dict[str, str] = {}
    cycles: list[list[str]] = []

    def visit(node: str, path: list[str]) -> None:
        state[node] = "open"
        for target in sorted(graph[node]):
            if state.get(target) == "open":
                cycles.append(path[path.index(target):] + [target])
            elif target not in state:
                visit(target, [*path, target])
        state[node] = "done"

    for node in sorted(graph):
        if node not in state:
            visit(node, [node])
    assert cycles == []


def test_top_level_is_short():
    top = sorted(p.stem for p in PACKAGE.glob("*.py"))
    assert len(top) <= 8, top


def test_the_generator_reads_only_the_word_table_format():
    used = {m for path in (REPO / "data_synth").rglob("*.py") for m in _imports(path)
            if m.startswith("dochar")}
    assert used <= {"dochar.data.word_table", "dochar.data.word_table.write_word_table",
                    "dochar.data.word_table.table_name_problem"}, used


def _task_name_comparisons(source: str, filename: str, names: set[str]) -> list[str]:
    """Comparisons (``==``, ``!=``, ``in``, ``not in``) with a task's name as a string constant."""
    found = []
    for node in ast.walk(ast.parse(source, filename=filename)):
        if not isinstance(node, ast.Compare):
            continue
        operands = [node.left, *node.comparators]
        constants = [n for o in operands for n in ast.walk(o)
                     if isinstance(n, ast.Constant) and n.value in names]
        if constants:
            found.append(f"{filename}:{node.lineno}")
    return found


def test_only_the_tasks_package_compares_task_names():
    """Consumers ask the task (its target, scores, decoding), never which task it is."""
    from dochar.tasks import TASKS

    names = set(TASKS)
    found = [hit for path in PACKAGE.rglob("*.py")
             if "tasks" not in path.relative_to(PACKAGE).parts
             for hit in _task_name_comparisons(path.read_text(), str(path.relative_to(REPO)),
                                               names)]
    assert found == []


def test_the_task_name_check_sees_a_comparison():
    """The check above on planted lines: each form of comparison is found, plain use is not."""
    planted = ('if task.name == "links":\n    pass\n'
               'ok = "entity_tags" != cfg.task.name\n'
               'chosen = name in ("word_labels", "x")\n'
               'default = {"name": "word_labels"}\n')
    assert _task_name_comparisons(planted, "planted.py", {"links", "entity_tags", "word_labels"}
                                  ) == ["planted.py:1", "planted.py:3", "planted.py:4"]
