"""The split stage: which documents train, tune and test a run, entered once per run.

:func:`split_run` applies the configured protocol to a word table: layout families (given or
inferred from page signatures), the train/val/test assignment (optionally a nested training
subset for learning curves) and the leakage report between the seen and the test part.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from dochar.splits.layout_families import assign_inferred_layouts
from dochar.splits.protocols import (
    PARTS,
    SIDES,
    SplitAssignment,
    SplitError,
    documents_of,
    documents_per_layout,
    layout_sides,
    make_splits,
)

__all__ = ["PARTS", "RunSplit", "SplitAssignment", "SplitError", "split_run"]


@dataclass
class RunSplit:
    """A run's split: the table as split (layout ids possibly inferred), the assignment, the
    leakage report and the notes logged as ``split/*`` metrics."""

    table: pd.DataFrame
    assignment: SplitAssignment
    leakage: pd.DataFrame
    notes: dict[str, float] = field(default_factory=dict)

    def part_of(self) -> dict[str, str]:
        """doc_id -> part."""
        return {doc: part for part in PARTS for doc in getattr(self.assignment, part)}


def split_run(table: pd.DataFrame, split_cfg: Mapping[str, Any], seed: int) -> RunSplit:
    table, layouts = assign_inferred_layouts(table, split_cfg)
    docs = documents_of(table)
    folds = make_splits(docs, split_cfg["protocol"], seed=seed,
                        test_size=split_cfg["test_size"], val_size=split_cfg["val_size"],
                        n_folds=split_cfg["n_folds"],
                        seen_test_fraction=split_cfg.get("seen_test_fraction", 0.2))
    fold = int(split_cfg["fold"])
    if not 0 <= fold < len(folds):
        raise SplitError(f"split.fold={fold}: protocol {split_cfg['protocol']!r} made "
                         f"{len(folds)} fold(s)")
    assignment = folds[fold]
    wanted = split_cfg.get("train_documents")
    if wanted is not None:
        if not 0 < int(wanted) <= len(assignment.train):
            raise SplitError(f"split.train_documents={wanted}: the training part holds "
                             f"{len(assignment.train)} documents")
        rng = np.random.default_rng(seed)
        # a prefix of one permutation: smaller training sets nest inside larger ones
        assignment.train = sorted(rng.permutation(assignment.train)[:int(wanted)])
    layout_of = dict(zip(docs["doc_id"], docs["layout_id"]))
    per_layout = split_cfg.get("pages_per_layout")
    short_layouts = 0
    if per_layout is not None:
        if wanted is not None:
            raise SplitError("split.train_documents and split.pages_per_layout are both set; "
                             "a learning curve varies one of them")
        assignment.train, short_layouts = documents_per_layout(assignment.train, layout_of,
                                                               per_layout, seed)
    # a smaller training part can leave a layout with no training document: sides again
    assignment.test_sides = layout_sides(assignment.train, assignment.test, layout_of)
    for part in PARTS:
        if not getattr(assignment, part):
            raise SplitError(f"split {split_cfg['protocol']!r} left no {part} documents")
    leakage, leak_counts = layouts.leakage(assignment)
    notes = {**layouts.notes, **leak_counts,
             **{f"split/{part}_documents": float(len(getattr(assignment, part)))
                for part in PARTS},
             **_side_notes(assignment, layout_of, per_layout, short_layouts)}
    return RunSplit(table, assignment, leakage, notes)


def _side_notes(assignment: SplitAssignment, layout_of: dict[str, str],
                per_layout: int | None, short_layouts: int) -> dict[str, float]:
    """Training layouts and test documents per side (``split/seen_test_documents`` …)."""
    sides = list(assignment.test_sides.values())
    notes = {"split/train_layouts": float(len({layout_of[d] for d in assignment.train} - {""})),
             **{f"split/{side}_test_documents": float(sides.count(side)) for side in SIDES}}
    if per_layout is not None:
        notes["split/pages_per_layout"] = float(per_layout)
        notes["split/short_layouts"] = float(short_layouts)
    return notes
