"""Tasks: what a node or an edge is, and which truth it is scored against.

``task.name`` chooses one; ``word_labels`` (a class per word) is the default run, ``links``
(edge classification over candidate pairs) is :mod:`dochar.tasks.links`.
"""

TASKS: tuple[str, ...] = ("word_labels", "links")
