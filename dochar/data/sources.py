"""The first stage: turn the ``data`` config into a validated word table.

Each source kind converts into the word table and nothing else; validation is shared, so a
synthetic set, an imported dataset and a user's own table obey the same rules.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd
from tqdm import tqdm

from dochar.data.word_table import (
    ValidationReport,
    WordTableError,
    read_word_table,
    validate_word_table,
)

log = logging.getLogger(__name__)
SOURCES = ("synth", "form_json", "word_table", "pdf", "hocr", "alto", "image")


@dataclass
class LoadedData:
    validation: ValidationReport
    notes: dict[str, Any] = field(default_factory=dict)

    @property
    def table(self) -> pd.DataFrame:
        return self.validation.table


def _load_raw(data_cfg: Mapping[str, Any], progress: bool) -> tuple[pd.DataFrame, dict[str, Any]]:
    source = data_cfg.get("source")
    if source == "synth":
        import data_synth
        from data_synth.generator import iter_documents

        noise = data_synth.NoiseConfig(**dict(data_cfg.get("noise") or {}))
        count = int(data_cfg["documents"])
        documents = iter_documents(count, seed=int(data_cfg.get("generator_seed", 0)),
                                   noise=noise)
        frame = pd.concat(list(tqdm(documents, total=count, desc="generating", leave=False,
                                    disable=not progress)), ignore_index=True)
        frame.attrs["source"] = f"synthetic certificates (seed {data_cfg.get('generator_seed', 0)})"
        return frame, {}
    if source == "form_json":
        from dochar.data.importers.form_json import import_form_json

        if not Path(data_cfg["path"]).exists():
            raise WordTableError(f"data.path={data_cfg['path']}: no such folder (relative paths "
                                 f"start at {Path.cwd()}; set DOCHAR_DATASETS to the folder "
                                 "holding the datasets, or data.path=...)")
        frame, report = import_form_json([data_cfg["path"]],
                                         empty_text=data_cfg.get("empty_text", "drop"),
                                         progress=progress)
        frame.attrs["source"] = str(data_cfg["path"])
        log.info("import: %s", report.summary())
        if report.problems:
            log.warning("import problems:\n  %s", "\n  ".join(report.problems))
        return frame, {"import_empty_text_dropped": report.empty_text_dropped,
                       "import_boxes_clipped": report.boxes_clipped,
                       "import_files_reported": len(report.problems)}
    if source == "word_table":
        return read_word_table(data_cfg["path"]), {}
    if source in ("pdf", "hocr", "alto", "image"):
        from dochar.data.importers import load_for_run
        return load_for_run(data_cfg)
    raise WordTableError(f"data.source: unknown source {source!r}; choose one of {list(SOURCES)}")


def load_data(data_cfg: Mapping[str, Any], *, strict: bool = False,
              progress: bool = False) -> LoadedData:
    """Load and validate; every skipped document is reported with its reason, never dropped silently."""
    frame, notes = _load_raw(data_cfg, progress)
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
    return LoadedData(report, notes)
