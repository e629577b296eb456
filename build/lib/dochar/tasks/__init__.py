"""Tasks: what a node is, what its target is, and how predictions go back onto words.

Each task module mirrors ``configs/task/<name>.yaml``; :func:`from_config` builds the one a
``task`` config section names. Scores live in :mod:`dochar.metrics`, which reads the kinds of
scorer a task names. The ``links`` task classifies candidate pairs instead of nodes; it runs
through the same wiring (:mod:`dochar.experiment`).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from dochar.tasks.base import NODES, PAIRS, VALIDATION_SCORE, Task, TaskError, headline
from dochar.tasks.entity_tags import EntityTags
from dochar.tasks.links import Links
from dochar.tasks.segment_labels import SegmentLabels, SegmentPage
from dochar.tasks.word_labels import WordLabels

TASKS: dict[str, type] = {
    "word_labels": WordLabels,
    "entity_tags": EntityTags,
    "segment_labels": SegmentLabels,
    "links": Links,
}


def from_config(task_cfg: Mapping[str, Any] | None) -> Task:
    """The task a ``task`` config section names (``name`` plus the task's own options)."""
    options = dict(task_cfg or {"name": "word_labels"})
    name = str(options.pop("name", "word_labels"))
    if name not in TASKS:
        raise TaskError(f"task.name={name!r}: unknown; choose one of {sorted(TASKS)}")
    fields = set(TASKS[name].__dataclass_fields__)
    unknown = sorted(set(options) - fields)
    if unknown:
        raise TaskError(f"task {name!r}: unknown option(s) {unknown}; valid options are "
                        f"{sorted(fields)}")
    if "outside" in options:
        options["outside"] = tuple(options["outside"])
    return TASKS[name](**{key: _plain(value) for key, value in options.items()})


def _plain(value: Any) -> Any:
    """Config containers as plain Python (a task is built from resolved values, not nodes)."""
    if hasattr(value, "items"):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)) or type(value).__name__ == "ListConfig":
        return [_plain(v) for v in value]
    return value


__all__ = ["NODES", "PAIRS", "TASKS", "VALIDATION_SCORE", "EntityTags", "Links",
           "SegmentLabels", "SegmentPage", "Task", "TaskError", "WordLabels", "from_config",
           "headline"]
