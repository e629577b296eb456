"""Headless Chromium for browser tests: the Debian binary, started the way this machine allows."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

CHROMIUM = Path("/usr/bin/chromium")
# without the background-networking flags Chromium keeps dialling out of a closed network
LAUNCH_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
               "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def require_chromium() -> Path:
    if not CHROMIUM.exists():
        reason = f"headless browser not found at {CHROMIUM} (Debian package 'chromium')"
        if os.environ.get("DOCHAR_REQUIRE_BROWSER") == "1":
            pytest.fail(reason + "; DOCHAR_REQUIRE_BROWSER=1 makes this a failure")
        pytest.skip(reason)
    return CHROMIUM
