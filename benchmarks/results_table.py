"""The FUNSD results table's wall time, as ``make funsd-table`` last recorded it.

Running every preset on three seeds takes most of an hour, too long for each ``make bench``: the
figure is read from ``reports/funsd-table.md`` (written by :mod:`reports.funsd_table`, with its
date and machine) and judged only when that file holds a full run (36 runs or more)."""

from __future__ import annotations

from pathlib import Path

from benchmarks.report import Figure
from reports.funsd_table import SEEDS, funsd_presets, recorded_wall_minutes

TARGET_MINUTES = 45
TABLE = Path(__file__).resolve().parents[1] / "reports" / "funsd-table.md"


def results_table_figures(judged: bool, table: Path = TABLE) -> list[Figure]:
    runs = len(funsd_presets()) * len(SEEDS)
    name = (f"the FUNSD results table, {runs} runs (every preset × seeds 0–2, "
            f"`make funsd-table`), wall minutes")
    recorded = recorded_wall_minutes(table)
    if recorded is None:
        return [Figure(name, f"not recorded: run `make funsd-table` ({table.name} missing)")]
    minutes, done, date = recorded
    return [Figure(name, f"{minutes:.1f} min ({done} runs, recorded {date})", comparison="<=",
                   threshold=TARGET_MINUTES, judged=judged and done >= runs, number=minutes)]
