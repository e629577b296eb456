"""Page-image features: what each node's piece of the scanned or rendered page looks like.

Pixels. The page's ``page_image`` is read once as 8-bit grey; a PDF is rendered by pdfium at
``RENDER_DPI`` (page ``page`` of the file). A box in page units maps to the pixel rectangle
``[floor(x0 * sx), ceil(x1 * sx)) x [floor(y0 * sy), ceil(y1 * sy))`` with ``sx = image width /
page_width`` and ``sy = image height / page_height``, clipped to the image and at least one
pixel each way. Ink is every pixel at or below the page's Otsu threshold (Otsu, IEEE SMC 1979:
the grey level maximising the between-class variance of the page histogram); a page of one grey
level has no Otsu split and uses ink = grey < 128.

Columns per node (its crop = the pixels of its box):

- ``ink_share``: ink pixels / crop pixels.
- ``stroke_width_px``: the smaller of the median horizontal and the median vertical ink run
  length in the crop (a run: consecutive ink pixels along a row or a column); 0 without ink.
  A stroke is crossed across its width by the runs of the other direction, so the smaller
  median is the typical pen width (for a filled 20 x 10 bar: 10).
- ``text_height_px``: rows from the first to the last crop row holding ink; 0 without ink.
- ``text_height_share``: ``text_height_px`` / crop height.
- ``rule_above`` / ``rule_below``: in a band of ``b = max(3, ceil(crop height / 2))`` rows
  just above / below the box, the longest ink run along a row within the box's columns widened
  by ``b`` on each side, as a share of that widened span (clipped to the image): 1 when a
  ruling line runs past both ends of the word. ``rule_left`` / ``rule_right``: the same along
  the columns of a band ``b`` wide beside the box, over its rows widened by ``b``. Widening
  keeps a neighbouring word's letters (no longer than the text is high) at about 0.5 or less,
  while a cell or field border, which runs past the word, reaches 1.
- ``enclosed``: the least of the four rules (1: a drawn box around the word).
- ``page_image_missing``: 1 when the page has no image or it cannot be read; then every other
  column is 0 and the crop is blank. Each such page is logged once and counted
  (``missing_pages``); with ``strict`` it is a :class:`PageImageError` naming the page instead.

Crops for the crop CNN: the crop's ink intensity (255 - grey) resized to ``CROP_SIZE`` by
bilinear interpolation (aspect not kept), as uint8. Features and crops are cached per page,
keyed by the image's path, modification time and size, the page number and the boxes: in
memory, and on disk under ``<cache folder>/page_image`` unless the cache is off.
"""

from __future__ import annotations

import hashlib
import logging
import math
from collections import OrderedDict
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

from dochar.data.word_table import Page
from dochar.errors import DocharError

log = logging.getLogger(__name__)

PAGE_IMAGE_NAMES: tuple[str, ...] = (
    "ink_share", "stroke_width_px", "text_height_px", "text_height_share", "rule_above",
    "rule_below", "rule_left", "rule_right", "enclosed", "page_image_missing",
)
CROP_SIZE = (16, 64)          # (height, width) of the crops the crop CNN reads
RENDER_DPI = 150.0            # a PDF page is rendered at this resolution
MIN_BAND = 3                  # pixels: least depth of the band searched for ruling lines
_MEMORY_PAGES = 4096          # pages of features and crops kept in memory
_CACHE_VERSION = "1"          # bump when a column's definition changes


class PageImageError(DocharError):
    """A page's image is missing or unreadable and strict mode is on."""


@dataclass(frozen=True)
class PageCrops:
    features: np.ndarray      # (n, len(PAGE_IMAGE_NAMES)) float32
    crops: np.ndarray         # (n, *CROP_SIZE) uint8 ink intensity


def otsu_threshold(grey: np.ndarray) -> int | None:
    """The grey level t maximising the between-class variance of {<= t} and {> t}; None for
    an image of a single grey level (no split exists)."""
    hist = np.bincount(np.asarray(grey, dtype=np.uint8).ravel(), minlength=256).astype(float)
    total = hist.sum()
    weight = np.cumsum(hist)                       # pixels at or below t
    mass = np.cumsum(hist * np.arange(256))        # their summed grey levels
    with np.errstate(divide="ignore", invalid="ignore"):
        between = (mass[-1] * weight - mass * total) ** 2 / (weight * (total - weight))
    between[(weight == 0) | (weight == total)] = -1.0
    best = int(np.argmax(between))
    return None if between[best] < 0 else best


def ink_mask(grey: np.ndarray) -> np.ndarray:
    threshold = otsu_threshold(grey)
    return grey < 128 if threshold is None else grey <= threshold


def _runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(row, length) of every run of True along the rows of a 2-D mask."""
    padded = np.pad(mask.astype(np.int8), ((0, 0), (1, 1)))
    steps = np.diff(padded, axis=1)
    rows, starts = np.nonzero(steps == 1)
    _, ends = np.nonzero(steps == -1)              # row-major order pairs starts with ends
    return rows, ends - starts


def longest_run(mask: np.ndarray) -> int:
    """Longest run of True along any row of ``mask`` (0 when empty)."""
    if mask.size == 0:
        return 0
    _, lengths = _runs(mask)
    return int(lengths.max()) if len(lengths) else 0


def stroke_width(ink: np.ndarray) -> float:
    _, across = _runs(ink)
    _, down = _runs(ink.T)
    if not len(across):
        return 0.0
    return float(min(np.median(across), np.median(down)))


def pixel_boxes(boxes: np.ndarray, page_size: tuple[float, float],
                image_size: tuple[int, int]) -> np.ndarray:
    """(n, 4) int pixel rectangles [c0, r0, c1, r1) of page-unit boxes (see the module notes)."""
    width, height = image_size
    sx, sy = width / page_size[0], height / page_size[1]
    c0 = np.clip(np.floor(boxes[:, 0] * sx), 0, width - 1)
    r0 = np.clip(np.floor(boxes[:, 1] * sy), 0, height - 1)
    c1 = np.clip(np.ceil(boxes[:, 2] * sx), c0 + 1, width)
    r1 = np.clip(np.ceil(boxes[:, 3] * sy), r0 + 1, height)
    return np.column_stack([c0, r0, c1, r1]).astype(np.int64)


def crop_features(ink: np.ndarray, box: np.ndarray) -> np.ndarray:
    """The columns of PAGE_IMAGE_NAMES for one pixel box on a page's ink mask."""
    c0, r0, c1, r1 = (int(v) for v in box)
    crop = ink[r0:r1, c0:c1]
    rows = np.flatnonzero(crop.any(axis=1))
    text_height = float(rows[-1] - rows[0] + 1) if len(rows) else 0.0
    band = max(MIN_BAND, math.ceil((r1 - r0) / 2))
    rows_wide = slice(max(0, r0 - band), min(ink.shape[0], r1 + band))
    cols_wide = slice(max(0, c0 - band), min(ink.shape[1], c1 + band))
    span_x = cols_wide.stop - cols_wide.start
    span_y = rows_wide.stop - rows_wide.start
    rules = [longest_run(ink[max(0, r0 - band):r0, cols_wide]) / span_x,
             longest_run(ink[r1:r1 + band, cols_wide]) / span_x,
             longest_run(ink[rows_wide, max(0, c0 - band):c0].T) / span_y,
             longest_run(ink[rows_wide, c1:c1 + band].T) / span_y]
    return np.array([crop.mean(), stroke_width(crop), text_height, text_height / (r1 - r0),
                     *rules, min(rules), 0.0], dtype=np.float32)


def crop_image(grey: np.ndarray, box: np.ndarray) -> np.ndarray:
    from PIL import Image

    c0, r0, c1, r1 = (int(v) for v in box)
    ink = 255 - grey[r0:r1, c0:c1]
    resized = Image.fromarray(ink).resize(CROP_SIZE[::-1], Image.Resampling.BILINEAR)
    return np.asarray(resized, dtype=np.uint8)


def page_crops(grey: np.ndarray, page: Page) -> PageCrops:
    """Features and crops of every node of ``page`` on its grey image (uint8, rows x columns)."""
    ink = ink_mask(grey)
    boxes = pixel_boxes(np.asarray(page.boxes, dtype=np.float64).reshape(-1, 4),
                        (page.width, page.height), (grey.shape[1], grey.shape[0]))
    features = np.zeros((len(page), len(PAGE_IMAGE_NAMES)), dtype=np.float32)
    crops = np.zeros((len(page), *CROP_SIZE), dtype=np.uint8)
    for index, box in enumerate(boxes):
        features[index] = crop_features(ink, box)
        crops[index] = crop_image(grey, box)
    return PageCrops(features, crops)


def missing_crops(n: int) -> PageCrops:
    features = np.zeros((n, len(PAGE_IMAGE_NAMES)), dtype=np.float32)
    features[:, -1] = 1.0
    return PageCrops(features, np.zeros((n, *CROP_SIZE), dtype=np.uint8))


@lru_cache(maxsize=4)
def _grey_image(path: str, stamp: tuple[int, int], page_no: int) -> np.ndarray:
    """The page as uint8 grey; ``stamp`` (mtime, size) makes a changed file a new entry."""
    if Path(path).suffix.lower() == ".pdf":
        import pypdfium2

        pdf = pypdfium2.PdfDocument(path)
        try:
            if not 1 <= page_no <= len(pdf):
                raise ValueError(f"the PDF has {len(pdf)} page(s), no page {page_no}")
            image = pdf[page_no - 1].render(scale=RENDER_DPI / 72.0, grayscale=True).to_pil()
        finally:
            pdf.close()
    else:
        from PIL import Image

        with Image.open(path) as opened:
            image = opened.convert("L")
    return np.asarray(image.convert("L"), dtype=np.uint8)


def read_grey(path: str | Path, page_no: int) -> np.ndarray:
    """One page of an image file or PDF as uint8 grey (a PDF page rendered at RENDER_DPI),
    through the same small cache the features read from."""
    path = Path(path)
    stat = path.stat()          # FileNotFoundError names the path
    return _grey_image(str(path.resolve()), (stat.st_mtime_ns, stat.st_size), int(page_no))


class PageImageReader:
    """Features and crops of pages, each page read at most once per process and cache."""

    def __init__(self, cache_dir: str | Path | None = None, *, strict: bool = False) -> None:
        self.cache_dir = None if cache_dir is None else Path(cache_dir) / "page_image"
        self.strict = strict
        self.missing_pages: dict[str, str] = {}    # page key -> why its image is missing
        self._memory: OrderedDict[str, PageCrops] = OrderedDict()

    def __call__(self, page: Page) -> PageCrops:
        try:
            path, stamp = self._stamp(page)
        except (OSError, ValueError) as error:
            return self._missing(page, str(error))
        key = self._key(page, path, stamp)
        found = self._memory.get(key) or self._from_disk(key)
        if found is None:
            try:
                grey = _grey_image(path, stamp, int(page.page))
            except Exception as error:  # Pillow and pdfium raise many kinds for a bad file
                return self._missing(page, f"{path}: not readable ({type(error).__name__}: "
                                           f"{error})")
            found = page_crops(grey, page)
            self._to_disk(key, found)
        self._memory[key] = found
        self._memory.move_to_end(key)
        while len(self._memory) > _MEMORY_PAGES:
            self._memory.popitem(last=False)
        return found

    @staticmethod
    def _stamp(page: Page) -> tuple[str, tuple[int, int]]:
        if not page.image:
            raise ValueError("no page_image given")
        path = Path(page.image)
        stat = path.stat()          # FileNotFoundError names the path
        return str(path.resolve()), (stat.st_mtime_ns, stat.st_size)

    @staticmethod
    def _key(page: Page, path: str, stamp: tuple[int, int]) -> str:
        digest = hashlib.sha256(f"{_CACHE_VERSION}|{path}|{stamp}|{page.page}|{page.width!r}|"
                                f"{page.height!r}".encode())
        digest.update(np.ascontiguousarray(page.boxes, dtype=np.float64).tobytes())
        return digest.hexdigest()

    def _missing(self, page: Page, reason: str) -> PageCrops:
        if self.strict:
            raise PageImageError(f"page {page.key}: page image missing ({reason}); strict mode "
                                 f"needs an image for every page of the page_image features")
        if page.key not in self.missing_pages:
            log.warning("page %s: page image missing (%s); its image features are 0 and "
                        "page_image_missing is 1", page.key, reason)
            self.missing_pages[page.key] = reason
        return missing_crops(len(page))

    def _from_disk(self, key: str) -> PageCrops | None:
        if self.cache_dir is None or not (self.cache_dir / f"{key}.npz").is_file():
            return None
        try:
            with np.load(self.cache_dir / f"{key}.npz") as stored:
                return PageCrops(stored["features"], stored["crops"])
        except (OSError, ValueError, KeyError):   # a damaged entry is recomputed
            return None

    def _to_disk(self, key: str, found: PageCrops) -> None:
        if self.cache_dir is None:
            return
        from dochar.data.files import atomic_write

        with atomic_write(self.cache_dir / f"{key}.npz") as scratch:
            with open(scratch, "wb") as handle:
                np.savez(handle, features=found.features, crops=found.crops)
