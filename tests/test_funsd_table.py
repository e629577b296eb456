"""``make funsd-table`` in smoke mode: one preset, two seeds run as two jobs at once, one epoch.

The table's mean ± std must be those of the run folders' own scores (Python's ``statistics``,
sample standard deviation, as the results page's "± " states), the wall time must be recorded
where ``make bench`` reads it back, and a smoke table (2 runs) is shown there but not judged.
"""

from __future__ import annotations

import json
import re
import statistics

from benchmarks.results_table import results_table_figures
from reports.funsd_table import funsd_presets, main, recorded_wall_minutes


def test_smoke_table_holds_each_seeds_score_and_the_wall_time(funsd_root, tmp_path, monkeypatch):
    monkeypatch.setenv("DOCHAR_DATASETS", str(funsd_root.parent))
    out, runs = tmp_path / "table.md", tmp_path / "runs"
    assert main(["--smoke", "--runs", str(runs), "--out", str(out)]) == 0
    scores = [json.loads((runs / "funsd_rgcn" / f"seed{s}" / "run" / "summary.json").read_text()
                         )["metrics"]["macro_f1"] for s in (0, 1)]
    text = out.read_text(encoding="utf-8")
    row = next(line for line in text.splitlines() if line.startswith("| `funsd_rgcn`"))
    assert (f"macro_f1 {statistics.mean(scores):.3f} ± {statistics.stdev(scores):.3f} "
            f"(0: {scores[0]:.3f}, 1: {scores[1]:.3f})") in row
    minutes, done, date = recorded_wall_minutes(out)
    assert done == 2 and minutes > 0 and re.fullmatch(r"\d{4}-\d\d-\d\d", date)
    figure, = results_table_figures(judged=True, table=out)
    assert figure.verdict == "not judged (smoke)"   # two runs are not the whole table
    assert str(len(funsd_presets()) * 3) in figure.name


def test_the_networks_start_first():
    presets = funsd_presets()
    networks = [p for p in presets if p.endswith(("rgcn", "attention", "transformer", "gnn",
                                                  "no_graph"))]
    assert presets[:len(networks)] == sorted(networks) and len(networks) == 7
