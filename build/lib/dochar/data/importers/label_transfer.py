"""Move labels from a labelled word table onto imported words of the same page, by box overlap.

Pages pair up by (doc_id, page). Boxes are compared after dividing by their own page size, so a
labelled table in points and OCR words in pixels of the same page still line up (IoU does not
change under scaling each axis). Words pair one to one, either by the Hungarian method
(maximum total IoU; Kuhn 1955, via scipy's ``linear_sum_assignment``) or greedily by the best
remaining IoU; a pair counts only at ``min_iou`` or more (0.5, the PASCAL VOC threshold, by
default). A matched word takes ``label`` and ``entity_id``; every imported word of the page
takes its ``layout_id`` and ``split``. Unmatched words on both sides are counted and listed;
unmatched imported words are dropped, or given ``unmatched_label`` when one is set.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

WORD_COLUMNS = ("label", "entity_id")
PAGE_COLUMNS = ("layout_id", "split")
MATCHING = ("hungarian", "greedy")


@dataclass(frozen=True)
class TransferSettings:
    min_iou: float = 0.5
    matching: str = "hungarian"
    unmatched_label: str | None = None

    def __post_init__(self) -> None:
        if self.matching not in MATCHING:
            raise ValueError(f"label transfer matching must be one of {list(MATCHING)}, "
                             f"got {self.matching!r}")
        if not 0.0 < self.min_iou <= 1.0:
            raise ValueError(f"label transfer min_iou must be in (0, 1], got {self.min_iou!r}")


@dataclass
class TransferReport:
    pages_paired: int = 0
    labelled_words: int = 0          # on paired pages
    matched: int = 0
    unmatched_imported: list[str] = field(default_factory=list)
    unmatched_labelled: list[str] = field(default_factory=list)
    pages_without_labels: list[str] = field(default_factory=list)
    labelled_pages_not_imported: list[str] = field(default_factory=list)

    @property
    def recall(self) -> float:
        """Share of the labelled words on paired pages that found an imported word."""
        return self.matched / self.labelled_words if self.labelled_words else 0.0

    def lines(self, shown: int = 10) -> list[str]:
        lines = [f"label transfer: {self.pages_paired} pages paired, {self.matched} of "
                 f"{self.labelled_words} labelled words matched ({self.recall:.1%}); "
                 f"{len(self.unmatched_imported)} imported and {len(self.unmatched_labelled)} "
                 f"labelled words unmatched"]
        for name, items in (("imported words unmatched", self.unmatched_imported),
                            ("labelled words unmatched", self.unmatched_labelled),
                            ("imported pages without labels", self.pages_without_labels),
                            ("labelled pages not imported", self.labelled_pages_not_imported)):
            if items:
                more = f" ... and {len(items) - shown} more" if len(items) > shown else ""
                lines.append(f"{name}: {', '.join(items[:shown])}{more}")
        return lines


def box_iou(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """IoU of every box in ``a`` (n, 4) with every box in ``b`` (m, 4), as (n, m)."""
    width = np.clip(np.minimum(a[:, None, 2], b[None, :, 2])
                    - np.maximum(a[:, None, 0], b[None, :, 0]), 0, None)
    height = np.clip(np.minimum(a[:, None, 3], b[None, :, 3])
                     - np.maximum(a[:, None, 1], b[None, :, 1]), 0, None)
    inter = width * height
    area_a = (a[:, 2] - a[:, 0]) * (a[:, 3] - a[:, 1])
    area_b = (b[:, 2] - b[:, 0]) * (b[:, 3] - b[:, 1])
    union = area_a[:, None] + area_b[None, :] - inter
    return np.divide(inter, union, out=np.zeros_like(inter), where=union > 0)


def match_boxes(iou: np.ndarray, min_iou: float, matching: str) -> list[tuple[int, int]]:
    """One-to-one pairs (row, column) with IoU >= min_iou."""
    if iou.size == 0:
        return []
    if matching == "hungarian":
        from scipy.optimize import linear_sum_assignment

        rows, cols = linear_sum_assignment(-np.where(iou >= min_iou, iou, 0.0))
        return [(int(r), int(c)) for r, c in zip(rows, cols) if iou[r, c] >= min_iou]
    order = np.argsort(-iou, axis=None, kind="stable")
    used_rows, used_cols, pairs = set(), set(), []
    for flat in order:
        r, c = divmod(int(flat), iou.shape[1])
        if iou[r, c] < min_iou:
            break
        if r not in used_rows and c not in used_cols:
            used_rows.add(r)
            used_cols.add(c)
            pairs.append((r, c))
    return pairs


def _normalised(words: pd.DataFrame) -> np.ndarray:
    boxes = words[["x0", "y0", "x1", "y1"]].to_numpy(dtype=float)
    size = words[["page_width", "page_height"]].to_numpy(dtype=float)
    return boxes / np.column_stack([size, size])


def _name(words: pd.DataFrame, index: int) -> str:
    row = words.iloc[index]
    return f"{row.doc_id}#p{row.page}/w{row.word_id} {row.text!r}"


def transfer_labels(imported: pd.DataFrame, labelled: pd.DataFrame,
                    settings: TransferSettings = TransferSettings()
                    ) -> tuple[pd.DataFrame, TransferReport]:
    if "label" not in labelled.columns:
        raise ValueError("the labelled table has no 'label' column to transfer")
    report = TransferReport()
    moved = [c for c in (*WORD_COLUMNS, *PAGE_COLUMNS) if c in labelled.columns]
    labelled_pages = {key: words for key, words in labelled.groupby(["doc_id", "page"])}
    pages_out = []
    for key, words in imported.groupby(["doc_id", "page"], sort=True):
        words = words.reset_index(drop=True).copy()
        for column in moved:
            words[column] = settings.unmatched_label if column == "label" else ""
        truth = labelled_pages.pop(key, None)
        if truth is None:
            report.pages_without_labels.append(f"{key[0]}#p{key[1]}")
            report.unmatched_imported += [_name(words, i) for i in range(len(words))]
            keep = np.full(len(words), settings.unmatched_label is not None)
        else:
            truth = truth.reset_index(drop=True)
            report.pages_paired += 1
            report.labelled_words += len(truth)
            pairs = match_boxes(box_iou(_normalised(words), _normalised(truth)),
                                settings.min_iou, settings.matching)
            report.matched += len(pairs)
            for column in PAGE_COLUMNS:
                if column in moved:
                    words[column] = str(truth[column].iloc[0])
            keep = np.full(len(words), settings.unmatched_label is not None)
            for i, j in pairs:
                keep[i] = True
                for column in WORD_COLUMNS:
                    if column in moved:
                        words.at[i, column] = str(truth.at[j, column])
            matched_i, matched_j = {i for i, _ in pairs}, {j for _, j in pairs}
            report.unmatched_imported += [_name(words, i) for i in range(len(words))
                                          if i not in matched_i]
            report.unmatched_labelled += [_name(truth, j) for j in range(len(truth))
                                          if j not in matched_j]
        pages_out.append(words.loc[keep])  # word ids kept, so the lists above stay true
    report.labelled_pages_not_imported = [f"{d}#p{p}" for d, p in sorted(labelled_pages)]
    table = pd.concat(pages_out, ignore_index=True) if pages_out else imported.iloc[0:0]
    return table, report
