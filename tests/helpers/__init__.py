"""Shared test helpers: where the repository, its configs and the open datasets are."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
CONFIGS = REPO / "configs"


def datasets_root() -> Path:
    return Path(os.environ.get("DOCHAR_DATASETS", REPO.parent / "shared" / "datasets"))


def require_dataset(name: str) -> Path:
    """The dataset folder, or a skip (a user's clone) — a failure when CI demands datasets."""
    path = datasets_root() / name
    if not path.is_dir():
        reason = (f"dataset '{name}' not found at {path} (set DOCHAR_DATASETS to the folder "
                  f"holding it)")
        if os.environ.get("DOCHAR_REQUIRE_DATASETS") == "1":
            pytest.fail(reason + "; DOCHAR_REQUIRE_DATASETS=1 makes this a failure")
        pytest.skip(reason)
    return path


def split_documents(table, cfg):
    """The train/val/test assignment a composed run config gives a word table."""
    from dochar.splits import split_run

    return split_run(table, cfg.split, int(cfg.seed)).assignment
