"""What an edge transform is: one step from a page's edges to new edges of the same page.

A transform is switched on by one key of the graph config (its ``switch``), takes its settings
as keyword options (its dataclass fields, named as in ``graph.options``) and says before any page
is seen how it renames relations and which edge attributes it adds, so a model can size itself
from the composed builder alone.
"""

from __future__ import annotations

import dataclasses
from typing import Any, ClassVar

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import GraphBuilderError, TypedEdges


class EdgeTransform:
    """Base of every edge transform (subclasses are frozen dataclasses)."""

    switch: ClassVar[str]                # config key that turns the transform on
    keeps_attributes: ClassVar[bool] = False   # may follow a transform that adds attributes

    @classmethod
    def option_names(cls) -> tuple[str, ...]:
        return tuple(f.name for f in dataclasses.fields(cls))

    @classmethod
    def from_switch(cls, value: Any, **options: Any) -> EdgeTransform | None:
        """The transform when ``value`` switches it on, else None; options checked either way."""
        if not isinstance(value, (bool, np.bool_)):
            raise GraphBuilderError(f"graph option {cls.switch} must be true or false, "
                                    f"got {value!r}")
        transform = cls(**options)
        return transform if value else None

    def relations(self, relations: tuple[str, ...]) -> tuple[str, ...]:
        """Relation names after this transform, given those before it."""
        return relations

    def attribute_names(self, names: tuple[str, ...]) -> tuple[str, ...]:
        """Edge attribute names after this transform, given those before it."""
        return names

    def __call__(self, page: Page, edges: TypedEdges) -> TypedEdges:
        raise NotImplementedError


def check_fraction(transform: str, name: str, value: Any) -> None:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 < value <= 1:
        raise GraphBuilderError(f"graph option {name} ({transform}) must be a fraction in "
                                f"(0, 1], got {value!r}")
