"""`make mutate`: mutmut over the modules of mutation/targets.py, summed up in a report.

Steps: copy the project's tracked sources into a scratch folder (``.mutation/<mode>/``, wiped
first so no result is reused), write mutmut's settings there, run ``mutmut run``, then read
every mutant's outcome back (``mutmut results --all true``) and the diff of each survivor
(``mutmut show``). A survivor whose diff matches an entry of ``mutation/equivalent.toml`` is
an equivalent mutant (it cannot change any output; the entry says why) and leaves the count;
every other survivor is listed in the report with its diff, as a test to write.

Kill rate = killed / (mutants - equivalent - not run). Mutants that no selected test reaches
count as not killed; mutants of an interrupted run that were never tried count as not run
(``--again`` goes on with a run folder after tests were added: it refreshes the folder's
tests and unmutated code from the checkout and runs every mutant not yet killed again,
but those marked equivalent;
``--report-only`` writes the report of run folders as they stand, e.g. after an
interruption; given several ``--workdir`` folders, each of one module's separate run, it merges
them into one report; ``--carry-over REPORT`` adds, for the target modules no folder holds, the
verdicts of a committed earlier report, provided the module is unchanged since the commit that
wrote it: an hours-long run is not repeated for code it has already judged). ``--min-rate``
makes the exit status 1 when a module falls below it.

Run: ``python -m mutation.run [--smoke] [--modules M ...] [--out reports/mutation.md]
[--workdir DIR] [--workers N] [--min-rate P]``; merge separate runs with ``python -m
mutation.run --report-only --workdir DIR1 DIR2 ...``.
"""

from __future__ import annotations

import argparse
import datetime
import os
import re
import shutil
import subprocess
import sys
import tomllib
from collections import Counter, defaultdict
from dataclasses import dataclass, field
from pathlib import Path

from mutation.targets import DESELECTED, FULL, SMOKE

ROOT = Path(__file__).resolve().parents[1]
EQUIVALENTS = ROOT / "mutation" / "equivalent.toml"
PLUGIN = ROOT / "mutation" / "fastest_first.py"   # copied beside the mutants, where tests run
COPIED = ("dochar", "tests", "configs", "data_synth", "benchmarks", "pyproject.toml", "setup.py")
STATUSES = ("killed", "survived", "no tests", "timeout", "suspicious", "skipped", "segfault")


@dataclass
class Equivalent:
    module: str
    original: str
    mutated: str
    reason: str


@dataclass
class ModuleResult:
    counts: Counter = field(default_factory=Counter)
    survivors: list[tuple[str, str]] = field(default_factory=list)   # (mutant, diff)
    equivalent: list[tuple[str, str]] = field(default_factory=list)  # (mutant, reason)

    @property
    def total(self) -> int:
        return sum(self.counts.values())

    def rate(self) -> float:
        scored = self.total - len(self.equivalent) - self.counts["not checked"]
        return self.counts["killed"] / scored if scored else 1.0


def load_equivalents(path: Path) -> list[Equivalent]:
    data = tomllib.loads(path.read_text(encoding="utf-8")) if path.exists() else {}
    return [Equivalent(**entry) for entry in data.get("equivalent", [])]


def prepare(workdir: Path, targets: dict[str, list[str]], isolation: str) -> None:
    """A scratch copy of the tracked sources plus mutmut's settings for these targets."""
    shutil.rmtree(workdir, ignore_errors=True)
    workdir.mkdir(parents=True)
    _copy_tracked(workdir, skip=set())
    _write_settings(workdir, targets, isolation)
    _add_plugin(workdir)


def _add_plugin(workdir: Path) -> None:
    """The test-ordering plugin in mutmut's ``mutants`` folder (the tests' working folder and
    first import path) under a name no project module has."""
    (workdir / "mutants").mkdir(exist_ok=True)
    shutil.copy2(PLUGIN, workdir / "mutants" / PLUGIN.name)


def refresh(workdir: Path, targets: dict[str, list[str]], isolation: str) -> None:
    """Bring a run folder's tests and unmutated code up to the checkout, keeping its mutants:
    the mutated modules must be those the run was made of, or its verdicts would be of other
    code."""
    if not (workdir / "mutants").is_dir():
        raise SystemExit(f"--again: {workdir} holds no mutmut run; run without --again first")
    changed = [module for module in targets
               if (workdir / module).read_bytes() != (ROOT / module).read_bytes()]
    if changed:
        raise SystemExit(f"--again: {changed} changed since the run in {workdir}; "
                         "run afresh (without --again)")
    _copy_tracked(workdir, skip=set(targets))
    _write_settings(workdir, targets, isolation)
    _add_plugin(workdir)


def _copy_tracked(workdir: Path, skip: set[str]) -> None:
    tracked = subprocess.run(["git", "ls-files", *COPIED], cwd=ROOT, check=True,
                             capture_output=True, text=True).stdout.split()
    for name in tracked:
        if name in skip:
            continue
        target = workdir / name
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy2(ROOT / name, target)


def _write_settings(workdir: Path, targets: dict[str, list[str]], isolation: str) -> None:
    """The checkout's pyproject.toml plus mutmut's settings (the same for the same targets,
    so that mutmut keeps the verdicts of a run it goes on with)."""
    tests = list(dict.fromkeys(t for paths in targets.values() for t in paths))
    settings = "\n".join([
        "", "[tool.mutmut]",
        'source_paths = ["dochar"]',
        f"only_mutate = {_toml_list(targets)}",
        f"also_copy = {_toml_list(['configs', 'data_synth', 'benchmarks', 'setup.py'])}",
        f"pytest_add_cli_args_test_selection = {_toml_list(tests)}",
        "pytest_add_cli_args = " + _toml_list(["-p", "no:cacheprovider", "-m", "not slow", "-q",
                                               *(f"--deselect={t}" for t in DESELECTED)]),
        f'process_isolation = "{isolation}"',
        "use_git_change_detection = false", ""])
    pyproject = (ROOT / "pyproject.toml").read_text(encoding="utf-8")
    (workdir / "pyproject.toml").write_text(pyproject + settings, encoding="utf-8")


def _toml_list(items) -> str:
    return "[" + ", ".join(f'"{item}"' for item in items) + "]"


def mutmut(workdir: Path, *args: str, log: Path | None = None) -> str:
    """Run a mutmut command in ``workdir``; with ``log``, its output goes to that file."""
    # the scratch copy sits elsewhere, so the tests' default dataset folder (beside the
    # checkout) is passed on explicitly: a FUNSD test that skipped would leave its mutants
    # reached by no test
    datasets = os.environ.get("DOCHAR_DATASETS", str(ROOT.parent / "shared" / "datasets"))
    env = {**os.environ, "OMP_NUM_THREADS": "1", "PYTHONPATH": "", "DOCHAR_DATASETS": datasets,
           "PYTEST_ADDOPTS": f"-p {PLUGIN.stem}"}
    command = [sys.executable, "-m", "mutmut", *args]
    if log is not None:
        with open(log, "w", encoding="utf-8") as handle:
            code = subprocess.run(command, cwd=workdir, env=env, stdout=handle,
                                  stderr=subprocess.STDOUT).returncode
        if code != 0:
            tail = log.read_text(encoding="utf-8", errors="replace")[-3000:]
            raise SystemExit(f"{' '.join(command)} failed ({code}); end of {log}:\n{tail}")
        return ""
    done = subprocess.run(command, cwd=workdir, env=env, capture_output=True, text=True)
    if done.returncode != 0:
        raise SystemExit(f"{' '.join(command)} failed ({done.returncode}):\n"
                         f"{done.stdout[-3000:]}\n{done.stderr[-3000:]}")
    return done.stdout


def not_killed(workdir: Path, targets: dict[str, list[str]],
               equivalents: list[Equivalent]) -> list[str]:
    """The mutants of a run folder that no test has killed yet (survived, untried, ...),
    without the survivors marked equivalent: no test can kill those."""
    found = (re.match(r"\s*(\S+): (.+)$", line)
             for line in mutmut(workdir, "results", "--all", "true").splitlines())
    return [mutant for mutant, status in (match.groups() for match in found if match)
            if status != "killed" and not (status == "survived" and equivalent_reason(
                module_of(mutant, list(targets)), mutmut(workdir, "show", mutant), equivalents))]


def equivalent_reason(module: str, diff: str, equivalents: list[Equivalent]) -> str | None:
    """Why the mutant of this diff is equivalent, or None when no entry matches it."""
    removed, added = changed_lines(diff)
    return next((e.reason for e in equivalents if e.module == module
                 and e.original in removed and e.mutated in added), None)


def module_of(mutant: str, modules: list[str]) -> str:
    for module in modules:
        if mutant.startswith(module.removesuffix(".py").replace("/", ".") + "."):
            return module
    raise ValueError(f"mutant {mutant} belongs to no target module")


def changed_lines(diff: str) -> tuple[str, str]:
    """The removed and the added lines of a mutant's diff, each joined and stripped."""
    lines = diff.splitlines()
    removed = " ".join(l[1:].strip() for l in lines if l.startswith("-") and not l.startswith("---"))
    added = " ".join(l[1:].strip() for l in lines if l.startswith("+") and not l.startswith("+++"))
    return removed, added


def collect(workdir: Path, targets: dict[str, list[str]],
            equivalents: list[Equivalent]) -> dict[str, ModuleResult]:
    results: dict[str, ModuleResult] = defaultdict(ModuleResult)
    modules = list(targets)
    for line in mutmut(workdir, "results", "--all", "true").splitlines():
        match = re.match(r"\s*(\S+): (.+)$", line)
        if not match:
            continue
        mutant, status = match.groups()
        result = results[module_of(mutant, modules)]
        result.counts[status] += 1
        if status != "survived":
            continue
        diff = mutmut(workdir, "show", mutant)
        reason = equivalent_reason(module_of(mutant, modules), diff, equivalents)
        if reason is None:
            result.survivors.append((mutant, diff))
        else:
            result.equivalent.append((mutant, reason))
    return {module: results[module] for module in modules if module in results}


def merged(parts: list[dict[str, ModuleResult]], targets: dict[str, list[str]]
           ) -> dict[str, ModuleResult]:
    """One result per module, in the order of ``targets``; a module found in two run folders is
    an error (which of the two runs would count is not for the report to guess)."""
    found: dict[str, ModuleResult] = {}
    for part in parts:
        twice = sorted(set(found) & set(part))
        if twice:
            raise SystemExit(f"modules {twice} are in more than one --workdir")
        found.update(part)
    return {module: found[module] for module in targets if module in found}


def stale_modules(parts: dict[Path, list[str]]) -> list[str]:
    """Modules whose run folder (folder -> the modules run there) holds another version than
    the checkout: their verdicts are of that older code, and the report says so."""
    return [module for workdir, modules in parts.items() for module in modules
            if (workdir / module).read_bytes() != (ROOT / module).read_bytes()]


def carried_over(path: Path, modules: list[str], equivalents: list[Equivalent],
                 root: Path = ROOT) -> tuple[dict[str, ModuleResult], str]:
    """The results of ``modules`` as the committed report ``path`` gives them (table row,
    survivors' diffs, marked equivalents), and the time that report was generated. Each module
    must be unchanged in the checkout since the commit that last wrote the report, and judged
    there on the code it now has; survivors are matched against today's equivalent.toml."""
    relative = str(path.resolve().relative_to(root.resolve()))
    commit = _git(root, "log", "-1", "--format=%H", "--", relative).strip()
    if not commit:
        raise SystemExit(f"--carry-over: {relative} has no commit; commit the report first")
    text = _git(root, "show", f"{commit}:{relative}")
    made = re.search(r"^Generated (.+? UTC)", text, re.MULTILINE)
    rows = {match[1]: (match[2], [int(v) for v in match[3].split(" | ")])
            for match in re.finditer(r"^\| (\S+\.py)( \([^)]*\))? \| ([\d |]+?) \| [\d.]+% \|$",
                                     text, re.MULTILINE)}
    survivors = re.findall(r"^### (\S+)\n\n```diff\n(.*?)\n```$", text, re.MULTILINE | re.DOTALL)
    marked = re.findall(r"^- `(\S+)`: (.+)$", text, re.MULTILINE)
    results = {}
    for module in modules:
        if module not in rows or (rows[module][0] or "").startswith(" (run on an older"):
            raise SystemExit(f"--carry-over: {relative} holds no verdicts of {module} on its "
                             f"code; run it (python -m mutation.run --modules {module})")
        if subprocess.run(["git", "diff", "--quiet", commit, "--", module], cwd=root).returncode:
            raise SystemExit(f"--carry-over: {module} changed since {relative} was written "
                             f"(commit {commit[:10]}); run it afresh")
        total, killed, survived, equivalent, no_tests, timeout, not_run = rows[module][1]
        result = ModuleResult(counts=Counter({"killed": killed, "survived": survived + equivalent,
                                              "no tests": no_tests, "timeout": timeout,
                                              "not checked": not_run}))
        result.counts["other"] = total - sum(result.counts.values())
        prefix = module.removesuffix(".py").replace("/", ".") + "."
        own = [(m, d) for m, d in survivors if m.startswith(prefix)]
        result.equivalent = [(m, r) for m, r in marked if m.startswith(prefix)]
        if len(own) != survived or len(result.equivalent) != equivalent:
            raise SystemExit(f"--carry-over: {relative}: the row of {module} does not match "
                             f"its listed survivors and equivalents")
        for mutant, diff in own:
            reason = equivalent_reason(module, diff, equivalents)
            if reason is None:
                result.survivors.append((mutant, "\n" + diff))   # the report drops line one
            else:
                result.equivalent.append((mutant, reason))
        results[module] = result
    return results, made[1] if made else commit[:10]


def _git(root: Path, *args: str) -> str:
    return subprocess.run(["git", *args], cwd=root, check=True, capture_output=True,
                          text=True).stdout


def report(results: dict[str, ModuleResult], command: str, mode: str,
           stale: list[str] = (), carried: dict[str, str] | None = None) -> str:
    lines = [f"# Mutation testing ({mode})", "",
             f"Generated {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC by `{command}` "
             f"(mutmut). Kill rate = killed / (mutants - equivalent - not run).", "",
             "| module | mutants | killed | survived | equivalent | no tests | timeout | not run | "
             "kill rate |", "| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |"]
    total = ModuleResult()
    for module, result in results.items():
        note = (" (run on an older version of the module)" if module in stale else
                f" (carried over from the report of {carried[module]}; module unchanged since)"
                if module in (carried or {}) else "")
        lines.append(_row(module + note, result))
        total.counts.update(result.counts)
        total.survivors += result.survivors
        total.equivalent += result.equivalent
    lines += [_row("**all**", total), "",
              f"Surviving mutants (not marked equivalent): {len(total.survivors)}", ""]
    for module, result in results.items():
        for mutant, diff in result.survivors:
            lines += [f"### {mutant}", "", "```diff", *diff.splitlines()[1:], "```", ""]
    if total.equivalent:
        lines += ["## Marked equivalent (mutation/equivalent.toml)", ""]
        lines += [f"- `{mutant}`: {reason}" for result in results.values()
                  for mutant, reason in result.equivalent]
    return "\n".join(lines) + "\n"


def _row(name: str, result: ModuleResult) -> str:
    c = result.counts
    survived = c["survived"] - len(result.equivalent)
    return (f"| {name} | {result.total} | {c['killed']} | {survived} | {len(result.equivalent)} "
            f"| {c['no tests']} | {c['timeout']} | {c['not checked']} "
            f"| {100 * result.rate():.1f}% |")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m mutation.run", description=__doc__)
    parser.add_argument("--smoke", action="store_true", help="one small module, few mutants")
    parser.add_argument("--modules", nargs="+", default=None,
                        help="only these modules of the full run (paths as in targets.py)")
    parser.add_argument("--out", type=Path, default=None)
    parser.add_argument("--workdir", type=Path, nargs="+", default=None,
                        help="the run folder (default .mutation/<mode>); several with "
                             "--report-only: one report of their modules")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--again", action="store_true",
                        help="go on with the run in --workdir: its tests and unmutated code "
                             "refreshed from the checkout, every mutant not killed run again")
    parser.add_argument("--report-only", action="store_true",
                        help="no run: report the mutants of --workdir as they stand")
    parser.add_argument("--carry-over", type=Path, default=None, metavar="REPORT",
                        help="with --report-only: target modules no --workdir holds take their "
                             "verdicts from this committed report, if unchanged since")
    parser.add_argument("--min-rate", type=float, default=None,
                        help="exit 1 when a module's kill rate (percent) is below this")
    args = parser.parse_args(argv)
    mode = "smoke" if args.smoke else "full"
    targets = SMOKE if args.smoke else FULL
    if args.modules:
        unknown = sorted(set(args.modules) - set(FULL))
        if unknown:
            parser.error(f"--modules {unknown}: not in mutation/targets.py FULL")
        targets = {module: FULL[module] for module in args.modules}
    workdirs = args.workdir or [ROOT / ".mutation" / mode]
    if len(workdirs) > 1 and not args.report_only:
        parser.error("several --workdir folders only with --report-only")
    if args.carry_over and not args.report_only:
        parser.error("--carry-over only with --report-only")
    out = args.out or ROOT / "reports" / ("mutation-smoke.md" if args.smoke else "mutation.md")
    if not args.report_only:
        # the smoke test loads no torch, so its mutants fork straight from mutmut's process;
        # torch is not fork-safe, so the full run forks them from a server that never ran it
        workdir = workdirs[0]
        isolation = "fork" if args.smoke else "forkserver"
        again = (not_killed(workdir, targets, load_equivalents(EQUIVALENTS)) if args.again
                 else [])
        (refresh if args.again else prepare)(workdir, targets, isolation)
        log = workdir / "mutmut-run.log"
        print(f"mutmut over {len(targets)} module(s) in {workdir}"
              f"{f', {len(again)} mutants again' if args.again else ''}; progress in {log}",
              flush=True)
        if not args.again or again:
            mutmut(workdir, "run", "--max-children", str(args.workers), *again, log=log)
    parts = {workdir: collect(workdir, targets, load_equivalents(EQUIVALENTS))
             for workdir in workdirs}
    results = merged(list(parts.values()), targets)
    stale = stale_modules({workdir: list(part) for workdir, part in parts.items()})
    carried: dict[str, str] = {}
    if args.carry_over:
        rest = [module for module in targets if module not in results]
        earlier, made = carried_over(args.carry_over, rest, load_equivalents(EQUIVALENTS))
        carried = dict.fromkeys(earlier, made)
        results = merged([results, earlier], targets)
    command = "python -m mutation.run " + " ".join(argv if argv is not None else sys.argv[1:])
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(report(results, command.strip(), mode, stale, carried), encoding="utf-8")
    survivors = sum(len(r.survivors) for r in results.values())
    print(f"{survivors} surviving mutant(s); report: {out}")
    low = [m for m, result in results.items() if args.min_rate is not None
           and 100 * result.rate() < args.min_rate]
    if low:
        print(f"kill rate below {args.min_rate}%: {low}")
        return 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
