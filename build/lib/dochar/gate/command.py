"""`dochar gate`: fail a CI build when a fixed-seed reference experiment scores worse than its
committed baseline, and not when it only scores differently by noise.

    dochar gate [--config NAME|FILE] [--update] [--from-run FOLDER|RUN_ID] [--tracking-uri URI]
                [--out DIR] [--junit FILE] [--summary FILE] [key=value ...]

The gate config (``configs/gate/<NAME>.yaml``, default ``reference``) names the experiment
overrides of the reference run, the baseline file and the tolerances. ``key=value`` arguments
whose first key is a gate setting (``tolerance.macro_f1=0.01``, ``baseline=...``) change the gate
config; any other is one more experiment override (``seed=1``, ``model=attention``).

Exit codes:

    0  pass: no gated metric fell by more than its tolerance (or ``--update`` wrote the baseline)
    1  regression: at least one gated metric fell too far, or is missing from the run
    2  could not run: bad gate or experiment config, missing data or baseline, failed run,
       or a run on other data than the baseline's (``data_check: error``)

Files: ``<out>/junit.xml`` (one testcase per metric), ``<out>/summary.md`` (markdown table),
``<out>/run/`` (the reference run's folder, readable again with ``--from-run``); ``<out>``
defaults to ``reports/gate/<NAME>``. Paths in the gate config are relative to the working
directory. ``--update`` rewrites the baseline and prints what changed.
"""

from __future__ import annotations

import argparse
import shlex
import sys
import time
import traceback
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from omegaconf import OmegaConf
from omegaconf.errors import OmegaConfBaseException

from dochar.errors import SuggestingParser
from dochar.config import CONFIG_DIR
from dochar.errors import DocharError
from dochar.gate.baseline import (
    Baseline,
    config_differences,
    describe_update,
    library_versions,
    machine_differences,
    machine_info,
    run_scores,
    version_differences,
)
from dochar.gate.outputs import (
    COULD_NOT_RUN,
    OUTCOMES,
    PASS,
    REGRESSION,
    GateOutcome,
    diff_table,
    write_outputs,
)
from dochar.gate.rules import CLASS_PREFIX, GateConfigError, Tolerances, compare
from dochar.runs.bundle import RunBundle
from dochar.runs.tracking import computed_config

GATE_KEYS = ("name", "baseline", "overrides", "tolerance", "data_check")
DATA_CHECKS = ("error", "warn")
_MAX_CONFIG_NOTES = 12


class GateError(RuntimeError):
    """The gate could not produce a comparison (exit code 2); the message says why."""


@dataclass
class GateSettings:
    name: str
    baseline: Path
    overrides: list[str]
    tolerances: Tolerances
    data_check: str
    source: Path


def config_dir() -> Path:
    return CONFIG_DIR


def gate_config_file(name: str) -> Path:
    """A gate name resolves to ``configs/gate/<name>.yaml``; a path to a YAML file is used as is."""
    path = Path(name)
    if path.suffix in (".yaml", ".yml"):
        if not path.is_file():
            raise GateConfigError(f"gate config {path}: no such file")
        return path
    path = config_dir() / "gate" / f"{name}.yaml"
    if not path.is_file():
        known = sorted(p.stem for p in (config_dir() / "gate").glob("*.yaml"))
        raise GateConfigError(f"no gate config named {name!r} ({path} does not exist); "
                              f"known: {known}")
    return path


def split_settings(arguments: Sequence[str]) -> tuple[list[str], list[str]]:
    """(gate settings, experiment overrides) from ``key=value`` arguments."""
    gate, experiment = [], []
    for argument in arguments:
        if "=" not in argument:
            raise GateConfigError(f"argument {argument!r}: expected key=value")
        key = argument.split("=", 1)[0].lstrip("+~")
        (gate if key.split(".", 1)[0] in GATE_KEYS else experiment).append(argument)
    return gate, experiment


def load_settings(name: str, gate_settings: Sequence[str] = (),
                  experiment_overrides: Sequence[str] = ()) -> GateSettings:
    path = gate_config_file(name)
    try:
        loaded = OmegaConf.merge(OmegaConf.load(path), OmegaConf.from_dotlist(list(gate_settings)))
        data: Any = OmegaConf.to_container(loaded, resolve=True)
    except (OmegaConfBaseException, OSError, ValueError) as error:
        raise GateConfigError(f"gate config {path}: {error}") from None
    if not isinstance(data, Mapping):
        raise GateConfigError(f"gate config {path}: expected a mapping at the top level")
    unknown = sorted(set(data) - set(GATE_KEYS))
    if unknown:
        raise GateConfigError(f"gate config {path}: unknown key(s) {unknown}; "
                              f"known keys: {list(GATE_KEYS)}")
    overrides = data.get("overrides") or []
    if not isinstance(overrides, list) or not all(isinstance(o, str) for o in overrides):
        raise GateConfigError(f"gate config {path}: 'overrides' must be a list of key=value "
                              f"strings, got {overrides!r}")
    data_check = data.get("data_check", "error")
    if data_check not in DATA_CHECKS:
        raise GateConfigError(f"gate config {path}: data_check must be one of "
                              f"{list(DATA_CHECKS)}, got {data_check!r}")
    if not data.get("baseline"):
        raise GateConfigError(f"gate config {path}: 'baseline' (path of the baseline file) "
                              f"is required")
    tolerances = Tolerances.from_config(data.get("tolerance") or {}, f"gate config {path}: "
                                                                     f"tolerance")
    return GateSettings(name=str(data.get("name") or path.stem), baseline=Path(data["baseline"]),
                        overrides=[*overrides, *experiment_overrides], tolerances=tolerances,
                        data_check=data_check, source=path)


def run_reference(overrides: Sequence[str]) -> RunBundle:
    """Compose the project's config with ``overrides`` and run it in this process."""
    from hydra import compose, initialize_config_dir

    try:
        with initialize_config_dir(config_dir=str(config_dir()), version_base="1.3",
                                   job_name="dochar_gate"):
            cfg = compose("config", overrides=list(overrides))
    except Exception as error:  # hydra raises several unrelated types for one cause: bad config
        raise GateError(f"bad experiment config {list(overrides)}: {error}") from error
    from dochar.runs.checks import check_config
    from dochar.experiment import run_experiment

    try:
        check_config(cfg)
    except DocharError as error:
        raise GateError(f"bad experiment config {list(overrides)}: {error}") from error

    try:
        bundle, _ = run_experiment(cfg)
    except Exception as error:  # any failure of the run leaves nothing to compare
        raise GateError(f"reference run failed: {type(error).__name__}: {error}") from error
    bundle.command = shlex.join(["dochar", "run", *overrides])
    return bundle


def load_run(reference: str, tracking_uri: str | None) -> tuple[RunBundle, str]:
    """A finished run: its folder (or the ``dochar run`` output folder around it), or a run of
    the tracking store by id or id prefix, from any experiment."""
    from dochar.runs.store import find_run, run_folder
    from dochar.runs.tracking import resolve_uri

    uri = resolve_uri(tracking_uri)
    try:
        bundle = find_run(reference, uri)
    except (OSError, ValueError, KeyError) as error:
        raise GateError(f"--from-run {reference}: not a readable run folder nor a run of {uri} "
                        f"({error})") from error
    folder = run_folder(reference)
    return bundle, (f"run folder {folder}" if folder is not None
                    else f"run {bundle.run_id} of {uri}")


def run_overrides(bundle: RunBundle) -> list[str]:
    words = shlex.split(bundle.command) if bundle.command else []
    return words[2:] if words[:2] == ["dochar", "run"] else words


def check_tolerance_classes(tolerances: Tolerances, baseline: Baseline) -> None:
    classes = {m[len(CLASS_PREFIX):] for m in baseline.scores if m.startswith(CLASS_PREFIX)}
    unknown = sorted(set(tolerances.classes) - classes)
    if unknown:
        raise GateConfigError(f"tolerance.classes names {unknown}, not classes of the baseline "
                              f"({sorted(classes)})")


def notes_for(outcome: GateOutcome, baseline: Baseline, bundle: RunBundle) -> list[str]:
    notes = []
    if all(c.change == 0.0 for c in outcome.checks) and outcome.checks:
        notes.append("every gated score equals the baseline bit for bit")
    better = [c.metric for c in outcome.checks if c.verdict == "better"]
    if better:
        notes.append(f"{len(better)} metric(s) above the baseline ({', '.join(better)}); "
                     f"`dochar gate --update` would raise the bar")
    if not baseline.libraries:
        notes.append("the baseline records no library versions; `dochar gate --update` adds them")
    moved = version_differences(baseline.libraries, library_versions())
    if moved:
        notes.append("library versions differ from the baseline's (scores may move by more than "
                     "noise): " + "; ".join(moved))
    if not baseline.machine:
        notes.append("the baseline records no machine; `dochar gate --update` adds it")
    elif other := machine_differences(baseline.machine, machine_info()):
        notes.append("this machine is not the baseline's (" + "; ".join(other) + "): scores "
                     "are bit-identical only on the same CPU, libraries and thread count; the "
                     "tolerances cover the difference measured between thread counts "
                     "(docs/crash-safety.md)")
    differences = config_differences(baseline.experiment_config, computed_config(bundle.config))
    if differences:
        shown = differences[:_MAX_CONFIG_NOTES]
        more = len(differences) - len(shown)
        notes.append("the run's config differs from the baseline's: " + "; ".join(shown)
                     + (f"; and {more} more" if more else ""))
    return notes


def gate(settings: GateSettings, bundle: RunBundle, baseline: Baseline) -> GateOutcome:
    """Compare one run with the baseline; raise GateError if they are not comparable."""
    outcome = GateOutcome(name=settings.name, code=PASS, mode=settings.tolerances.mode,
                          baseline_path=str(settings.baseline))
    fingerprint = str(bundle.tags.get("data_fingerprint", ""))
    if fingerprint != baseline.data_fingerprint:
        message = (f"the run's data (fingerprint {fingerprint or 'none'}) is not the baseline's "
                   f"({baseline.data_fingerprint or 'none'}): its scores are not comparable; if "
                   f"the data change is deliberate, rerun with --update")
        if settings.data_check == "error":
            raise GateError(message)
        outcome.notes.append("warning: " + message)
    outcome.checks = compare(baseline.scores,
                             run_scores(bundle, list(settings.tolerances.headline)),
                             settings.tolerances)
    outcome.code = REGRESSION if outcome.failures else PASS
    outcome.notes += notes_for(outcome, baseline, bundle)
    outcome.properties = {"data_fingerprint": fingerprint, "run": bundle.name,
                          "baseline_commit": baseline.git_commit,
                          "seed": bundle.tags.get("seed", "")}
    return outcome


def _parser() -> argparse.ArgumentParser:
    parser = SuggestingParser(prog="dochar gate", description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--config", default="reference",
                        help="gate config: a name in configs/gate/ or a YAML file")
    parser.add_argument("--update", action="store_true",
                        help="rewrite the baseline from this run and print what changed")
    parser.add_argument("--from-run", metavar="FOLDER|RUN_ID",
                        help="gate a finished run instead of running the reference experiment")
    parser.add_argument("--tracking-uri", help="MLflow store holding --from-run's run id")
    parser.add_argument("--out", type=Path, help="output folder (default reports/gate/<name>)")
    parser.add_argument("--junit", type=Path, help="JUnit XML path (default <out>/junit.xml)")
    parser.add_argument("--summary", type=Path, help="markdown path (default <out>/summary.md)")
    parser.add_argument("settings", nargs="*", metavar="key=value",
                        help="gate settings or extra experiment overrides")
    return parser


def _obtain_run(args: argparse.Namespace, settings: GateSettings,
                experiment: Sequence[str], out: Path) -> tuple[RunBundle, str, list[str]]:
    if args.from_run:
        if experiment:
            raise GateConfigError(f"experiment overrides {list(experiment)} need a reference run; "
                                  f"--from-run reads a finished one")
        bundle, source = load_run(args.from_run, args.tracking_uri)
        return bundle, source, run_overrides(bundle)
    print(f"dochar gate {settings.name}: running the reference experiment "
          f"({' '.join(settings.overrides)})", flush=True)
    bundle = run_reference(settings.overrides)
    bundle.save(out / "run")
    return bundle, "reference run", list(settings.overrides)


def _update(settings: GateSettings, bundle: RunBundle, source: str,
            overrides: list[str]) -> int:
    import subprocess

    from dochar.runs.tracking import git_commit

    try:
        status = subprocess.run(["git", "status", "--porcelain", "--untracked-files=no"],
                                capture_output=True, text=True, check=True).stdout
        dirty: bool | None = bool(status.strip())
    except (OSError, subprocess.CalledProcessError):
        dirty = None
    old = None
    if settings.baseline.is_file():
        old = Baseline.read(settings.baseline)
    new = Baseline.from_run(settings.name, bundle, overrides=overrides, source=source,
                            git_commit=git_commit(), git_dirty=dirty,
                            headline=list(settings.tolerances.headline))
    lines = describe_update(old, new)
    new.write(settings.baseline)
    print(f"dochar gate {settings.name}: baseline {settings.baseline} "
          f"{'updated' if old else 'created'}:")
    print("\n".join(f"  {line}" for line in lines))
    return PASS


def _could_not_run(outcome: GateOutcome, error: BaseException, message: str) -> None:
    outcome.code, outcome.error = COULD_NOT_RUN, message
    outcome.error_detail = "".join(traceback.format_exception(error))
    print(f"dochar gate: could not run: {message}", file=sys.stderr)


def main(argv: Sequence[str] | None = None) -> int:
    args = _parser().parse_args(list(sys.argv[1:] if argv is None else argv))
    started = time.perf_counter()
    outcome = GateOutcome(name=Path(args.config).stem, code=COULD_NOT_RUN)
    out = args.out
    try:
        gate_settings, experiment = split_settings(args.settings)
        settings = load_settings(args.config, gate_settings, experiment)
        outcome.name, outcome.mode = settings.name, settings.tolerances.mode
        outcome.baseline_path = str(settings.baseline)
        out = out or Path("reports") / "gate" / settings.name
        baseline = None if args.update else Baseline.read(settings.baseline)
        if baseline is not None:
            check_tolerance_classes(settings.tolerances, baseline)
        bundle, source, overrides = _obtain_run(args, settings, experiment, out)
        if args.update:
            return _update(settings, bundle, source, overrides)
        outcome = gate(settings, bundle, baseline)
    except (GateError, GateConfigError, OSError) as error:
        _could_not_run(outcome, error, str(error))
    except Exception as error:  # exit code 1 must mean a regression, never a crash
        _could_not_run(outcome, error, f"unexpected {type(error).__name__}: {error}")
        traceback.print_exception(error, file=sys.stderr)
    outcome.seconds = time.perf_counter() - started
    if outcome.code != COULD_NOT_RUN:
        from dochar.runs.console import console

        console.print(diff_table(outcome))
        for note in outcome.notes:
            print(f"note: {note}")
    out = out or Path("reports") / "gate" / outcome.name
    try:
        written = write_outputs(outcome, args.junit or out / "junit.xml",
                                args.summary or out / "summary.md")
    except OSError as error:
        print(f"dochar gate: could not write the gate's files: {error}", file=sys.stderr)
        return COULD_NOT_RUN
    print(f"dochar gate {outcome.name}: {OUTCOMES[outcome.code]} (exit {outcome.code}); "
          f"wrote {', '.join(map(str, written))}")
    return outcome.code


if __name__ == "__main__":
    raise SystemExit(main())
