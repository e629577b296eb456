"""Layout families for tables that carry no ``layout_id``, and a check for near-duplicates.

A layout-held-out split is only honest if "layout" means something; when the source does not
say, documents are grouped by a coarse signature of their first page:

* where ink is: the fraction of each cell of a ``grid`` (rows, columns) over the page that word
  boxes cover (page-relative, so scale does not matter);
* what the fixed wording is: a hashed bag (crc32, stable across runs) of the page's word-like
  tokens, lower-cased and stripped of punctuation, digits excluded; a token ending in ':' (a
  key) counts twice. Values change between documents of one layout; keys and headers do not.

Both parts are scaled to unit length and weighted so that the cosine similarity of two
signatures is ``(1 - text_weight) * cos(grid) + text_weight * cos(words)`` whenever both parts
are non-empty. Families are clusters of average-linkage agglomerative clustering on cosine
distance, cut at ``threshold``.

:func:`assign_inferred_layouts` applies this to a run: under ``split.infer_layouts: true`` the
families become the ``layout_id`` groups every split protocol and the per-layout breakdown use
(given ids, when present, are kept aside to score the recovery by adjusted Rand index), and the
returned :class:`LayoutInference` reports, for the final split, the seen/test document pairs
closer than ``split.leakage_threshold`` — near-duplicate layouts that make a test score easier.
"""

from __future__ import annotations

import logging
import string
import zlib
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from sklearn.cluster import AgglomerativeClustering
from sklearn.metrics import adjusted_rand_score
from sklearn.metrics.pairwise import cosine_distances

from dochar.data.word_table import Page, iter_pages
from dochar.errors import DocharError

log = logging.getLogger(__name__)

class LayoutFamilyError(DocharError):
    """Raised when signatures or families cannot be computed from the given pages."""


def _occupancy(page: Page, grid: tuple[int, int]) -> np.ndarray:
    rows, columns = grid
    boxes = page.boxes / np.array([page.width, page.height, page.width, page.height])
    boxes = np.clip(boxes, 0.0, 1.0)
    x_edges, y_edges = np.linspace(0, 1, columns + 1), np.linspace(0, 1, rows + 1)
    overlap_x = np.clip(np.minimum(boxes[:, 2:3], x_edges[1:]) - np.maximum(boxes[:, 0:1],
                                                                            x_edges[:-1]), 0, None)
    overlap_y = np.clip(np.minimum(boxes[:, 3:4], y_edges[1:]) - np.maximum(boxes[:, 1:2],
                                                                            y_edges[:-1]), 0, None)
    covered = np.einsum("nr,nc->rc", overlap_y, overlap_x) * rows * columns
    return np.clip(covered, 0.0, 1.0).ravel()


def _keyword_bag(texts: Sequence[str], n_keywords: int) -> np.ndarray:
    bag = np.zeros(n_keywords)
    for text in texts:
        token = text.strip().lower()
        is_key = token.endswith(":")
        token = token.strip(string.punctuation + string.whitespace)
        if len(token) < 2 or any(ch.isdigit() for ch in token):
            continue
        bag[zlib.crc32(token.encode("utf-8")) % n_keywords] += 2.0 if is_key else 1.0
    return bag


def _unit(vector: np.ndarray) -> np.ndarray:
    norm = np.linalg.norm(vector)
    return vector / norm if norm > 0 else vector


def page_signature(page: Page, grid: tuple[int, int] = (8, 8), n_keywords: int = 64,
                   text_weight: float = 0.5) -> np.ndarray:
    """Signature vector of one page: ``rows * columns`` occupancies, then ``n_keywords`` bins."""
    if len(page) == 0:
        raise LayoutFamilyError(f"page {page.key} has no words; it has no layout signature")
    if not (len(grid) == 2 and min(grid) >= 1):
        raise LayoutFamilyError(f"grid must be (rows, columns) of positive ints, got {grid}")
    if n_keywords < 1 or not 0 <= text_weight <= 1:
        raise LayoutFamilyError(f"need n_keywords >= 1 and text_weight in [0, 1]; got "
                                f"{n_keywords} and {text_weight}")
    occupancy = _unit(_occupancy(page, grid)) * np.sqrt(1 - text_weight)
    words = _unit(_keyword_bag(page.texts, n_keywords)) * np.sqrt(text_weight)
    return np.concatenate([occupancy, words])


def document_signatures(pages: Iterable[Page], grid: tuple[int, int] = (8, 8),
                        n_keywords: int = 64, text_weight: float = 0.5) -> dict[str, np.ndarray]:
    """One signature per document, from its first page (lowest page number)."""
    first: dict[str, Page] = {}
    for page in pages:
        if page.doc_id not in first or page.page < first[page.doc_id].page:
            first[page.doc_id] = page
    if not first:
        raise LayoutFamilyError("no pages given")
    return {doc_id: page_signature(first[doc_id], grid, n_keywords, text_weight)
            for doc_id in sorted(first)}


def infer_layout_families(pages: Iterable[Page], threshold: float,
                          grid: tuple[int, int] = (8, 8), n_keywords: int = 64,
                          text_weight: float = 0.5, method: str = "agglomerative"
                          ) -> dict[str, str]:
    """doc_id -> family id (``family-000`` …, numbered in doc id order) for every document."""
    if method != "agglomerative":
        raise LayoutFamilyError(f"unknown family method '{method}'; only 'agglomerative'")
    return _cluster(document_signatures(pages, grid, n_keywords, text_weight), threshold)


def _cluster(signatures: Mapping[str, np.ndarray], threshold: float) -> dict[str, str]:
    if not 0 < threshold <= 2:
        raise LayoutFamilyError(f"threshold is a cosine distance in (0, 2], got {threshold}")
    doc_ids = sorted(signatures)
    if len(doc_ids) == 1:
        return {doc_ids[0]: "family-000"}
    clusters = AgglomerativeClustering(n_clusters=None, distance_threshold=threshold,
                                       linkage="average", metric="cosine").fit_predict(
        np.stack([signatures[d] for d in doc_ids]))
    renumber: dict[int, str] = {}
    for cluster in clusters:
        renumber.setdefault(int(cluster), f"family-{len(renumber):03d}")
    return {doc_id: renumber[int(c)] for doc_id, c in zip(doc_ids, clusters)}


def leakage_report(signatures: Mapping[str, np.ndarray], train_ids: Sequence[str],
                   test_ids: Sequence[str], threshold: float) -> pd.DataFrame:
    """Train/test document pairs closer than ``threshold`` (cosine distance), closest first."""
    missing = sorted((set(train_ids) | set(test_ids)) - set(signatures))
    if missing:
        raise LayoutFamilyError(f"no signature for document(s) {missing[:10]}")
    columns = ["train_doc", "test_doc", "distance"]
    if not train_ids or not test_ids:
        return pd.DataFrame(columns=columns)
    train_ids, test_ids = list(train_ids), list(test_ids)
    distance = cosine_distances(np.stack([signatures[d] for d in train_ids]),
                                np.stack([signatures[d] for d in test_ids]))
    i, j = np.nonzero(distance < threshold)
    report = pd.DataFrame({"train_doc": [train_ids[k] for k in i],
                           "test_doc": [test_ids[k] for k in j], "distance": distance[i, j]},
                          columns=columns)
    return report.sort_values(["distance", "train_doc", "test_doc"]).reset_index(drop=True)


def family_recovery(true_layouts: Mapping[str, str], inferred: Mapping[str, str]) -> float:
    """Adjusted Rand index between known layouts and inferred families (1 = same partition)."""
    if set(true_layouts) != set(inferred):
        only = sorted(set(true_layouts) ^ set(inferred))
        raise LayoutFamilyError(f"both mappings must cover the same documents; differ on "
                                f"{only[:10]}")
    doc_ids = sorted(true_layouts)
    return float(adjusted_rand_score([true_layouts[d] for d in doc_ids],
                                     [inferred[d] for d in doc_ids]))


@dataclass
class LayoutInference:
    """One run's document signatures, notes on its families, and the leakage check of its split."""

    signatures: dict[str, np.ndarray] = field(default_factory=dict)
    leakage_threshold: float | None = None
    notes: dict[str, float] = field(default_factory=dict)

    def leakage(self, assignment: Any) -> tuple[pd.DataFrame, dict[str, float]]:
        """Near-duplicate pairs between the seen part (train + val) and the test part.

        ``assignment`` has ``train``, ``val`` and ``test`` doc-id lists (a ``SplitAssignment``).
        Returns the report (``seen_doc, seen_part, test_doc, distance``) and its counts as
        metrics; both are empty when no ``leakage_threshold`` is configured.
        """
        columns = ["seen_doc", "seen_part", "test_doc", "distance"]
        if self.leakage_threshold is None:
            return pd.DataFrame(columns=columns), {}
        seen = [*assignment.train, *assignment.val]
        report = leakage_report(self.signatures, seen, list(assignment.test),
                                self.leakage_threshold)
        part = {**{d: "val" for d in assignment.val}, **{d: "train" for d in assignment.train}}
        report = report.rename(columns={"train_doc": "seen_doc"})
        report.insert(1, "seen_part", report["seen_doc"].map(part))
        n_test = max(len(assignment.test), 1)
        hit = report["test_doc"].nunique()
        return report[columns], {"split/leakage_pairs": float(len(report)),
                                 "split/leakage_test_documents": float(hit),
                                 "split/leakage_test_share": hit / n_test}


def _signature_options(split_cfg: Mapping[str, Any]) -> dict[str, Any]:
    """``split.signature`` as :func:`document_signatures` keywords (absent keys: its defaults)."""
    options = dict(split_cfg.get("signature") or {})
    unknown = sorted(set(options) - {"grid", "keywords", "text_weight"})
    if unknown:
        raise LayoutFamilyError(f"split.signature: unknown key(s) {unknown}; valid keys are "
                                f"['grid', 'keywords', 'text_weight']")
    out: dict[str, Any] = {}
    if "grid" in options:
        grid = list(options["grid"])
        if not (len(grid) == 2 and all(isinstance(v, int) for v in grid)):
            raise LayoutFamilyError(f"split.signature.grid must be [rows, columns] (ints), "
                                    f"got {options['grid']}")
        out["grid"] = (grid[0], grid[1])
    if "keywords" in options:
        out["n_keywords"] = int(options["keywords"])
    if "text_weight" in options:
        out["text_weight"] = float(options["text_weight"])
    return out


def _given_layouts(table: pd.DataFrame) -> dict[str, str]:
    if "layout_id" not in table.columns:
        return {}
    values = table["layout_id"].astype("string").fillna("").str.strip()
    given = values.groupby(table["doc_id"].astype(str)).first()
    return {str(d): str(v) for d, v in given.items() if v != ""}


def assign_inferred_layouts(table: pd.DataFrame, split_cfg: Mapping[str, Any],
                            pages: Sequence[Page] | None = None
                            ) -> tuple[pd.DataFrame, LayoutInference]:
    """The table to split (layout ids replaced by inferred families when the config asks) and
    the run's :class:`LayoutInference`.

    Config keys (``split.*``): ``infer_layouts`` (bool), ``signature`` (``grid``, ``keywords``,
    ``text_weight``), ``family_threshold`` and ``leakage_threshold`` (cosine distances; a null
    ``leakage_threshold`` turns the report off). Nothing is computed when both are off.
    """
    infer = bool(split_cfg.get("infer_layouts", False))
    leakage_threshold = split_cfg.get("leakage_threshold")
    if not infer and leakage_threshold is None:
        return table, LayoutInference()
    if leakage_threshold is not None and not 0 < float(leakage_threshold) <= 2:
        raise LayoutFamilyError(f"split.leakage_threshold is a cosine distance in (0, 2], "
                                f"got {leakage_threshold}")
    options = _signature_options(split_cfg)
    pages = list(iter_pages(table)) if pages is None else list(pages)
    inference = LayoutInference(document_signatures(pages, **options),
                                None if leakage_threshold is None else float(leakage_threshold))
    if not infer:
        return table, inference
    threshold = split_cfg.get("family_threshold")
    if threshold is None:
        raise LayoutFamilyError("split.infer_layouts is true but split.family_threshold is not "
                                "set (a cosine distance, e.g. 0.3)")
    families = _cluster(inference.signatures, float(threshold))
    given = _given_layouts(table)
    inference.notes["split/inferred_families"] = float(len(set(families.values())))
    if given:
        if len(given) < len(families):
            log.warning("layout ids given for only %d of %d documents; the inferred families "
                        "replace all of them", len(given), len(families))
        inference.notes["split/family_ari"] = family_recovery(
            given, {doc: families[doc] for doc in given})
        log.info("%d inferred layout families replace %d given layout ids (adjusted Rand "
                 "index %.3f)", len(set(families.values())), len(set(given.values())),
                 inference.notes["split/family_ari"])
    out = table.copy()
    out["layout_id"] = out["doc_id"].astype(str).map(families)
    return out, inference
