"""Figures that take seconds: no training, only dochar's data, split and scoring code."""

from __future__ import annotations

import datetime as dt
import os
from pathlib import Path

import numpy as np
from sklearn.metrics import adjusted_rand_score

from dochar.data.sources import load_data
from dochar.metrics.entities import entity_scores
from dochar.splits import split_run
from dochar.splits.layout_families import assign_inferred_layouts

REPO = Path(__file__).resolve().parents[2]
SYNTH_SETS = ((60, 3), (300, 1))   # (documents, generator seed)
RANDOM_DEALS = 50


class FigureUnavailable(RuntimeError):
    """A figure whose input is missing here (FUNSD not downloaded): skipped, never guessed."""


def compose(*overrides: str):
    """The run config ``dochar run OVERRIDES`` composes (the checkout's configs/)."""
    import dochar.config  # noqa: F401  (registers the schemas the configs start from)
    from hydra import compose as hydra_compose
    from hydra import initialize_config_dir

    from dochar.gate.command import config_dir

    with initialize_config_dir(config_dir=str(config_dir()), version_base="1.3"):
        return hydra_compose("config", overrides=list(overrides))


def funsd_root() -> Path:
    root = Path(os.environ.get("DOCHAR_DATASETS", REPO.parent / "shared" / "datasets")) / "funsd"
    if not root.is_dir():
        raise FigureUnavailable(f"FUNSD not found at {root} (set DOCHAR_DATASETS to the folder "
                                f"holding it)")
    return root


def today() -> str:
    return dt.date.today().isoformat()


def family_ari(documents: int, generator_seed: int) -> tuple[float, float]:
    """ARI of the inferred families against the generator's layouts (scikit-learn's
    ``adjusted_rand_score``), and the mean ARI of the same family sizes dealt out at random."""
    cfg = compose("split=inferred_layouts", f"data.documents={documents}",
                  f"data.generator_seed={generator_seed}")
    table = load_data(cfg.data).table
    filled, _ = assign_inferred_layouts(table, cfg.split)
    truth = table.groupby("doc_id")["layout_id"].first()
    inferred = filled.groupby("doc_id")["layout_id"].first().reindex(truth.index).to_numpy()
    rng = np.random.default_rng(0)
    dealt = [adjusted_rand_score(truth, rng.permutation(inferred)) for _ in range(RANDOM_DEALS)]
    return float(adjusted_rand_score(truth, inferred)), float(np.mean(dealt))


def layout_ari() -> str:
    scores = [(n, seed, *family_ari(n, seed)) for n, seed in SYNTH_SETS]
    recovered = " and ".join(f"{ari:.2f} ({n} documents, generator seed {seed})"
                             for n, seed, ari, _ in scores)
    dealt = max(abs(mean) for *_, mean in scores)
    return (f"On synthetic data, where true layouts are known, the inferred families recover them "
            f"with an adjusted Rand index of {recovered}; the same family sizes dealt out at "
            f"random score {dealt:.2f} on average ({RANDOM_DEALS} deals; {today()}, "
            f"`python -m reports.readme_figures --only layout-ari`).\n")


def funsd_split():
    cfg = compose("data=funsd", "split=fixed", f"data.path={funsd_root()}")
    table = load_data(cfg.data).table
    return cfg, table, split_run(table, cfg.split, int(cfg.seed))


def funsd_leakage() -> str:
    cfg, _, split = funsd_split()
    leaked = split.leakage["test_doc"].nunique()
    return (f"On the official split {leaked} of the "
            f"{len(split.assignment.test)} test forms have a near-duplicate template among the "
            f"training forms (leakage report, cosine distance of page signatures < "
            f"{cfg.split.leakage_threshold:g}; {today()}, "
            f"`python -m reports.readme_figures --only funsd-leakage`); `split=inferred_layouts` "
            f"splits by inferred layout families instead.\n")


def funsd_entity_ceiling() -> str:
    cfg, table, split = funsd_split()
    test = table[table["doc_id"].isin(split.assignment.test)].copy()
    test["predicted"] = test["label"]
    scores = entity_scores(test, list(cfg.data.labels),
                           ignore=list(cfg.evaluation.entity_ignore))
    return (f"What reading order costs: with every word's label right, dochar's entity rule (a "
            f"field is a run of one label in reading order, `dochar/metrics/entities.py`) finds "
            f"{scores.n_correct:,} of the {scores.n_true:,} labelled test entities exactly, in "
            f"{scores.n_pred:,} runs: neighbouring entities of one label merge into one run, and "
            f"{scores.n_true_fragmented:,} entities are not contiguous in reading order. Entity "
            f"F1 {scores.f1:.3f} is therefore the ceiling of entity F1 from word labels on FUNSD "
            f"({today()}, `python -m reports.readme_figures --only funsd-entity-ceiling`).\n")


def funsd_blank_links() -> str:
    """Links of the FUNSD import that lose an end when blank words are dropped."""
    counts = {}
    for empty_text in ("drop", "keep"):
        cfg = compose("data=funsd", f"data.path={funsd_root()}", f"data.empty_text={empty_text}")
        counts[empty_text] = load_data(cfg.data).notes
    dropped, kept = counts["drop"], counts["keep"]
    return (f"On FUNSD, {dropped['links_unknown_entity']:,} of the {dropped['links_in']:,} "
            f"imported links point to an entity whose words are all blank (dropped by "
            f"`data.empty_text=drop`; with `keep`, {kept['links_unknown_entity']} links lose an "
            f"end) and are dropped and counted ({today()}, "
            f"`python -m reports.readme_figures --only funsd-blank-links`).\n")


BUILDER_ROWS = ("| sector:", "| knn (k=8):", "| line_of_sight:")


def _bench_lines() -> list[str]:
    path = REPO / "reports" / "benchmarks.md"
    if not path.is_file():
        raise FigureUnavailable(f"{path} not found: run `make bench` first")
    return path.read_text(encoding="utf-8").splitlines()


def bench_summary() -> str:
    """The README's cut of the last ``make bench`` table: training, prediction and the sweep rows
    in full, the graph builders' rows counted (docs/benchmarks.md quotes every row)."""
    lines = [line for line in _bench_lines() if not line.startswith("# ")]
    builders = [line for line in lines if line.startswith(BUILDER_ROWS)]
    met = sum(line.rstrip().endswith("| met |") for line in builders)
    kept = [line for line in lines if not line.startswith(BUILDER_ROWS)]
    return ("\n".join(kept).strip() + f"\n\nGraph builders: {met} of {len(builders)} targets met "
            f"(rows in [benchmarks](docs/benchmarks.md#the-last-full-run)). "
            f"`python -m reports.readme_figures --only bench-summary` copies this from "
            f"`reports/benchmarks.md`.\n")


def funsd_table() -> str:
    """The table ``make funsd-table`` last wrote (reports/funsd-table.md), quoted whole."""
    path = REPO / "reports" / "funsd-table.md"
    if not path.is_file():
        raise FigureUnavailable(f"{path} not found: run `make funsd-table` first")
    lines = path.read_text(encoding="utf-8").splitlines()
    body = "\n".join(line for line in lines if not line.startswith("# ")).strip()
    return (f"{body}\n\n`python -m reports.readme_figures --only funsd-table` copies this from "
            f"`reports/funsd-table.md`.\n")


def mutation_table() -> str:
    """The summary ``make mutate`` last wrote (reports/mutation.md): the line that says how it
    was made and the table of kill rates per module; the survivors' diffs stay in the report."""
    path = REPO / "reports" / "mutation.md"
    if not path.is_file():
        raise FigureUnavailable(f"{path} not found: run `make mutate` first")
    lines = path.read_text(encoding="utf-8").splitlines()
    made = next(line for line in lines if line.startswith("Generated "))
    start = next(i for i, line in enumerate(lines) if line.startswith("| module"))
    end = next((i for i in range(start, len(lines)) if not lines[i].startswith("|")), len(lines))
    return (f"{made}\n\n" + "\n".join(lines[start:end]) + "\n\n`python -m reports.readme_figures "
            "--only mutation` copies this from `reports/mutation.md`.\n")


def benchmarks() -> str:
    """The table ``make bench`` last wrote (reports/benchmarks.md), as docs/benchmarks.md quotes
    it: the bench's own file is the record, so the page cannot drift from it."""
    body = [line for line in _bench_lines() if not line.startswith("# ")]
    return "\n".join(body).strip() + "\n"
