"""Per-layout templates: the system a GNN has to replace.

Teams without a model label one or a few documents of each layout and read every later page of
that layout by position. :class:`LayoutTemplateClassifier` is that practice as an estimator:

* **fit** keeps every training word's family, page number, normalised box (centre and size over
  page width and height), text shape and label. A page's family is its ``layout_id``; pages
  without one are grouped by page signature (:func:`dochar.splits.layout_families.
  infer_layout_families`, cut at ``family_threshold``). One template per (family, page number),
  with the centroid of its pages' signatures.
* **predict** labels a test word by its ``neighbours`` nearest template words in
  ``sqrt(centre_weight * (dx² + dy²) + size_weight * (dw² + dh²))``, plus ``shape_weight`` when
  the text shapes differ (``"Lot 42"`` → ``"Aa 9"``): a tie-breaker between words at one place.
  The probability of a class is its share of the neighbours' votes.
* A test page whose family has no template takes the template nearest by page signature (cosine
  distance) when it is closer than ``fallback_threshold`` (outcome ``fallback``); otherwise every
  word gets ``unknown_label`` with probability 1 (outcome ``no_template``). :meth:`match_pages`
  reports each page's outcome, which a run logs as ``template/*`` counts.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.metrics.pairwise import cosine_distances
from sklearn.neighbors import NearestNeighbors

from dochar.data.word_table import Page
from dochar.errors import DocharError
from dochar.splits.layout_families import infer_layout_families, page_signature

OUTCOMES = ("template", "fallback", "no_template")
_EXTRA_CANDIDATES = 8   # geometric candidates beyond k, re-ranked with the text-shape penalty


class TemplateInputError(DocharError):
    """Bad pages, labels or options given to the template baseline."""


def text_shape(text: str) -> str:
    """Digits → 9, upper-case letters → A, other letters → a, runs collapsed; the rest kept."""
    out: list[str] = []
    for char in text.strip():
        mark = ("9" if char.isdigit() else "A" if char.isupper() else "a" if char.isalpha()
                else char)
        if not out or out[-1] != mark:
            out.append(mark)
    return "".join(out)


def _positions(page: Page) -> np.ndarray:
    """(n, 4): centre x, centre y, width, height as fractions of the page."""
    boxes = page.boxes
    size = np.array([page.width, page.height])
    centres = (boxes[:, :2] + boxes[:, 2:]) / 2 / size
    return np.hstack([centres, (boxes[:, 2:] - boxes[:, :2]) / size])


def _check_pages(pages: Any, where: str, *, labelled: bool) -> list[Page]:
    if isinstance(pages, (str, bytes)) or not isinstance(pages, Sequence):
        raise TemplateInputError(f"{where}: expected a sequence of Page objects, got "
                                 f"{type(pages).__name__}")
    if len(pages) == 0:
        raise TemplateInputError(f"{where}: no pages given")
    for position, page in enumerate(pages):
        if not isinstance(page, Page):
            raise TemplateInputError(f"{where}: item {position} is a {type(page).__name__}, "
                                     f"not a Page")
        boxes = np.asarray(page.boxes, dtype=float)
        if boxes.shape != (len(page), 4) or not np.isfinite(boxes).all():
            raise TemplateInputError(f"{where}: page {page.key}: boxes must be a finite "
                                     f"({len(page)}, 4) array, got shape {boxes.shape}")
        if not (page.width > 0 and page.height > 0):
            raise TemplateInputError(f"{where}: page {page.key}: page size must be positive, "
                                     f"got {page.width} x {page.height}")
        if labelled and (page.labels is None or len(page.labels) != len(page)):
            raise TemplateInputError(f"{where}: page {page.key} has no label for every word; "
                                     f"templates are made from labelled pages")
    return list(pages)


@dataclass
class _Template:
    """The labelled words of one (family, page number), ready for neighbour search."""

    family: str
    page: int
    signature: np.ndarray      # centroid of the unit page signatures
    points: np.ndarray         # (n, 4) weighted centre and size
    shapes: np.ndarray         # (n,) text shapes
    labels: np.ndarray         # (n,) class indices
    search: NearestNeighbors


class LayoutTemplateClassifier(ClassifierMixin, BaseEstimator):
    """Label words by the training words at the same place on pages of the same layout family.

    ``X`` is a sequence of :class:`~dochar.data.word_table.Page`; ``y`` (optional) one label
    sequence per page, by default each page's own ``labels``. ``classes`` fixes the columns of
    :meth:`predict_proba` (a run's label set); ``signature`` holds
    :func:`~dochar.splits.layout_families.page_signature` keywords (``grid``, ``n_keywords``,
    ``text_weight``).
    """

    def __init__(self, neighbours: int = 1, centre_weight: float = 1.0, size_weight: float = 0.5,
                 shape_weight: float = 0.02, fallback_threshold: float = 0.3,
                 family_threshold: float = 0.3, unknown_label: str = "other",
                 classes: Sequence[str] | None = None,
                 signature: Mapping[str, Any] | None = None) -> None:
        self.neighbours = neighbours
        self.centre_weight = centre_weight
        self.size_weight = size_weight
        self.shape_weight = shape_weight
        self.fallback_threshold = fallback_threshold
        self.family_threshold = family_threshold
        self.unknown_label = unknown_label
        self.classes = classes
        self.signature = signature

    # -- fitting ---------------------------------------------------------------------------

    def check_options(self) -> None:
        """Raise a located error for an option out of range (also done by fit)."""
        where = "model=layout_template"
        if isinstance(self.neighbours, bool) or not isinstance(self.neighbours,
                                                               (int, np.integer)) \
                or self.neighbours < 1:
            raise TemplateInputError(f"{where}: neighbours must be a positive int, got "
                                     f"{self.neighbours!r}")
        for name in ("centre_weight", "size_weight", "shape_weight"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value >= 0):
                raise TemplateInputError(f"{where}: {name} must be a number >= 0, got {value!r}")
        if self.centre_weight == 0 and self.size_weight == 0:
            raise TemplateInputError(f"{where}: centre_weight and size_weight are both 0; "
                                     f"positions would not count at all")
        for name in ("fallback_threshold", "family_threshold"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and 0 <= value <= 2):
                raise TemplateInputError(f"{where}: {name} is a cosine distance in [0, 2], "
                                         f"got {value!r}")
        unknown = sorted(set(self.signature or {}) - {"grid", "n_keywords", "text_weight"})
        if unknown:
            raise TemplateInputError(f"{where}: unknown signature option(s) {unknown}; valid: "
                                     f"['grid', 'n_keywords', 'text_weight']")

    def _weighted(self, positions: np.ndarray) -> np.ndarray:
        scale = np.sqrt([self.centre_weight] * 2 + [self.size_weight] * 2)
        return positions * scale

    def _signature(self, page: Page) -> np.ndarray:
        options = dict(self.signature or {})
        if "grid" in options:
            options["grid"] = tuple(options["grid"])
        return page_signature(page, **options)

    def _families(self, pages: list[Page]) -> list[str]:
        missing = [p for p in pages if not (p.layout_id or "").strip()]
        inferred: dict[str, str] = {}
        if missing:
            options = dict(self.signature or {})
            if "grid" in options:
                options["grid"] = tuple(options["grid"])
            inferred = {doc: f"inferred-{family}" for doc, family in infer_layout_families(
                missing, max(self.family_threshold, 1e-9), **options).items()}
        return [(p.layout_id or "").strip() or inferred[p.doc_id] for p in pages]

    def fit(self, X: Sequence[Page], y: Sequence[Sequence[str]] | None = None
            ) -> LayoutTemplateClassifier:
        self.check_options()
        pages = _check_pages(X, "LayoutTemplateClassifier.fit", labelled=y is None)
        if y is not None and len(y) != len(pages):
            raise TemplateInputError(f"LayoutTemplateClassifier.fit: {len(pages)} pages but "
                                     f"{len(y)} label sequences")
        labels = [list(page.labels) if y is None else list(y[i]) for i, page in enumerate(pages)]
        for page, page_labels in zip(pages, labels):
            if len(page_labels) != len(page):
                raise TemplateInputError(f"LayoutTemplateClassifier.fit: page {page.key} has "
                                         f"{len(page)} words but {len(page_labels)} labels")
        seen = sorted({str(v) for page_labels in labels for v in page_labels})
        self.classes_ = np.array(list(self.classes) if self.classes is not None else seen,
                                 dtype=object)
        index = {str(label): i for i, label in enumerate(self.classes_)}
        if self.unknown_label not in index:
            raise TemplateInputError(f"model=layout_template: unknown_label "
                                     f"{self.unknown_label!r} is not one of the classes "
                                     f"{list(self.classes_)}")
        for page, page_labels in zip(pages, labels):
            bad = [(int(w), v) for w, v in zip(page.word_ids, page_labels) if str(v) not in index]
            if bad:
                raise TemplateInputError(f"LayoutTemplateClassifier.fit: page {page.key}, word "
                                         f"{bad[0][0]}: label {bad[0][1]!r} is not one of "
                                         f"{list(self.classes_)}")
        groups: dict[tuple[str, int], list[int]] = {}
        for i, (page, family) in enumerate(zip(pages, self._families(pages))):
            groups.setdefault((family, int(page.page)), []).append(i)
        self.templates_: list[_Template] = []
        for (family, page_no), members in sorted(groups.items()):
            signatures = np.stack([self._signature(pages[i]) for i in members])
            points = self._weighted(np.vstack([_positions(pages[i]) for i in members]))
            search = NearestNeighbors(n_neighbors=min(len(points), self.neighbours
                                                      + _EXTRA_CANDIDATES)).fit(points)
            self.templates_.append(_Template(
                family, page_no, signatures.mean(axis=0), points,
                np.array([text_shape(t) for i in members for t in pages[i].texts], dtype=object),
                np.array([index[str(v)] for i in members for v in labels[i]], dtype=np.int64),
                search))
        self.families_ = sorted({t.family for t in self.templates_})
        self.n_template_words_ = int(sum(len(t.points) for t in self.templates_))
        return self

    # -- matching and prediction -----------------------------------------------------------

    def _check_fitted(self) -> None:
        if not hasattr(self, "templates_"):
            raise TemplateInputError("LayoutTemplateClassifier: call fit before predict")

    def _match(self, page: Page) -> tuple[int | None, str, float]:
        """(template index or None, outcome, signature distance to the chosen template)."""
        family = (page.layout_id or "").strip()
        signature = self._signature(page)[None, :]
        own = [i for i, t in enumerate(self.templates_) if t.family == family]
        candidates = own or list(range(len(self.templates_)))
        same_page = [i for i in candidates if self.templates_[i].page == page.page]
        if own and same_page:
            candidates = same_page
        distances = cosine_distances(
            signature, np.stack([self.templates_[i].signature for i in candidates]))[0]
        best = int(np.argmin(distances))
        distance = float(distances[best])
        if own:
            return candidates[best], "template", distance
        if distance < self.fallback_threshold:
            return candidates[best], "fallback", distance
        return None, "no_template", distance

    def fitted_state(self) -> dict[str, Any]:
        """The fitted templates as plain lists (JSON), what :meth:`load_state` rebuilds from."""
        return {"classes": [str(c) for c in self.classes_], "templates": [
            {"family": t.family, "page": int(t.page), "signature": t.signature.tolist(),
             "points": t.points.tolist(), "shapes": [str(x) for x in t.shapes],
             "labels": t.labels.tolist()} for t in self.templates_]}

    def load_state(self, state: Mapping[str, Any]) -> LayoutTemplateClassifier:
        """Templates from :meth:`fitted_state`; the neighbour search is rebuilt from the points."""
        self.check_options()
        self.classes_ = np.array(list(state["classes"]), dtype=object)
        self.templates_ = []
        for t in state["templates"]:
            points = np.asarray(t["points"], dtype=np.float64).reshape(-1, 4)
            search = NearestNeighbors(n_neighbors=min(len(points), self.neighbours
                                                      + _EXTRA_CANDIDATES)).fit(points)
            self.templates_.append(_Template(
                str(t["family"]), int(t["page"]), np.asarray(t["signature"], dtype=np.float64),
                points, np.array(t["shapes"], dtype=object),
                np.asarray(t["labels"], dtype=np.int64), search))
        self.families_ = sorted({t.family for t in self.templates_})
        self.n_template_words_ = int(sum(len(t.points) for t in self.templates_))
        return self

    def match_pages(self, X: Sequence[Page]) -> pd.DataFrame:
        """One row per page: doc_id, page, layout_id, template family, distance, outcome."""
        self._check_fitted()
        pages = _check_pages(X, "LayoutTemplateClassifier.match_pages", labelled=False)
        rows = []
        for page in pages:
            chosen, outcome, distance = self._match(page)
            rows.append({"doc_id": page.doc_id, "page": int(page.page),
                         "layout_id": page.layout_id or "",
                         "template": "" if chosen is None else self.templates_[chosen].family,
                         "distance": distance, "outcome": outcome})
        return pd.DataFrame(rows, columns=["doc_id", "page", "layout_id", "template",
                                           "distance", "outcome"])

    def _page_proba(self, page: Page, chosen: int | None) -> np.ndarray:
        proba = np.zeros((len(page), len(self.classes_)))
        if chosen is None:
            proba[:, list(self.classes_).index(self.unknown_label)] = 1.0
            return proba
        if len(page) == 0:
            return proba
        template = self.templates_[chosen]
        distance, found = template.search.kneighbors(self._weighted(_positions(page)))
        shapes = np.array([text_shape(t) for t in page.texts], dtype=object)
        penalty = self.shape_weight * (template.shapes[found] != shapes[:, None])
        order = np.argsort(distance + penalty, axis=1, kind="stable")[:, :self.neighbours]
        votes = template.labels[np.take_along_axis(found, order, axis=1)]
        for column in range(votes.shape[1]):
            np.add.at(proba, (np.arange(len(page)), votes[:, column]), 1.0)
        return proba / votes.shape[1]

    def predict_proba(self, X: Sequence[Page]) -> np.ndarray:
        """(total words, classes): the pages' words in order, vote shares per class."""
        self._check_fitted()
        pages = _check_pages(X, "LayoutTemplateClassifier.predict_proba", labelled=False)
        return np.vstack([self._page_proba(page, self._match(page)[0]) for page in pages])

    def predict(self, X: Sequence[Page]) -> np.ndarray:
        self._check_fitted()
        return self.classes_[self.predict_proba(X).argmax(axis=1)]
