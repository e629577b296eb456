"""``make funsd-table``: every FUNSD preset (configs/experiment/funsd_*.yaml) on seeds 0–2, two
jobs at once, then one table of mean ± std per preset and the command's wall time.

Each job is its own ``dochar run`` process with one thread (``train.threads=1`` and the BLAS /
OpenMP pools capped by environment), so a job's result is the one a lone run gives, whichever
job shares the machine with it; ``--jobs`` workers (default: the CPU count, at most 2 on the
2-core machines this is measured on) keep every core busy. The slow presets (networks) start first
so that the last jobs to finish are short ones. Tracking is off: the table reads each run folder's
``summary.json``.

Writes ``reports/funsd-table.md`` (the table, the wall time, the machine) and keeps the run folders
under ``outputs/funsd-table/<date-time>/<preset>/seed<N>/run``. ``--smoke``: one preset, two
seeds, one epoch, no text embedding, into ``reports/funsd-table-smoke.md`` (the test suite runs it).

Run: ``python -m reports.funsd_table [--smoke] [--jobs N] [--presets P ...] [--out FILE]``.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import shlex
import subprocess
import sys
import time
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
PRESETS_DIR = ROOT / "configs" / "experiment"
SEEDS = (0, 1, 2)
ONE_THREAD = {name: "1" for name in ("OMP_NUM_THREADS", "MKL_NUM_THREADS",
                                     "OPENBLAS_NUM_THREADS")}
COMMON = ("tracking.enabled=false", "train.threads=1", "train.progress=false")
SMOKE_PRESET = "funsd_rgcn"
SMOKE = ("train.max_epochs=1", "train.warmup_epochs=0",
         "features.groups=[geometry,text_flags,char_cnn]", "features.line_context=false",
         "evaluation.bootstrap_resamples=20")
NETWORKS = ("model: relational", "model: attention", "model: transformer", "model: none",
            "model: gated_relational", "model: edge_attention")


class TableError(RuntimeError):
    """A job failed or an option is unusable; the message names the job or the option."""


@dataclass(frozen=True)
class Job:
    preset: str
    seed: int
    folder: Path
    overrides: tuple[str, ...]

    def command(self) -> list[str]:
        return [sys.executable, "-m", "dochar.cli", "run", f"+experiment={self.preset}",
                f"seed={self.seed}", *COMMON, *self.overrides,
                f"hydra.run.dir={self.folder}"]


def funsd_presets() -> list[str]:
    """Every FUNSD preset, the networks first (they take longest)."""
    names = sorted(path.stem for path in PRESETS_DIR.glob("funsd_*.yaml"))
    return sorted(names, key=lambda name: not is_network(name))


def is_network(preset: str) -> bool:
    text = (PRESETS_DIR / f"{preset}.yaml").read_text(encoding="utf-8")
    return any(f"override /{line}" in text for line in NETWORKS)


def run_job(job: Job) -> float:
    """One ``dochar run``; its wall seconds. Its output goes to ``job.log`` beside the run."""
    job.folder.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    with (job.folder / "job.log").open("w", encoding="utf-8") as log:
        code = subprocess.run(job.command(), cwd=ROOT, stdout=log, stderr=subprocess.STDOUT,
                              env={**os.environ, **ONE_THREAD}).returncode
    if code != 0:
        raise TableError(f"{job.preset} seed {job.seed} failed (exit {code}); see "
                         f"{job.folder / 'job.log'}")
    return time.perf_counter() - started


def summary(job: Job) -> dict:
    return json.loads((job.folder / "run" / "summary.json").read_text(encoding="utf-8"))


def table_rows(jobs: Sequence[Job], seconds: dict[Job, float]) -> list[str]:
    """One Markdown row per preset: its task, headline score mean ± std (sample std, ddof=1)
    over the seeds with each seed's value, word macro-F1 where the task has one, run seconds."""
    rows = []
    for preset in dict.fromkeys(job.preset for job in jobs):
        mine = [job for job in jobs if job.preset == preset]
        found = [summary(job) for job in mine]
        headline = found[0]["tags"]["headline"]
        scores = np.array([s["metrics"][headline] for s in found], dtype=float)
        spread = f" ± {scores.std(ddof=1):.3f}" if len(scores) > 1 else ""
        seeds = ", ".join(f"{job.seed}: {value:.3f}" for job, value in zip(mine, scores))
        macro = [s["metrics"].get("macro_f1") for s in found]
        word = (f"{np.mean(macro):.3f}" if headline != "macro_f1" and None not in macro
                else "–")
        wall = np.mean([seconds[job] for job in mine])
        rows.append(f"| `{preset}` | {found[0]['tags']['task']} | {found[0]['tags']['model']} | "
                    f"{headline} {scores.mean():.3f}{spread} ({seeds}) | {word} | {wall:.0f} |")
    return rows


def markdown(jobs: Sequence[Job], seconds: dict[Job, float], wall: float, workers: int,
             command: str, smoke: bool) -> str:
    header = (f"# FUNSD presets × seeds\n\n{datetime.date.today().isoformat()}, `{command}`, "
              f"{platform.processor() or platform.machine()}, {os.cpu_count()} CPUs, "
              f"{workers} jobs at once, one thread each{' (smoke: one epoch)' if smoke else ''}."
              f"\n\nwall time: {wall / 60:.1f} min for {len(jobs)} runs "
              f"({sum(seconds.values()) / 60:.1f} min of runs back to back)\n")
    lines = ["| preset | task | model | headline score, mean ± std (per seed) | word macro-F1 "
             "| run s (mean) |", "|---|---|---|---|---|---|", *table_rows(jobs, seconds)]
    return header + "\n" + "\n".join(lines) + "\n"


def recorded_wall_minutes(path: Path) -> tuple[float, int, str] | None:
    """(minutes, runs, date) of the last table written at ``path``, None when there is none."""
    if not path.is_file():
        return None
    text = path.read_text(encoding="utf-8")
    for line in text.splitlines():
        if line.startswith("wall time: "):
            words = line.split()
            return float(words[2]), int(words[5]), text.split("\n")[2].split(",")[0]
    return None


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m reports.funsd_table", description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--smoke", action="store_true", help="one preset, two seeds, one epoch")
    parser.add_argument("--jobs", type=int, default=min(os.cpu_count() or 1, 2))
    parser.add_argument("--presets", nargs="+", default=None, metavar="PRESET")
    parser.add_argument("--out", type=Path, default=None)
    parser.add_argument("--runs", type=Path, default=None, metavar="DIR",
                        help="where the run folders go (default outputs/funsd-table/<now>)")
    args = parser.parse_args(argv)
    if args.jobs < 1:
        raise TableError(f"--jobs {args.jobs}: give at least 1")
    presets = args.presets or ([SMOKE_PRESET] if args.smoke else funsd_presets())
    unknown = [p for p in presets if not (PRESETS_DIR / f"{p}.yaml").is_file()]
    if unknown:
        raise TableError(f"--presets: no such preset {unknown}; FUNSD presets: "
                         f"{funsd_presets()}")
    seeds = SEEDS[:2] if args.smoke else SEEDS
    out = args.out or ROOT / "reports" / f"funsd-table{'-smoke' if args.smoke else ''}.md"
    runs = args.runs or ROOT / "outputs" / "funsd-table" / datetime.datetime.now().strftime(
        "%Y-%m-%d_%H-%M-%S")
    jobs = [Job(p, s, runs / p / f"seed{s}", SMOKE if args.smoke else ()) for p in presets
            for s in seeds]
    started = time.perf_counter()
    with ThreadPoolExecutor(max_workers=args.jobs) as pool:   # each thread waits on one process
        seconds = dict(zip(jobs, pool.map(run_job, jobs)))
    wall = time.perf_counter() - started
    command = "python -m reports.funsd_table " + shlex.join(argv if argv is not None
                                                            else sys.argv[1:])
    text = markdown(jobs, seconds, wall, args.jobs, command.strip(), args.smoke)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    try:
        sys.exit(main())
    except TableError as error:
        print(f"funsd-table: error: {error}", file=sys.stderr)
        sys.exit(2)
