"""Training runs behind the expensive figures, run in this process by dochar's own code.

A run is the composed ``dochar run`` config with the given overrides (``run_reference``, the
gate's own runner), so its scores equal those of the command line. With a ``keep`` folder every
finished run is saved there under a hash of its overrides and read back on the next call, so an
interrupted regeneration resumes; without one nothing is reused.
"""

from __future__ import annotations

import hashlib
import logging
import os
import platform
import time
from collections.abc import Sequence
from pathlib import Path

import torch

from dochar.gate.command import run_reference
from dochar.runs.bundle import RunBundle

log = logging.getLogger(__name__)

QUIET = ["tracking.enabled=false", "train.progress=false", "train.threads=1"]


def machine() -> str:
    """Where a trained figure was measured: a GNN's scores move with the CPU and the torch
    build (the order of floating-point sums), so the figure says which ones it came from."""
    return f"{platform.machine()}, {os.cpu_count()} CPUs, torch {torch.__version__}"


def with_overrides(base: Sequence[str], extra: Sequence[str]) -> list[str]:
    """``base`` with every key that ``extra`` sets replaced by ``extra``'s value."""
    keys = {item.split("=", 1)[0].lstrip("+~") for item in extra}
    return [item for item in base if item.split("=", 1)[0].lstrip("+~") not in keys] + list(extra)


def run(overrides: Sequence[str], keep: Path | None = None) -> RunBundle:
    """One finished run of ``dochar run OVERRIDES`` (tracking off, one thread)."""
    overrides = with_overrides(QUIET, overrides)
    folder = None
    if keep is not None:
        digest = hashlib.sha1("\n".join(overrides).encode()).hexdigest()[:12]
        folder = keep / digest
        if (folder / "summary.json").is_file():
            log.info("reusing %s for %s", folder, " ".join(overrides))
            return RunBundle.load(folder)
    started = time.perf_counter()
    log.info("running dochar run %s", " ".join(overrides))
    bundle = run_reference(overrides)
    log.info("finished in %.0f s", time.perf_counter() - started)
    if folder is not None:
        bundle.save(folder)
    return bundle
