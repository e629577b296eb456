"""Shared fixtures: where the open datasets live, and whether their absence skips or fails."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


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


@pytest.fixture(scope="session")
def funsd_root() -> Path:
    return require_dataset("funsd")
