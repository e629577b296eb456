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
    SplitAssignment,
    SplitError,
    documents_of,
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
    folds = make_splits(documents_of(table), split_cfg["protocol"], seed=seed,
                        test_size=split_cfg["test_size"], val_size=split_cfg["val_size"],
                        n_folds=split_cfg["n_folds"])
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
    for part in PARTS:
        if not getattr(assignment, part):
            raise SplitError(f"split {split_cfg['protocol']!r} left no {part} documents")
    leakage, leak_counts = layouts.leakage(assignment)
    notes = {**layouts.notes, **leak_counts,
             **{f"split/{part}_documents": float(len(getattr(assignment, part)))
                for part in PARTS}}
    return RunSplit(table, assignment, leakage, notes)
