"""`make bench`: dochar's speed and memory against their targets.

Writes ``reports/benchmarks.md`` (figure, measured, reference, ratio, target, verdict) and exits 1
when a target is missed. Times are CPU seconds of one thread (``time.process_time``), least of
the repeats: on a shared machine the time spent waiting for a core is not the program's.
``--smoke`` runs everything on small inputs and judges only correctness (CI keeps it working).

Run: ``python -m benchmarks.run [--smoke] [--repeats R] [--scale-sizes 100 300 ...]``.
"""

from __future__ import annotations

import argparse
import datetime
import os
import sys
import time
from pathlib import Path

from threadpoolctl import threadpool_limits

from benchmarks.builders import builder_figures
from benchmarks.complete import complete_figures
from benchmarks.inputs import FUNSD_PRESET, SYNTH_PRESET, run_inputs
from benchmarks.prediction import prediction_figures
from benchmarks.records import record_figures
from benchmarks.report import markdown
from benchmarks.results_table import results_table_figures
from benchmarks.scale import scale_figures
from benchmarks.training import training_figures
from dochar.gate.baseline import machine_info

FULL = {"small": 1_000, "large": 10_000, "huge": 100_000}
SMOKE = {"small": 150, "large": 600, "huge": 1_200}


def datasets_root() -> Path:
    here = Path(__file__).resolve().parents[1]
    return Path(os.environ.get("DOCHAR_DATASETS", here.parent / "shared" / "datasets"))


def machine() -> str:
    """What the figures were measured on: the ratios travel between machines, the seconds do not."""
    import torch

    info = machine_info()
    return (f"{info['cpu']} ({info['architecture']}, {os.cpu_count()} CPUs, "
            f"{info['cpu_instructions']}), Python {info['python']}, torch {torch.__version__}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.run", description=__doc__)
    parser.add_argument("--smoke", action="store_true", help="small inputs, no timing verdicts")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--scale-sizes", type=int, nargs="+", default=None)
    parser.add_argument("--out", default="reports/benchmarks.md")
    args = parser.parse_args(argv)
    judged = not args.smoke
    sizes = SMOKE if args.smoke else FULL
    repeats = 1 if args.smoke else args.repeats
    scale = args.scale_sizes or ([20, 40] if args.smoke else [100, 1000, 10_000])
    load_before, started = os.getloadavg()[0], time.perf_counter()
    with threadpool_limits(limits=1):
        figures = builder_figures(sizes["small"], sizes["large"], sizes["huge"], repeats, judged)
        figures += complete_figures(sizes["small"], sizes["large"], judged)
        if args.smoke:   # both recipes within the smoke run's 3 epochs
            inputs = run_inputs([*SYNTH_PRESET, "data.documents=12", "train.max_epochs=3"])
            figures += training_figures(inputs, repeats, judged, trees=20,
                                        earlier={"schedule": "constant", "warmup_epochs": 0})
        else:
            inputs = run_inputs(FUNSD_PRESET, datasets_root())
            figures += training_figures(inputs, repeats, judged)
        figures += prediction_figures(inputs, repeats, judged, trees=20 if args.smoke else 300)
        figures += scale_figures(scale, judged)
        figures += record_figures(20, 4 if args.smoke else 10, repeats, judged)
        figures += results_table_figures(judged)
    command = "python -m benchmarks.run " + " ".join(argv if argv is not None else sys.argv[1:])
    header = (f"# dochar benchmarks\n\n{datetime.date.today().isoformat()}, `{command.strip()}`, "
              f"{machine()}, {(time.perf_counter() - started) / 60:.0f} min, load average "
              f"{load_before:.1f} before and {os.getloadavg()[0]:.1f} after (other work on the "
              f"machine slows the two-thread row most); CPU seconds of one thread; training and "
              f"prediction on {'synthetic certificates (smoke)' if args.smoke else 'FUNSD'}; "
              f"builders on text-like pages (benchmarks/pages.py).")
    table = markdown(figures, header)
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    Path(args.out).write_text(table, encoding="utf-8")
    print(table)
    missed = [f.name for f in figures if f.met is False]
    if missed:
        print(f"{len(missed)} target(s) missed: " + "; ".join(missed), file=sys.stderr)
    return 1 if missed else 0


if __name__ == "__main__":
    sys.exit(main())
