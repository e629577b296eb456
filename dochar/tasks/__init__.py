"""Tasks: what a node is, what its target is, and how predictions go back onto words.

Each task module mirrors ``configs/task/<name>.yaml``; :func:`from_config` builds the one a
``task`` config section names. Task-specific scores live in :mod:`dochar.metrics`, which reads
the node predictions a task's model makes. The ``links`` task classifies candidate edges
instead of nodes and runs through its own wiring (:mod:`dochar.link_experiment`).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from dochar.tasks.base import Task, TaskError
from dochar.tasks.entity_tags import EntityTags
from dochar.tasks.segment_labels import SegmentLabels, SegmentPage
from dochar.tasks.word_labels import WordLabels

TASKS: dict[str, type] = {
    "word_labels": WordLabels,
    "entity_tags": EntityTags,
    "segment_labels": SegmentLabels,
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
    return TASKS[name](**options)


__all__ = ["TASKS", "EntityTags", "SegmentLabels", "SegmentPage", "Task", "TaskError",
           "WordLabels", "from_config"]
