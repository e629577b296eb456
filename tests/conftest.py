"""Shared fixtures: where the open datasets live, and whether their absence skips or fails."""

from __future__ import annotations

from pathlib import Path

import pytest

import dochar.config  # noqa: F401  (registers the config schemas that configs/ start from)
from tests.helpers import require_dataset


@pytest.fixture(scope="session")
def funsd_root() -> Path:
    return require_dataset("funsd")


@pytest.fixture(scope="session")
def cord_root() -> Path:
    return require_dataset("cord")
