"""The `dochar` command.

    dochar run [-m] [key=value ...]      one run, or a sweep over comma-separated choices
    dochar curve [-m] [key=value ...]    learning curve: score against training documents
    dochar graph-stats [key=value ...]   graph diagnostics for a data/graph choice, no training
    dochar compare RUN_A RUN_B           paired difference of two runs on the same test pages
    dochar report [--experiment NAME]    static HTML page of an experiment's runs
    dochar gate [--update] [key=value]   reference run vs the committed baseline (CI)
    dochar import SRC... --out TABLE     PDF, hOCR, ALTO, page images, form JSON -> word table

Input and config problems (``DocharError``, and Hydra's or OmegaConf's config errors) end a
command with one located message on stderr and exit code 2; any other exception is a bug and
shows its traceback. ``DOCHAR_TRACEBACK=1`` shows the traceback of input errors too.
"""

from __future__ import annotations

import argparse
import logging
import os
import sys
from pathlib import Path

from dochar.config import CONFIG_DIR, check_config, config_error_message
from dochar.errors import DocharError

log = logging.getLogger("dochar")
_SUBCOMMAND = ["run"]  # the Hydra-driven subcommand being run, for the recorded command line


def _hydra_main(task):
    import hydra

    return hydra.main(config_path=str(CONFIG_DIR), config_name="config",
                      version_base="1.3")(task)


def _check_tracking(cfg) -> None:
    """Fail fast, before any data loads, when the tracking store cannot be reached: a run whose
    results cannot be recorded is better not started. ``tracking.enabled=false`` runs without
    one (the run folder under outputs/ still holds everything)."""
    if not cfg.tracking.enabled:
        return
    from dochar.runs.tracking import resolve_uri

    uri = resolve_uri(cfg.tracking.uri)
    if not uri.startswith(("http://", "https://")):
        return      # a local store (SQLite, files) is created on first use
    os.environ.setdefault("MLFLOW_HTTP_REQUEST_TIMEOUT", "10")
    os.environ.setdefault("MLFLOW_HTTP_REQUEST_MAX_RETRIES", "2")
    from mlflow import MlflowClient

    try:
        MlflowClient(tracking_uri=uri).search_experiments(max_results=1)
    except Exception as error:  # MLflow wraps connection failures in several types
        reason = " ".join(str(error).split())[:200]
        raise DocharError(f"tracking server {uri} cannot be reached ({type(error).__name__}: "
                          f"{reason}); start it, point tracking.uri or MLFLOW_TRACKING_URI "
                          f"elsewhere, or run with tracking.enabled=false") from error


def _finish(cfg, bundle, model) -> float:
    """Write the run folder, log it, print its line: the same for every kind of job."""
    from hydra.core.hydra_config import HydraConfig

    from dochar.report.run_folder import write_run_files
    from dochar.runs.console import console, ranking_table
    from dochar.runs.tracking import log_run, resolve_uri

    hydra_cfg = HydraConfig.get()
    bundle.command = " ".join(["dochar", _SUBCOMMAND[0], *hydra_cfg.overrides.task])
    folder = Path(hydra_cfg.runtime.output_dir) / "run"
    write_run_files(folder, bundle, model)
    if cfg.tracking.enabled:
        uri = resolve_uri(cfg.tracking.uri)
        try:
            log_run(bundle, folder, uri=uri, experiment=str(cfg.tracking.experiment))
        except Exception as error:  # the store went away during the run: say so, keep the folder
            bundle.save(folder)
            raise DocharError(f"tracking server {uri} failed while logging the run "
                              f"({type(error).__name__}); the finished run is kept in "
                              f"{folder}") from error
    else:
        bundle.save(folder)
    console.print(ranking_table([bundle], title=f"run {bundle.name}"))
    return float(bundle.metrics["macro_f1"])


def _run_job(cfg) -> float:
    from dochar.experiment import run_experiment

    _check_tracking(cfg)
    bundle, model = run_experiment(cfg)
    return _finish(cfg, bundle, model)


def _curve_job(cfg) -> float:
    """Learning curve of one system; logged as its full-data run plus curve/<n>/<score>."""
    from dochar.curve import curve_metrics, run_learning_curve

    _check_tracking(cfg)
    full: list = []

    def keep_full(bundle, model, point) -> None:
        if point.split.train_documents is None and not full:
            full.extend([bundle, model])

    seeds = list(cfg.curve.seeds) if cfg.curve.get("seeds") else None
    frame = run_learning_curve(cfg, list(cfg.curve.sizes), seeds=seeds, on_run=keep_full)
    bundle, model = full
    print(f"learning curve of {bundle.name}:")
    print(frame[["n_train_documents", "seed", "macro_f1", "macro_f1_low", "macro_f1_high",
                 "entity_f1", "train_seconds"]].round(3).to_string(index=False))
    bundle.metrics.update(curve_metrics(frame))
    bundle.tables["learning_curve"] = frame.set_index("system")
    return _finish(cfg, bundle, model)


def _graph_stats_job(cfg) -> None:
    from dochar import graphs
    from dochar.data.sources import load_data
    from dochar.data.word_table import iter_pages
    from dochar.graphs.diagnostics import format_stats, graph_stats

    data = load_data(cfg.data, strict=bool(cfg.strict))
    builder = graphs.from_config(cfg.graph)
    stats = graph_stats(list(iter_pages(data.table)), builder)
    print(f"graph builder {cfg.graph.name} on {cfg.data.name}:")
    print(format_stats(stats))


def _tracebacks() -> bool:
    return os.environ.get("DOCHAR_TRACEBACK") == "1"


def _report_error(command: str, error: DocharError) -> int:
    """One located message on stderr, exit code 2 (``DOCHAR_TRACEBACK=1``: the traceback)."""
    if _tracebacks():
        raise error
    print(f"dochar {command}: error: {error}", file=sys.stderr)
    return 2


def _reported(task):
    """Check the composed config against its schemas, then run the job; input and config
    problems end it with one located message and exit code 2."""
    from omegaconf.errors import OmegaConfBaseException

    def job(cfg):
        try:
            check_config(cfg)
            try:
                return task(cfg)
            except OmegaConfBaseException as error:   # e.g. a mandatory value left as ???
                raise DocharError(config_error_message(error)) from error
        except DocharError as error:
            raise SystemExit(_report_error(_SUBCOMMAND[0], error)) from None

    job.__name__ = task.__name__
    job.__module__ = task.__module__
    return job


def _hydra_command(task, argv: list[str]) -> int:
    """Run a Hydra app; composition errors (a wrong type, an unknown key or option) come back
    here instead of Hydra's own report, so they get the same one line and exit code 2."""
    from hydra.errors import HydraException
    from omegaconf.errors import OmegaConfBaseException

    _SUBCOMMAND[0] = argv[0]
    sys.argv = [f"dochar {argv[0]}", *argv[1:]]
    previous = os.environ.get("HYDRA_FULL_ERROR")
    os.environ["HYDRA_FULL_ERROR"] = "1"    # Hydra re-raises instead of printing and exiting 1
    try:
        _hydra_main(_reported(task))()
    except SystemExit as stop:
        return int(stop.code or 0)
    except (HydraException, OmegaConfBaseException) as error:
        return _report_error(argv[0], DocharError(config_error_message(error)))
    finally:
        if previous is None:
            os.environ.pop("HYDRA_FULL_ERROR", None)
        else:
            os.environ["HYDRA_FULL_ERROR"] = previous
    return 0


def _load(uri: str, experiment: str, run_ids: list[str] | None):
    os.environ.setdefault("MLFLOW_ENABLE_ARTIFACTS_PROGRESS_BAR", "false")
    from dochar.report.sources import load_bundles_from_mlflow

    bundles = load_bundles_from_mlflow(uri, experiment, run_ids)
    if not bundles:
        raise DocharError(f"no finished dochar runs in experiment {experiment!r} at {uri}")
    return bundles


def _compare(args: argparse.Namespace) -> int:
    from dochar.runs.compare import compare_runs, format_comparison

    bundles = _load(args.tracking_uri, args.experiment, None)

    def find(prefix: str):
        """A run id or its first characters, as the run tables print them."""
        matches = [b for b in bundles if (b.run_id or "").startswith(prefix)]
        if len(matches) != 1:
            shown = ", ".join((b.run_id or "")[:8] for b in bundles[:10])
            raise DocharError(f"{prefix!r} matches {len(matches)} runs of experiment "
                              f"{args.experiment!r}; give more of the run id (runs: {shown})")
        return matches[0]

    run_a, run_b = find(args.run_a), find(args.run_b)
    try:
        result = compare_runs(run_a, run_b, score=args.score, method=args.method,
                              resamples=args.resamples, seed=args.seed)
    except DocharError:
        raise
    except ValueError as error:   # dochar.runs.compare names the unusable --score or label set
        raise DocharError(str(error)) from error
    print(format_comparison(run_a, run_b, result, args.score))
    return 0


def _report(args: argparse.Namespace) -> int:
    from dochar.report import write_report

    bundles = _load(args.tracking_uri, args.experiment, args.runs or None)
    if args.sweep:
        sweeps = sorted({b.tags.get("sweep_id", "") for b in bundles} - {""})
        wanted = sweeps[-1] if args.sweep == "latest" and sweeps else args.sweep
        bundles = [b for b in bundles if b.tags.get("sweep_id") == wanted]
        if not bundles:
            raise DocharError(f"no runs of sweep {args.sweep!r} (sweeps here: "
                              f"{sweeps or 'none'})")
    out = Path(args.out or Path("reports") / f"{args.experiment}.html")
    path = write_report(bundles, out, title=f"dochar — {args.experiment}", score=args.score,
                        reference=args.reference)
    print(f"report written: {path.resolve()}")
    return 0


def _parser() -> argparse.ArgumentParser:
    from dochar.runs.tracking import resolve_uri

    parser = argparse.ArgumentParser(prog="dochar", description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    commands = parser.add_subparsers(dest="command", required=True)
    for name in ("run", "curve", "graph-stats"):
        commands.add_parser(name, help="Hydra overrides follow", add_help=False)
    commands.add_parser("gate", help="CI regression gate (dochar gate --help)", add_help=False)

    def tracked(sub: argparse.ArgumentParser) -> None:
        sub.add_argument("--experiment", default="dochar-demo", help="MLflow experiment name")
        sub.add_argument("--tracking-uri", default=resolve_uri(), help="MLflow store")
        sub.add_argument("--score", default="macro_f1", help="metric to rank/compare by")

    compare = commands.add_parser("compare", help="paired comparison of two runs")
    compare.add_argument("run_a", help="run id, or its first characters")
    compare.add_argument("run_b", help="run id, or its first characters")
    compare.add_argument("--method", choices=["bootstrap", "randomisation"], default="bootstrap")
    compare.add_argument("--resamples", type=int, default=2000)
    compare.add_argument("--seed", type=int, default=0)
    tracked(compare)
    report = commands.add_parser("report", help="static HTML report of an experiment's runs")
    report.add_argument("--runs", nargs="*", help="run ids (default: every finished run)")
    report.add_argument("--sweep", help="only the runs of one sweep: its id, or 'latest'")
    report.add_argument("--reference", help="run name to compare every run against")
    report.add_argument("--out", help="output HTML path (default reports/<experiment>.html)")
    tracked(report)
    return parser


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if argv and argv[0] == "run":
        return _hydra_command(_run_job, argv)
    if argv and argv[0] == "curve":
        return _hydra_command(_curve_job, argv)
    if argv and argv[0] == "graph-stats":
        return _hydra_command(_graph_stats_job, argv)
    if argv and argv[0] == "import":
        from dochar.data.import_command import main as import_main
        try:
            return import_main(argv[1:])
        except DocharError as error:
            return _report_error("import", error)
    if argv and argv[0] == "gate":
        from dochar.gate.command import main as gate_main

        return gate_main(argv[1:])
    args = _parser().parse_args(argv)
    handlers = {"compare": _compare, "report": _report}
    try:
        return handlers[args.command](args)
    except DocharError as error:
        return _report_error(args.command, error)


if __name__ == "__main__":
    raise SystemExit(main())
