"""WordFeaturizer: one page in, one dense float32 matrix out, columns chosen by feature group.

Groups: ``geometry`` (box layout), ``text_flags`` (surface flags plus one ``lexicon:<name>``
column per configured word list) and ``char_cnn``, which adds no dense columns: it marks that
the model encodes ``char_ids`` itself. The optional ``text_embedding`` group adds a pretrained
sentence embedding of each word (:mod:`dochar.features.text_embedding`, the ``embed`` extra).
Two options add context (:mod:`dochar.features.context`): ``line_context`` (the line a word
sits in; with ``text_embedding`` also the embedding of that line's text) and ``pool_words``
(a segment's mean / max over its words' rows). ``page_image`` adds what each node's crop of the
page image looks like (:mod:`dochar.features.page_image`: ink, stroke width, text height, ruling
lines); ``crop_cnn``, like ``char_cnn``, adds no dense columns: the model encodes the node
``crops`` itself (a baseline gets the ``page_image`` columns in its place). All scales are fixed, so fitting learns nothing unless
``standardize`` is set; then column means and standard deviations come from the pages given to
``fit`` (the training pages only), and constant columns are left unscaled.
"""

from __future__ import annotations

import inspect
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from dochar.data.word_table import Page, unusable_boxes
from dochar.features.chars import char_ids
from dochar.features.context import (
    LINE_CONTEXT_NAMES,
    POOLINGS,
    line_context_features,
    line_texts,
    pool_members,
)
from dochar.features.geometry import GEOMETRY_NAMES, geometry_features_of_pages
from dochar.features.lexicons import compile_lexicons, lexicon_features
from dochar.features.options import FeatureOptionError
from dochar.features.page_image import PAGE_IMAGE_NAMES, PageImageReader
from dochar.features.text_embedding import EMBEDDING_DIM, TextEmbedder, default_cache_dir
from dochar.features.text_flags import TEXT_FLAG_NAMES, text_flag_features

FEATURE_GROUPS: tuple[str, ...] = ("geometry", "text_flags", "char_cnn")
IMAGE_GROUPS: tuple[str, ...] = ("page_image", "crop_cnn")   # read the page image (page_image)
OPTIONAL_GROUPS: tuple[str, ...] = ("text_embedding",)   # need an optional extra installed
_MIN_STD = 1e-6


def check_page(page: Page) -> None:
    """Refuse a page whose arrays disagree or whose numbers cannot be scaled, naming the word."""
    where = f"page {page.key}"
    if not (np.isfinite(page.width) and np.isfinite(page.height)
            and page.width > 0 and page.height > 0):
        raise ValueError(f"{where}: page size must be positive and finite, "
                         f"got {page.width} x {page.height}")
    n = len(page.texts)
    for index, text in enumerate(page.texts):
        if not isinstance(text, str):
            raise ValueError(f"{where}, word {index}: text is {type(text).__name__} {text!r}, "
                             f"expected str")
    boxes = np.asarray(page.boxes, dtype=np.float64)
    if boxes.shape != (n, 4):
        raise ValueError(f"{where}: boxes have shape {boxes.shape}, expected ({n}, 4) "
                         f"for {n} texts")
    bad = unusable_boxes(boxes)
    if bad.any():
        index = int(np.flatnonzero(bad)[0])
        word = page.word_ids[index] if len(page.word_ids) == n else index
        raise ValueError(f"{where}, word_id {word}: box {boxes[index].tolist()} is not finite "
                         f"or has x1 < x0 / y1 < y0 ({int(bad.sum())} such box(es) on the page)")


def check_options(groups: Sequence[str], max_chars: int, pool_words: Sequence[str]) -> None:
    """The featurizer's own options, named by their config keys (no data needed)."""
    known = FEATURE_GROUPS + IMAGE_GROUPS + OPTIONAL_GROUPS
    unknown = [g for g in groups if g not in known]
    if unknown or not groups:
        raise FeatureOptionError(f"config key features.groups={list(groups)}: unknown or no "
                                 f"feature group(s) {unknown}; choose from {list(known)}")
    if max_chars < 1:
        raise FeatureOptionError(f"config key features.max_chars={max_chars}: must be at "
                                 f"least 1")
    unknown_pooling = sorted(set(pool_words) - set(POOLINGS))
    if unknown_pooling:
        raise FeatureOptionError(f"config key features.pool_words={list(pool_words)}: "
                                 f"{unknown_pooling} unknown; choose from {list(POOLINGS)}")


class WordFeaturizer:
    """scikit-learn style featurizer for the words of a page."""

    def __init__(self, groups: Sequence[str] = ("geometry", "text_flags"),
                 lexicons: Mapping[str, Sequence[str]] | None = None, max_chars: int = 16,
                 *, standardize: bool = False, line_context: bool = False,
                 pool_words: Sequence[str] = (), embedding_cache: str | None = "default",
                 image_cache: str | None = "default", strict_images: bool = False) -> None:
        if isinstance(groups, str):
            groups = (groups,)
        check_options(groups, max_chars, pool_words)
        self.groups = tuple(dict.fromkeys(groups))
        self.embedding_cache = embedding_cache
        self.embedder = (TextEmbedder(embedding_cache) if "text_embedding" in self.groups
                         else None)
        self.image_cache, self.strict_images = image_cache, bool(strict_images)
        self.images = (PageImageReader(default_cache_dir() if image_cache == "default"
                                       else image_cache, strict=strict_images)
                       if set(IMAGE_GROUPS) & set(self.groups) else None)
        self.line_context = bool(line_context)
        self.pool_words = tuple(dict.fromkeys(pool_words))
        self.lexicons = compile_lexicons(lexicons)
        if self.lexicons and "text_flags" not in self.groups:
            warnings.warn("WordFeaturizer: lexicon columns belong to the 'text_flags' group, "
                          "which is not selected; the lexicons are not used", stacklevel=2)
        self.max_chars = int(max_chars)
        self.standardize = bool(standardize)
        self.mean_: np.ndarray | None = None
        self.scale_: np.ndarray | None = None
        self.fitted_ = False

    @classmethod
    def from_config(cls, features_cfg: Mapping, data_cfg: Mapping, *,
                    strict: bool = False) -> WordFeaturizer:
        """The featurizer a ``features`` section asks for, with the data's word lists;
        ``strict``: a page without a readable image fails instead of being counted."""
        groups = list(features_cfg["groups"])
        lexicons = data_cfg.get("lexicons") if "text_flags" in groups else None
        cache = features_cfg.get("embedding_cache")
        return cls(groups=groups, lexicons=None if lexicons is None else
                   {name: list(words) for name, words in dict(lexicons).items()},
                   max_chars=int(features_cfg["max_chars"]),
                   line_context=bool(features_cfg.get("line_context", False)),
                   pool_words=list(features_cfg.get("pool_words") or ()),
                   embedding_cache=_cache_option(cache),
                   image_cache=_cache_option(features_cfg.get("image_cache")),
                   strict_images=strict)

    def get_params(self) -> dict[str, Any]:
        """The constructor's arguments as this featurizer holds them (scikit-learn's rule: one
        attribute per ``__init__`` parameter), lexicons as their normalised word lists."""
        params = {name: getattr(self, name)
                  for name in inspect.signature(type(self).__init__).parameters
                  if name != "self"}
        params["groups"], params["pool_words"] = list(self.groups), list(self.pool_words)
        params["lexicons"] = {name: sorted(keys) for name, keys in self.lexicons.items()}
        return params

    @property
    def feature_names(self) -> list[str]:
        own = self._own_names()
        return own + [f"{how}:{name}" for how in self.pool_words for name in own]

    def _own_names(self) -> list[str]:
        names: list[str] = []
        if "geometry" in self.groups:
            names += [f"geometry:{n}" for n in GEOMETRY_NAMES]
        if "text_flags" in self.groups:
            names += [f"text:{n}" for n in TEXT_FLAG_NAMES]
            names += [f"lexicon:{n}" for n in self.lexicons]
        if self.embedder is not None:
            names += [f"embedding:{i}" for i in range(EMBEDDING_DIM)]
        if "page_image" in self.groups:
            names += [f"image:{n}" for n in PAGE_IMAGE_NAMES]
        if self.line_context:
            names += [f"line:{n}" for n in LINE_CONTEXT_NAMES]
            if self.embedder is not None:
                names += [f"line_embedding:{i}" for i in range(EMBEDDING_DIM)]
        return names

    @property
    def uses_char_cnn(self) -> bool:
        return "char_cnn" in self.groups

    @property
    def uses_crop_cnn(self) -> bool:
        return "crop_cnn" in self.groups

    @property
    def missing_image_pages(self) -> int:
        """Pages whose image was missing or unreadable (their image columns are 0)."""
        return 0 if self.images is None else len(self.images.missing_pages)

    def fit(self, pages: Sequence[Page]) -> WordFeaturizer:
        """Check the training pages; with ``standardize``, learn column means and scales."""
        self.fitted_ = True
        if self.standardize:
            blocks = [self._raw(page) for page in pages]
            if not blocks or sum(len(b) for b in blocks) == 0:
                self.fitted_ = False
                raise ValueError("WordFeaturizer.fit: standardize needs at least one word "
                                 "in the training pages")
            stacked = np.concatenate(blocks).astype(np.float64)
            std = stacked.std(axis=0)
            self.mean_ = stacked.mean(axis=0)
            self.scale_ = np.where(std > _MIN_STD, std, 1.0)
        else:
            for page in pages:
                check_page(page)
        return self

    def transform(self, page: Page) -> np.ndarray:
        """(n_words, len(feature_names)) float32 dense features of one page."""
        if not self.fitted_:
            raise RuntimeError("WordFeaturizer.transform called before fit")
        raw = self._raw(page)
        if self.standardize:
            raw = ((raw - self.mean_) / self.scale_).astype(np.float32)
        return raw

    def transform_all(self, pages: Sequence[Page]) -> list[np.ndarray]:
        """:meth:`transform` of every page, the per-word groups computed for all pages at once
        (the same rows as page by page)."""
        if not self.fitted_:
            raise RuntimeError("WordFeaturizer.transform called before fit")
        if self.pool_words:      # a segment page pools its own words: page by page
            return [self.transform(page) for page in pages]
        raw = self._own_all(pages)
        if self.standardize:
            raw = ((raw - self.mean_) / self.scale_).astype(np.float32)
        return np.split(raw, np.cumsum([len(page) for page in pages])[:-1])

    def char_ids_all(self, pages: Sequence[Page]) -> list[np.ndarray]:
        """:meth:`char_ids` of every page, in one pass."""
        ids = char_ids([text for page in pages for text in page.texts], self.max_chars)
        return np.split(ids, np.cumsum([len(page) for page in pages])[:-1])

    def fit_transform(self, pages: Sequence[Page]) -> list[np.ndarray]:
        self.fit(pages)
        return [self.transform(page) for page in pages]

    def char_ids(self, page: Page) -> np.ndarray:
        """(n_words, max_chars) int64 character ids for the char CNN."""
        return char_ids(page.texts, self.max_chars)

    def crops(self, page: Page) -> np.ndarray:
        """(n_nodes, *CROP_SIZE) uint8 crops of the page image for the crop CNN."""
        check_page(page)
        return self.images(page).crops

    def image_features(self, page: Page) -> np.ndarray:
        """The ``page_image`` columns of a page: a baseline's stand-in for the crop CNN."""
        check_page(page)
        return self.images(page).features

    def _raw(self, page: Page) -> np.ndarray:
        own = self._own(page)
        if not self.pool_words:
            return own
        words = getattr(page, "words", None)
        if words is None:                       # a page of words: each word pools itself
            return np.concatenate([own] * (1 + len(self.pool_words)), axis=1)
        pooled = pool_members(self._own(words), page.members, self.pool_words)
        return np.concatenate([own, pooled], axis=1)

    def _own(self, page: Page) -> np.ndarray:
        return self._own_all([page])

    def _own_all(self, pages: Sequence[Page]) -> np.ndarray:
        """The own columns of pages laid end to end: geometry and text groups over all words at
        once, the groups that read a page as a whole (image, line context) page by page."""
        for page in pages:
            check_page(page)
        texts = [text for page in pages for text in page.texts]
        blocks = [np.zeros((len(texts), 0), dtype=np.float32)]
        if "geometry" in self.groups:
            blocks.append(geometry_features_of_pages(pages))
        if "text_flags" in self.groups:
            blocks.append(text_flag_features(texts))
            blocks.append(lexicon_features(texts, self.lexicons))
        if self.embedder is not None:
            blocks.append(self._per_page(pages, lambda page: self.embedder(page.texts)))
        if "page_image" in self.groups:
            blocks.append(self._per_page(pages, lambda page: self.images(page).features))
        if self.line_context:
            blocks.append(self._per_page(pages, line_context_features))
            if self.embedder is not None:
                blocks.append(self._per_page(pages,
                                             lambda page: self.embedder(line_texts(page))))
        return np.concatenate(blocks, axis=1)

    @staticmethod
    def _per_page(pages: Sequence[Page], block) -> np.ndarray:
        return np.concatenate([block(page) for page in pages])


def _cache_option(value: object) -> str | None:
    """A cache option: null = the default folder, ``off`` = memory only, else a folder."""
    return "default" if value is None else (None if str(value) == "off" else str(value))
