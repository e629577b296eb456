"""``python -m reports.readme_figures``: rewrite the figure blocks of README.md, DEVELOPERS.md
and docs/*.md.

    python -m reports.readme_figures                   the cheap blocks (seconds)
    python -m reports.readme_figures --only demo       one block (repeat --only for more)
    python -m reports.readme_figures --all             every block, training runs included
    python -m reports.readme_figures --check           recompute the cheap blocks; exit 1 when
                                                       a page differs from them
"""

from __future__ import annotations

import argparse
import difflib
import logging
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from reports.readme_figures import cheap, gate_spread, record_tables, tables
from reports.readme_figures.cheap import FigureUnavailable
from reports.readme_figures.markers import (FigureBlockError, documents, find_blocks,
                                            replace_block, same_figures, wrap_prose)

ROOT = Path(__file__).resolve().parents[2]


@dataclass(frozen=True)
class Figure:
    compute: Callable[..., str]
    cheap: bool        # cheap: no training, seconds; in --check and in the test suite
    takes_keep: bool = False


FIGURES: dict[str, Figure] = {
    "layout-ari": Figure(cheap.layout_ari, cheap=True),
    "funsd-leakage": Figure(cheap.funsd_leakage, cheap=True),
    "funsd-entity-ceiling": Figure(cheap.funsd_entity_ceiling, cheap=True),
    "funsd-blank-links": Figure(cheap.funsd_blank_links, cheap=True),
    "benchmarks": Figure(cheap.benchmarks, cheap=True),
    "bench-summary": Figure(cheap.bench_summary, cheap=True),
    "funsd-table": Figure(cheap.funsd_table, cheap=True),
    "mutation": Figure(cheap.mutation_table, cheap=True),
    "gate-tolerances": Figure(gate_spread.gate_tolerances, cheap=False, takes_keep=True),
    "thread-spread": Figure(gate_spread.thread_spread, cheap=False, takes_keep=True),
    "layout-held-out": Figure(tables.layout_held_out, cheap=False, takes_keep=True),
    "demo": Figure(tables.demo, cheap=False, takes_keep=True),
    "template-curve": Figure(tables.template_curve, cheap=False),
    "full-sweep": Figure(tables.full_sweep, cheap=False, takes_keep=True),
    "records-demo": Figure(record_tables.records_demo, cheap=False, takes_keep=True),
    "receipts-records": Figure(record_tables.receipts_records, cheap=False, takes_keep=True),
}
CHEAP = [name for name, figure in FIGURES.items() if figure.cheap]


def compute(name: str, keep: Path | None = None) -> str:
    """The block's text as its page holds it (prose wrapped, tables whole)."""
    figure = FIGURES[name]
    return wrap_prose(figure.compute(keep) if figure.takes_keep else figure.compute())


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="python -m reports.readme_figures",
                                     description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--only", action="append", choices=sorted(FIGURES), metavar="NAME",
                        help=f"regenerate this block (repeatable): {', '.join(FIGURES)}")
    parser.add_argument("--all", action="store_true", help="every block, training runs included")
    parser.add_argument("--check", action="store_true",
                        help="recompute the cheap blocks (or --only ones) and exit 1 when a "
                             "page differs; writes nothing")
    parser.add_argument("--root", type=Path, default=ROOT,
                        help="the checkout whose README.md and docs/*.md hold the blocks")
    parser.add_argument("--keep-runs", type=Path, default=None, metavar="DIR",
                        help="save finished training runs here and reuse them on the next call")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    logging.basicConfig(level=logging.WARNING, format="%(message)s")
    logging.getLogger("reports").setLevel(logging.INFO)
    logging.getLogger("dochar").setLevel(logging.ERROR)   # the data loaders' per-row notes
    names = list(FIGURES) if args.all else (args.only or CHEAP)
    present = find_blocks(documents(args.root))
    missing = sorted(set(names) - set(present))
    if missing:
        raise FigureBlockError(f"no figure block {', '.join(missing)} in {args.root}/README.md "
                               f"or docs/*.md")
    differ = []
    for name in names:
        started = time.perf_counter()
        try:
            body = compute(name, args.keep_runs)
        except FigureUnavailable as reason:
            print(f"{name}: skipped, {reason}")
            continue
        seconds = time.perf_counter() - started
        path, old = present[name]
        where = path.relative_to(args.root)
        if args.check:
            same = same_figures(old, body)
            print(f"{name}: {f'same as {where}' if same else f'DIFFERS from {where}'} "
                  f"({seconds:.0f} s)")
            if not same:
                differ.append(name)
                sys.stdout.writelines(difflib.unified_diff(
                    old.splitlines(True), body.splitlines(True),
                    f"{where}: {name}", f"recomputed: {name}"))
            continue
        # read again and write block by block: a crash keeps the blocks already written
        fresh = replace_block(path.read_text(encoding="utf-8"), name, body)
        path.write_text(fresh, encoding="utf-8")
        print(f"{name}: written to {where} ({seconds:.0f} s)")
    return 1 if differ else 0


if __name__ == "__main__":
    sys.exit(main())
