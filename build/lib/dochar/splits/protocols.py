"""Which documents train, tune and test a model, under a named protocol.

Protocols:

* ``random``: documents shuffled and cut; layouts may repeat across parts (optimistic).
* ``fixed``: the word table's ``split`` column (``train`` / ``val`` / ``test``); without ``val``
  documents, validation is carved at random from ``train``.
* ``layout_held_out``: one cut by ``layout_id`` (scikit-learn ``GroupShuffleSplit``); no test
  layout is seen in training or validation. ``test_size`` is a fraction of layouts.
* ``layout_kfold``: ``GroupKFold`` by layout, one assignment per fold.
* ``leave_one_layout_out``: ``LeaveOneGroupOut``, one assignment per layout.
* ``seen_and_unseen_layouts``: whole layouts held out as under ``layout_held_out`` (the unseen
  side of the test set) *and* ``seen_test_fraction`` of the documents of each remaining training
  layout moved to the test set (the seen side; a layout keeps at least one training document).
  Validation has both sides too, from the training pool only: whole layouts (``val_size`` of
  the pool's layouts) and ``val_size`` of each remaining layout's documents, so settings chosen
  on validation face the mix the test set holds.

Every assignment records each test document's side (:func:`layout_sides`): ``seen`` when its
layout has training documents, ``unseen`` when not, ``""`` without a layout id.

Validation always comes from the training pool only (``val_size`` is a fraction of that pool;
0 means no validation set), cut by layout under the layout protocols so that early stopping
on validation also measures unseen layouts. Each part is a sorted list of doc ids.
"""

from __future__ import annotations

import zlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sklearn.model_selection import GroupKFold, GroupShuffleSplit, LeaveOneGroupOut

from dochar.errors import DocharError

PROTOCOLS: tuple[str, ...] = ("random", "fixed", "layout_held_out", "layout_kfold",
                              "leave_one_layout_out", "seen_and_unseen_layouts")
LAYOUT_PROTOCOLS = frozenset({"layout_held_out", "layout_kfold", "leave_one_layout_out",
                              "seen_and_unseen_layouts"})
SIDES = ("seen", "unseen")   # a test document's layout has / has no training documents
PARTS = ("train", "val", "test")  # the parts of a split, also the values of the `split` column


class SplitError(DocharError):
    """Raised when documents cannot be split under the requested protocol."""


@dataclass
class SplitAssignment:
    train: list[str]
    val: list[str]
    test: list[str]
    protocol: str
    fold: int | None = None
    test_layouts: list[str] = field(default_factory=list)   # layout protocols only
    test_sides: dict[str, str] = field(default_factory=dict)  # test doc_id -> seen/unseen/""


def layout_sides(train: Sequence[str], test: Sequence[str], layout_of: Mapping[str, str]
                 ) -> dict[str, str]:
    """Test doc_id -> ``seen`` (its layout has a training document), ``unseen``, or ``""`` (no
    layout id: the side is not known)."""
    trained = {layout_of.get(doc, "") for doc in train} - {""}
    return {doc: "" if not layout_of.get(doc, "") else
            "seen" if layout_of[doc] in trained else "unseen" for doc in test}


def documents_per_layout(train: Sequence[str], layout_of: Mapping[str, str], per_layout: int,
                         seed: int) -> tuple[list[str], int]:
    """The first ``per_layout`` documents of each training layout in a seeded order that does
    not depend on ``per_layout`` (so smaller subsets nest in larger ones), and how many layouts
    had fewer documents than asked (they keep all of theirs)."""
    if isinstance(per_layout, bool) or not isinstance(per_layout, (int, np.integer)) \
            or per_layout < 1:
        raise SplitError(f"split.pages_per_layout={per_layout!r}: use a positive number of "
                         f"documents per layout, or null for all")
    missing = [doc for doc in train if not layout_of.get(doc, "")]
    if missing:
        raise SplitError(f"split.pages_per_layout needs a layout_id for every training document; "
                         f"{len(missing)} have none (e.g. {sorted(missing)[:5]}); set "
                         f"split.infer_layouts=true to group them by inferred families")
    by_layout: dict[str, list[str]] = {}
    for doc in sorted(train):
        by_layout.setdefault(layout_of[doc], []).append(doc)
    kept: list[str] = []
    short = 0
    for layout, docs in sorted(by_layout.items()):
        rng = np.random.default_rng([seed, zlib.crc32(layout.encode("utf-8"))])
        kept.extend(rng.permutation(docs)[:per_layout].tolist())
        short += len(docs) < per_layout
    return sorted(kept), short


def documents_of(table: pd.DataFrame) -> pd.DataFrame:
    """One row per document (doc_id, layout_id, split) from a word table, checked for agreement."""
    if "doc_id" not in table.columns:
        raise SplitError("the word table has no 'doc_id' column")
    docs = pd.DataFrame({"doc_id": table["doc_id"].astype(str).unique()})
    for column in ("layout_id", "split"):
        if column not in table.columns:
            docs[column] = ""
            continue
        values = table[column].astype("string").fillna("")
        distinct = values.groupby(table["doc_id"].astype(str)).nunique()
        if (distinct > 1).any():
            bad = distinct.index[distinct > 1][:5].tolist()
            raise SplitError(f"documents {bad} have more than one '{column}' value; "
                             f"one value per document is needed")
        docs[column] = docs["doc_id"].map(values.groupby(table["doc_id"].astype(str)).first())
    return docs


def _check_docs(docs: pd.DataFrame) -> pd.DataFrame:
    if "doc_id" not in docs.columns:
        raise SplitError(f"the document list needs a 'doc_id' column; it has {list(docs.columns)}")
    docs = docs.copy()
    docs["doc_id"] = docs["doc_id"].astype(str)
    for column in ("layout_id", "split"):
        docs[column] = (docs[column].astype("string").fillna("").str.strip()
                        if column in docs.columns else "")
    duplicated = docs["doc_id"][docs["doc_id"].duplicated()].unique().tolist()
    if duplicated:
        raise SplitError(f"the document list has repeated doc ids {duplicated[:10]}; "
                         f"give one row per document")
    if len(docs) == 0:
        raise SplitError("no documents to split")
    return docs.sort_values("doc_id", kind="stable").reset_index(drop=True)


def _fraction(name: str, value: float, allow_zero: bool) -> None:
    low_ok = value >= 0 if allow_zero else value > 0
    if not (low_ok and value < 1):
        raise SplitError(f"{name} must be a fraction in {'[0' if allow_zero else '(0'}, 1), "
                         f"got {value}")


def _cut_size(fraction: float, n: int, min_kept: int) -> int:
    """round(fraction * n), but at least 1 and leaving at least ``min_kept``."""
    return min(max(1, round(fraction * n)), n - min_kept)


def _random_cut(ids: list[str], fraction: float, rng: np.random.Generator, what: str,
                min_kept: int = 1) -> tuple[list[str], list[str]]:
    """(kept, cut) with at least one document cut and ``min_kept`` kept."""
    if fraction == 0:
        return sorted(ids), []
    if len(ids) < 2:
        raise SplitError(f"cannot carve a {what} set from {len(ids)} document(s); need at least 2")
    n_cut = _cut_size(fraction, len(ids), min_kept)
    order = rng.permutation(len(ids))
    cut = {ids[i] for i in order[:n_cut]}
    return sorted(set(ids) - cut), sorted(cut)


def _group_cut(docs: pd.DataFrame, fraction: float, seed: int, what: str, source: str,
               min_kept: int = 1) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(kept, cut) documents, no layout on both sides; fraction and min_kept count layouts."""
    if fraction == 0:
        return docs, docs.iloc[:0]
    n_layouts = docs["layout_id"].nunique()
    if n_layouts < 2:
        raise SplitError(f"cannot carve a {what} set by layout from {source} with "
                         f"{n_layouts} layout(s); need at least 2 (use more layouts, fewer "
                         f"folds, or val_size=0)")
    n_cut = _cut_size(fraction, n_layouts, min_kept)
    splitter = GroupShuffleSplit(n_splits=1, test_size=n_cut, train_size=n_layouts - n_cut,
                                 random_state=seed)
    kept, cut = next(splitter.split(docs, groups=docs["layout_id"]))
    return docs.iloc[kept], docs.iloc[cut]


def _need_layouts(docs: pd.DataFrame, protocol: str, needed: int, why: str) -> None:
    missing = docs.loc[docs["layout_id"] == "", "doc_id"].tolist()
    if missing:
        raise SplitError(
            f"protocol '{protocol}' needs a layout_id for every document; {len(missing)} of "
            f"{len(docs)} have none (e.g. {missing[:5]}). Fill the column with inferred layout "
            f"families: dochar.splits.layout_families.infer_layout_families(pages, threshold), or "
            f"in a run set split.infer_layouts=true (e.g. split=inferred_layouts)")
    have = docs["layout_id"].nunique()
    if have < needed:
        raise SplitError(f"protocol '{protocol}' needs at least {needed} distinct layouts "
                         f"({why}); the documents have {have}")


def _assignment(train: pd.DataFrame, test: pd.DataFrame, protocol: str, val_size: float,
                seed: int, fold: int | None) -> SplitAssignment:
    source = "the training pool" + (f" of fold {fold}" if fold is not None else "")
    train, val = _group_cut(train, val_size, seed, "validation", source)
    return SplitAssignment(sorted(train["doc_id"]), sorted(val["doc_id"]), sorted(test["doc_id"]),
                           protocol, fold, sorted(test["layout_id"].unique()))


def _seen_and_unseen(docs: pd.DataFrame, test_size: float, val_size: float,
                     seen_fraction: float, seed: int, with_val: int) -> SplitAssignment:
    pool, unseen = _group_cut(docs, test_size, seed, "test", "the documents", 1 + with_val)
    assignment = _assignment(pool, unseen, "seen_and_unseen_layouts", val_size, seed + 1, None)
    rng = np.random.default_rng(seed + 2)
    layout_of = dict(zip(docs["doc_id"], docs["layout_id"]))
    by_layout: dict[str, list[str]] = {}
    for doc in assignment.train:
        by_layout.setdefault(layout_of[doc], []).append(doc)
    seen_test: list[str] = []
    seen_val: list[str] = []
    for _, members in sorted(by_layout.items()):
        order = rng.permutation(members).tolist()
        if len(order) >= 2:   # at least one document moves, at least one stays for training
            n_test = _cut_size(seen_fraction, len(order), 1)
            seen_test.extend(order[:n_test])
            order = order[n_test:]
        if val_size > 0 and len(order) >= 2:
            n_val = _cut_size(val_size, len(order), 1)
            seen_val.extend(order[:n_val])
    assignment.train = sorted(set(assignment.train) - set(seen_test) - set(seen_val))
    assignment.test = sorted([*assignment.test, *seen_test])
    assignment.val = sorted([*assignment.val, *seen_val])
    return assignment


def make_splits(docs: pd.DataFrame, protocol: str, *, seed: int, test_size: float = 0.25,
                val_size: float = 0.15, n_folds: int = 5, seen_test_fraction: float = 0.2
                ) -> list[SplitAssignment]:
    """Split one-row-per-document ``docs`` (doc_id, layout_id, split) under ``protocol``; each
    assignment carries its test documents' sides (:func:`layout_sides`)."""
    if protocol not in PROTOCOLS:
        raise SplitError(f"unknown split protocol '{protocol}'; choose one of {list(PROTOCOLS)}")
    _fraction("test_size", test_size, allow_zero=False)
    _fraction("val_size", val_size, allow_zero=True)
    docs = _check_docs(docs)
    layout_of = dict(zip(docs["doc_id"], docs["layout_id"]))
    assignments = _make_splits(docs, protocol, seed, test_size, val_size, n_folds,
                               seen_test_fraction)
    for assignment in assignments:
        assignment.test_sides = layout_sides(assignment.train, assignment.test, layout_of)
    return assignments


def _make_splits(docs: pd.DataFrame, protocol: str, seed: int, test_size: float,
                 val_size: float, n_folds: int, seen_test_fraction: float
                 ) -> list[SplitAssignment]:
    rng = np.random.default_rng(seed)
    with_val = 1 if val_size > 0 else 0
    if protocol == "random":
        if len(docs) < 2 + with_val:
            raise SplitError(f"protocol 'random' needs at least {2 + with_val} documents; "
                             f"got {len(docs)}")
        pool, test = _random_cut(docs["doc_id"].tolist(), test_size, rng, "test", 1 + with_val)
        train, val = _random_cut(pool, val_size, rng, "validation")
        return [SplitAssignment(train, val, test, protocol)]
    if protocol == "fixed":
        return [_fixed(docs, val_size, rng)]
    needed = {"layout_held_out": 2, "leave_one_layout_out": 2, "seen_and_unseen_layouts": 2,
              "layout_kfold": max(n_folds, 2)}[protocol] + with_val
    why = ("train, test" + (", validation" if with_val else "")
           + (f"; {n_folds} folds" if protocol == "layout_kfold" else ""))
    if protocol == "layout_kfold" and n_folds < 2:
        raise SplitError(f"layout_kfold needs n_folds >= 2, got {n_folds}")
    _need_layouts(docs, protocol, needed, why)
    groups = docs["layout_id"]
    if protocol == "seen_and_unseen_layouts":
        _fraction("seen_test_fraction", seen_test_fraction, allow_zero=False)
        return [_seen_and_unseen(docs, test_size, val_size, seen_test_fraction, seed, with_val)]
    if protocol == "layout_held_out":
        pool, test = _group_cut(docs, test_size, seed, "test", "the documents", 1 + with_val)
        return [_assignment(pool, test, protocol, val_size, seed + 1, None)]
    if protocol == "layout_kfold":
        splitter = GroupKFold(n_splits=n_folds, shuffle=True, random_state=seed)
    else:
        splitter = LeaveOneGroupOut()
    return [_assignment(docs.iloc[train], docs.iloc[test], protocol, val_size, seed + 1 + fold,
                        fold)
            for fold, (train, test) in enumerate(splitter.split(docs, groups=groups))]


def _fixed(docs: pd.DataFrame, val_size: float, rng: np.random.Generator) -> SplitAssignment:
    split = docs["split"].str.lower().replace({"validation": "val", "valid": "val", "dev": "val"})
    empty = docs.loc[split == "", "doc_id"].tolist()
    if empty:
        raise SplitError(f"protocol 'fixed' needs a split value for every document; {len(empty)} "
                         f"of {len(docs)} have none (e.g. {empty[:5]})")
    unknown = sorted(set(split) - set(PARTS))
    if unknown:
        raise SplitError(f"unknown split value(s) {unknown}; use {list(PARTS)}")
    parts = {name: docs.loc[split == name, "doc_id"].tolist() for name in PARTS}
    for name in ("train", "test"):
        if not parts[name]:
            raise SplitError(f"protocol 'fixed' found no '{name}' documents in the split column")
    train, val = parts["train"], parts["val"]
    if not val:
        train, val = _random_cut(train, val_size, rng, "validation")
    return SplitAssignment(sorted(train), sorted(val), sorted(parts["test"]), "fixed")
