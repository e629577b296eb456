"""The `dochar` command.

    dochar run [-m] [key=value ...]      one run, or a sweep over comma-separated choices
    dochar curve [-m] [key=value ...]    learning curve: score against training documents
    dochar graph-stats [key=value ...]   graph diagnostics for a data/graph choice, no training
    dochar compare RUN_A RUN_B           paired difference of two runs on the same test pages
    dochar report [--experiment NAME]    static HTML page of an experiment's runs
    dochar runs [--experiment NAME]      list the tracked runs (id, name, data, scores, date)
    dochar gate [--update] [key=value]   reference run vs the committed baseline (CI)
    dochar import SRC... --out TABLE     PDF, hOCR, ALTO, page images, form JSON -> word table
    dochar tracking-server [--db-uri ..] shared MLflow server on PostgreSQL, loopback by default
    dochar predict --model RUN --input SRC... --out DIR   a trained model labels new documents

Input and config problems (``DocharError``, and Hydra's or OmegaConf's config errors) end a
command with one located message on stderr and exit code 2; any other exception is a bug and
shows its traceback. ``DOCHAR_TRACEBACK=1`` shows the traceback of input errors too.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import os
import sys
import time
from pathlib import Path

from dochar.config import CONFIG_DIR, config_error_message
from dochar.errors import DocharError, SuggestingParser

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
        reason = _one_line(error, 200)
        raise DocharError(f"tracking server {uri} cannot be reached ({type(error).__name__}: "
                          f"{reason}); start it, point tracking.uri or MLFLOW_TRACKING_URI "
                          f"elsewhere, or run with tracking.enabled=false") from error


def _one_line(error: BaseException, limit: int) -> str:
    """An error's message with its whitespace folded, cut to ``limit`` characters."""
    return " ".join(str(error).split())[:limit]


def _finish(cfg, bundle, model, started: float | None = None) -> float:
    """Write the run folder, log it, print its line: the same for every kind of job.

    ``started`` is when the job's work began (``time.time()``): the run's start in MLflow."""
    from hydra.core.hydra_config import HydraConfig

    from dochar.report.run_folder import write_run_files
    from dochar.runs.console import console, has_sides, ranking_table, seen_unseen_table
    from dochar.runs.sweep import in_sweep, validation_score
    from dochar.runs.tracking import log_run, mask_passwords, resolve_uri, seal, ui_hint

    hydra_cfg = HydraConfig.get()
    bundle.command = " ".join(["dochar", _SUBCOMMAND[0], *hydra_cfg.overrides.task])
    seal(bundle)
    folder = Path(hydra_cfg.runtime.output_dir) / "run"
    write_run_files(folder, bundle, model)
    uri = resolve_uri(cfg.tracking.uri)
    if cfg.tracking.enabled:
        try:
            log_run(bundle, folder, uri=uri, experiment=str(cfg.tracking.experiment),
                    started=started)
        except Exception as error:  # the store went away during the run: say so, keep the folder
            bundle.save(folder)
            reason = _one_line(error, 300)
            raise DocharError(f"tracking server {uri} failed while logging the run "
                              f"({type(error).__name__}: {mask_passwords(reason)}); the "
                              f"finished run is kept in {folder}") from error
    else:
        bundle.save(folder)
    console.print(ranking_table([bundle], title=f"run {bundle.name}"))
    if has_sides([bundle]):
        console.print(seen_unseen_table([bundle]))
    if cfg.tracking.enabled and not in_sweep():
        console.print(ui_hint(uri, str(cfg.tracking.experiment)), soft_wrap=True)
    console.print(f"run folder: {folder.resolve()}", soft_wrap=True)
    return validation_score(bundle)   # what sweepers optimise: never a test score


def _run_job(cfg) -> float:
    from dochar.data.sources import load_data
    from dochar.data.word_table import table_fingerprint
    from dochar.experiment import run_experiment
    from dochar.runs.sweep import end_killed_jobs, job_claim, skip_if_finished

    started = time.time()
    _check_tracking(cfg)
    with job_claim(cfg):
        end_killed_jobs(cfg)
        done = skip_if_finished(cfg, lambda: table_fingerprint(
            load_data(cfg.data, strict=bool(cfg.strict)).table))
        if done is not None:
            return done
        bundle, model = run_experiment(cfg)
        return _finish(cfg, bundle, model, started)


def _curve_job(cfg) -> float:
    """Learning curve of one system; logged as its full-data run plus curve/<n>/<score>."""
    from dochar.curve import curve_metrics, run_learning_curve
    from dochar.runs.sweep import end_killed_jobs

    started = time.time()
    _check_tracking(cfg)
    end_killed_jobs(cfg)
    full: list = []

    axis = str(cfg.curve.get("axis") or "train_documents")

    def keep_full(bundle, model, point) -> None:
        if point.split.get(axis) is None and not full:
            full.extend([bundle, model])

    seeds = list(cfg.curve.seeds) if cfg.curve.get("seeds") else None
    frame = run_learning_curve(cfg, list(cfg.curve.sizes), seeds=seeds, on_run=keep_full,
                               axis=axis)
    bundle, model = full
    print(f"learning curve of {bundle.name} ({axis}):")
    columns = ["n_train_documents", "documents_per_layout", "seed", "macro_f1", "macro_f1_low",
               "macro_f1_high", "entity_f1", "seen/macro_f1", "unseen/macro_f1",
               "train_seconds"]
    print(frame[[c for c in columns if frame[c].notna().any()]].round(3)
          .to_string(index=False))
    bundle.metrics.update(curve_metrics(frame))
    bundle.tables["learning_curve"] = frame.set_index("system")
    return _finish(cfg, bundle, model, started)


def _graph_stats_job(cfg) -> None:
    from dochar import graphs
    from dochar.data.sources import load_data
    from dochar.data.word_table import iter_pages
    from dochar.graphs.candidates import CandidateOptions
    from dochar.graphs.diagnostics import candidate_recall, format_stats, graph_stats

    data = load_data(cfg.data, strict=bool(cfg.strict))
    builder = graphs.from_config(cfg.graph, cfg.get("edges"))
    pages = list(iter_pages(data.table))
    stats = graph_stats(pages, builder, list(cfg.data.table_labels))
    print(f"graph builder {cfg.graph.name} on {cfg.data.name}:")
    print(format_stats(stats))
    candidates = cfg.task.get("candidates") or {}
    options = CandidateOptions(str(candidates.get("source", "graph")),
                               float(candidates.get("max_distance", 0.1)))
    recall = candidate_recall(pages, builder, data.links, options)
    if recall.true_links:
        print(f"  candidate links ({options.source}; share of true links the candidates "
              "can supply):")
        for key, value in recall.to_dict().items():
            print(f"  {key:<28} {value:.4f}" if isinstance(value, float) else
                  f"  {key:<28} {value}")


def _tracebacks() -> bool:
    return os.environ.get("DOCHAR_TRACEBACK") == "1"


def _report_error(command: str, error: DocharError) -> int:
    """One located message on stderr, exit code 2 (``DOCHAR_TRACEBACK=1``: the traceback)."""
    if _tracebacks():
        raise error
    print(f"dochar {command}: error: {error}", file=sys.stderr)
    return 2


def _checked(task):
    """Check the composed config (schemas and every stage's options) before the job loads
    anything; inside a sweep a bad job's config becomes that job's failure, not the sweep's."""
    def job(cfg):
        from dochar.runs.checks import check_config

        check_config(cfg)
        return task(cfg)

    job.__name__ = task.__name__
    job.__module__ = task.__module__
    return job


def _reported(task):
    """Run the job; input and config problems end it with one located message and exit
    code 2."""
    from omegaconf.errors import OmegaConfBaseException

    def job(cfg):
        try:
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

    from dochar.runs.sweep import exit_code, guard_job, lost_job_message

    _SUBCOMMAND[0] = argv[0]
    sys.argv = [f"dochar {argv[0]}", *argv[1:]]
    previous = os.environ.get("HYDRA_FULL_ERROR")
    os.environ["HYDRA_FULL_ERROR"] = "1"    # Hydra re-raises instead of printing and exiting 1
    try:
        _hydra_main(_reported(guard_job(_checked(task))))()
    except SystemExit as stop:
        return int(stop.code or 0)
    except (HydraException, OmegaConfBaseException) as error:
        return _report_error(argv[0], DocharError(config_error_message(error)))
    except Exception as error:
        if (message := lost_job_message(error)) is None:
            raise
        return _report_error(argv[0], DocharError(message))
    finally:
        if previous is None:
            os.environ.pop("HYDRA_FULL_ERROR", None)
        else:
            os.environ["HYDRA_FULL_ERROR"] = previous
    return exit_code()


def _store(uri: str):
    from dochar.runs.store import RunStore

    return RunStore(uri)


def _compare(args: argparse.Namespace) -> int:
    from dochar.runs.compare import compare_runs, format_comparison
    from dochar.runs.store import find_run

    run_a, run_b = (find_run(reference, args.tracking_uri) for reference in (args.run_a, args.run_b))
    try:
        result = compare_runs(run_a, run_b, score=args.score, method=args.method,
                              resamples=args.resamples, seed=args.seed)
    except DocharError:
        raise
    except ValueError as error:   # dochar.runs.compare names the unusable --score or label set
        raise DocharError(str(error)) from error
    print(format_comparison(run_a, run_b, result, args.score or run_a.headline))
    return 0


def _report(args: argparse.Namespace) -> int:
    from dochar.report import write_report
    from dochar.runs.store import RunLookupError, find_run

    if args.runs:
        bundles = [find_run(reference, args.tracking_uri) for reference in args.runs]
        name = args.experiment or "selected-runs"
    else:
        if not args.experiment:
            raise RunLookupError("dochar report: name the runs (--runs) or an --experiment")
        store = _store(args.tracking_uri)
        sweep = store.latest_sweep(args.experiment) if args.sweep == "latest" else args.sweep
        bundles = store.bundles(args.experiment, sweep=sweep)
        name = args.experiment
        if not bundles:
            raise RunLookupError(f"no finished dochar runs in experiment {args.experiment!r}"
                                 + (f", sweep {sweep!r}" if sweep else "")
                                 + f" at {args.tracking_uri}")
    out = Path(args.out or Path("reports") / f"{name}.html")
    path = write_report(bundles, out, title=f"dochar — {name}",
                        score=args.score or bundles[0].headline,
                        reference=args.reference, reference_model=args.reference_model)
    print(f"report written: {path.resolve()}")
    return 0


def _runs(args: argparse.Namespace) -> int:
    from dochar.runs.console import runs_table

    tags = dict(item.split("=", 1) for item in args.tag or [])
    frame = _store(args.tracking_uri).listing(args.experiment, tags)
    if args.limit:
        frame = frame.tail(args.limit)
    runs_table(frame)
    return 0


def _parser() -> argparse.ArgumentParser:
    from dochar.runs.tracking import resolve_uri

    parser = SuggestingParser(prog="dochar", description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    commands = parser.add_subparsers(dest="command", required=True)
    for name in ("run", "curve", "graph-stats"):
        commands.add_parser(name, help=f"config choices follow (dochar {name} --help)",
                            add_help=False)
    for name, what in OWN_PARSERS_HELP.items():
        commands.add_parser(name, help=f"{what} (dochar {name} --help)", add_help=False)

    def tracked(sub: argparse.ArgumentParser, score: bool = True) -> None:
        sub.add_argument("--experiment", help="MLflow experiment name")
        sub.add_argument("--tracking-uri", default=resolve_uri(), help="MLflow store")
        if score:
            sub.add_argument("--score", default=None,
                             help="metric to rank/compare by (default: the runs' headline score)")

    compare = commands.add_parser("compare", help="paired comparison of two runs")
    compare.add_argument("run_a", help="run id, its first characters, or a run folder")
    compare.add_argument("run_b", help="run id, its first characters, or a run folder")
    compare.add_argument("--method", choices=["bootstrap", "randomisation"], default="bootstrap")
    compare.add_argument("--resamples", type=int, default=2000)
    compare.add_argument("--seed", type=int, default=0)
    tracked(compare)
    report = commands.add_parser("report", help="static HTML report of an experiment's runs")
    report.add_argument("--runs", nargs="*", help="run ids, prefixes or folders, any "
                        "experiment (default: every finished run of --experiment)")
    report.add_argument("--sweep", help="only the runs of one sweep: its id, or 'latest'")
    report.add_argument("--reference", help="run name to compare every run against")
    report.add_argument("--reference-model", default="random_forest",
                        help="without --reference: the first run of this layer or estimator "
                             "(default random_forest)")
    report.add_argument("--out", help="output HTML path (default reports/<experiment>.html)")
    tracked(report)
    runs = commands.add_parser("runs", help="list the store's runs, newest last")
    runs.add_argument("--tag", action="append", help="KEY=VALUE, e.g. dataset=funsd (repeatable)")
    runs.add_argument("--limit", type=int, default=50, help="show the newest N (0: all)")
    tracked(runs, score=False)
    return parser


HYDRA_JOBS = {"run": _run_job, "curve": _curve_job, "graph-stats": _graph_stats_job}
# commands with their own argument parser: name -> module holding main(argv), and its line
OWN_PARSERS_HELP = {"gate": "CI regression gate", "import": "documents -> word table",
                    "predict": "a saved model labels new documents",
                    "tracking-server": "shared MLflow server"}
OWN_PARSERS = {"import": "dochar.data.import_command", "predict": "dochar.predict",
               "gate": "dochar.gate.command", "tracking-server": "dochar.runs.server"}


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if argv and argv[0] in HYDRA_JOBS and {"-h", "--help"} & set(argv[1:]):
        from dochar.runs.run_help import help_text

        print(help_text(argv[0]), end="")
        return 0
    if argv and argv[0] in HYDRA_JOBS:
        return _hydra_command(HYDRA_JOBS[argv[0]], argv)
    try:
        if argv and argv[0] in OWN_PARSERS:
            return importlib.import_module(OWN_PARSERS[argv[0]]).main(argv[1:])
        args = _parser().parse_args(argv)
        handlers = {"compare": _compare, "report": _report, "runs": _runs}
        return handlers[args.command](args)
    except DocharError as error:
        return _report_error(argv[0] if argv else "", error)


if __name__ == "__main__":
    raise SystemExit(main())
