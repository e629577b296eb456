"""The first stage: turn the ``data`` config into a validated word table.

Each source kind converts into the word table and nothing else; validation is shared, so a
synthetic set, an imported dataset and a user's own table obey the same rules. The links table
(:mod:`dochar.data.links_table`) travels beside the words: generated (synth), imported (form
JSON's key -> value links, receipt JSON's row links) or read from ``data.links_path`` (word_table); it is validated against the words kept.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd
from tqdm import tqdm

from dochar.data.links_table import (
    empty_links,
    read_links_table,
    validate_links_table,
)
from dochar.data.word_table import (
    ValidationReport,
    WordTableError,
    read_word_table,
    validate_word_table,
)

log = logging.getLogger(__name__)
SOURCES = ("synth", "form_json", "receipt_json", "word_table", "pdf", "hocr", "alto", "image")


@dataclass
class LoadedData:
    validation: ValidationReport
    notes: dict[str, Any] = field(default_factory=dict)
    links: pd.DataFrame = field(default_factory=empty_links)   # validated links table

    @property
    def table(self) -> pd.DataFrame:
        return self.validation.table


def _dataset(data_cfg: Mapping[str, Any], read, links_from: str
             ) -> tuple[pd.DataFrame, dict[str, Any], pd.DataFrame]:
    """A dataset folder read by ``read(path) -> (frame, ImportSummary)``, its summary logged."""
    path = data_cfg["path"]
    if not Path(path).exists():
        raise WordTableError(f"data.path={path}: no such folder (relative paths start at "
                             f"{Path.cwd()}; set DOCHAR_DATASETS to the folder holding the "
                             "datasets, or data.path=...)")
    frame, report = read(path)
    frame.attrs["source"] = str(path)
    log.info("import: %s", report.summary())
    if report.problems:
        log.warning("import problems:\n  %s", "\n  ".join(map(str, report.problems)))
    links = report.links_frame()
    links.attrs["source"] = f"{path} ({links_from})"
    return frame, {"import_empty_text_dropped": report.dropped["words without text"],
                   "import_boxes_clipped": report.repairs["boxes clipped to the page"],
                   "import_files_reported": len(report.problems)}, links


def _load_raw(data_cfg: Mapping[str, Any], progress: bool
              ) -> tuple[pd.DataFrame, dict[str, Any], pd.DataFrame]:
    """Words, import notes and links (empty where the source has none)."""
    source = data_cfg.get("source")
    if source == "synth":
        import data_synth
        from data_synth.generator import iter_documents_with_links

        noise = data_synth.NoiseConfig(**dict(data_cfg.get("noise") or {}))
        count = int(data_cfg["documents"])
        documents = list(tqdm(iter_documents_with_links(
            count, seed=int(data_cfg.get("generator_seed", 0)), noise=noise), total=count,
            desc="generating", leave=False, disable=None if progress else True))
        frame = pd.concat([words for words, _ in documents], ignore_index=True)
        frame.attrs["source"] = f"synthetic certificates (seed {data_cfg.get('generator_seed', 0)})"
        links = pd.concat([links for _, links in documents], ignore_index=True)
        links.attrs["source"] = f"generated links (seed {data_cfg.get('generator_seed', 0)})"
        links.attrs["drops_expected"] = True     # noise merges away some values' only word
        return frame, {}, links
    if source == "form_json":
        from dochar.data.importers.form_json import import_form_json

        return _dataset(data_cfg, lambda path: import_form_json(
            [path], empty_text=data_cfg.get("empty_text", "drop"), progress=progress),
            "linking fields")
    if source == "receipt_json":
        from dochar.data.importers.cord import import_receipts

        return _dataset(data_cfg, lambda path: import_receipts(
            [path], label_map=str(data_cfg.get("label_map", "fine"))), "line items' group_id")
    if source == "word_table":
        links_path = data_cfg.get("links_path")
        links = read_links_table(links_path) if links_path else empty_links()
        return read_word_table(data_cfg["path"]), {}, links
    if source in ("pdf", "hocr", "alto", "image"):
        from dochar.data.importers import load_for_run
        return (*load_for_run(data_cfg), empty_links())
    raise WordTableError(f"data.source: unknown source {source!r}; choose one of {list(SOURCES)}")


def load_data(data_cfg: Mapping[str, Any], *, strict: bool = False,
              progress: bool = False) -> LoadedData:
    """Load and validate; every skipped document is reported with its reason, never dropped silently."""
    frame, notes, raw_links = _load_raw(data_cfg, progress)
    report = validate_word_table(frame, list(data_cfg["labels"]), strict=strict,
                                 repair=data_cfg.get("repair"),
                                 clip_tolerance=float(data_cfg.get("clip_tolerance", 0.01)))
    log.info("word table: %s", report.summary())
    for problem in report.problems[:20]:
        log.warning("skipped: %s", problem)
    if len(report.problems) > 20:
        log.warning("... and %d more problems", len(report.problems) - 20)
    if report.documents_used == 0:
        raise WordTableError(f"{frame.attrs.get('source', 'data')}: no valid documents "
                             f"({report.summary()})")
    notes.update({"documents_in": report.documents_in, "documents_used": report.documents_used,
                  "documents_reported": report.documents_reported,
                  "boxes_clipped": report.repairs.get("boxes clipped to the page", 0)})
    links = validate_links_table(raw_links, report.table, strict=strict)
    if links.links_in:
        log.info("links table: %s", links.summary())
        # the generator's drops are its documented noise (data_synth.generator), not the user's
        # to fix: listed at INFO, counted in the summary above and in the run's notes
        level = logging.INFO if raw_links.attrs.get("drops_expected") else logging.WARNING
        for problem in links.problems[:20]:
            log.log(level, "link dropped: %s", problem)
        if len(links.problems) > 20:
            log.log(level, "... and %d more links dropped", len(links.problems) - 20)
        notes.update(links.notes())
    return LoadedData(report, notes, links.links)
