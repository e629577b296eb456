"""pytest plugin for mutant runs: the selected tests in order of their measured duration.

mutmut stops a mutant's run at the first failing test (``-x``), but its fork-server mode hands
the tests over in no set order, so a mutant that every test kills may first sit through the
slowest one. Sorted by the durations mutmut measured (``mutmut-stats.json`` beside the mutated
copy), a killed mutant costs about its fastest failing test. Loaded by mutation/run.py through
``PYTEST_ADDOPTS``; it changes which test runs first, never which tests run.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

STATS = "mutmut-stats.json"


def pytest_collection_modifyitems(session, config, items) -> None:
    stats = Path(STATS)
    if not stats.is_file():     # the first (stats) run: nothing measured yet
        return
    durations = json.loads(stats.read_text(encoding="utf-8")).get("duration_by_test", {})
    items.sort(key=lambda item: durations.get(item.nodeid, math.inf))
