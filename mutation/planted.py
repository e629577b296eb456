"""Re-plant bugs that once went unnoticed and check that the default suite now catches each.

Every bug below slipped past the tests at some point; a test was written for it afterwards.
Mutation testing (mutation/run.py) tries mutants of its own making, so it may never try these
again: this tool plants each one by hand, one at a time, in a scratch copy of the tracked
sources (the checkout is never touched), runs the test named for it and undoes it. A bug is
*caught* when that test fails (pytest exit 1). Each named test must first pass on the unplanted
copy, since a test that fails anyway proves nothing. A bug whose text no longer occurs exactly
once stops the tool: the code moved, and the entry must be moved with it.

Run: ``python -m mutation.planted`` (a Markdown table on stdout; exit 1 when a bug is not
caught).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from mutation.run import COPIED, ROOT


@dataclass(frozen=True)
class Bug:
    name: str
    path: str         # the file, relative to the project root
    old: str          # must occur exactly once in the file
    new: str
    tests: tuple[str, ...]


LINKS, TAGS, ENTITY_TAGS = ("dochar/metrics/links.py", "dochar/metrics/tags.py",
                            "dochar/tasks/entity_tags.py")
COMPARE, CHECKPOINTS, CANDIDATES = ("dochar/runs/compare.py", "dochar/models/checkpoints.py",
                                    "dochar/graphs/candidates.py")
TEST_COMPARE, TEST_RESUME, TEST_CANDIDATES = ("tests/runs/test_compare.py::",
                                              "tests/runs/test_resume.py::",
                                              "tests/graphs/test_candidates.py::")
BUGS: tuple[Bug, ...] = (
    Bug("link precision as TP / (TP + FN)", LINKS,
        "return _safe_divide(tp, tp + fp)", "return _safe_divide(tp, tp + fn)",
        ("tests/metrics/test_links.py::test_precision_and_recall_differ_where_the_counts_say_so",)),
    Bug("chunk precision and recall swapped", TAGS,
        "prf(n_correct.sum(), n_pred.sum(), support.sum())",
        "prf(n_correct.sum(), support.sum(), n_pred.sum())",
        ("tests/metrics/test_tags.py::test_hand_made_page_against_seqeval_strict",)),
    Bug("blank entity ids merge into one chunk", ENTITY_TAGS,
        '(entity == "" or entity != entities[i - 1]', "(entity != entities[i - 1]",
        ("tests/tasks/test_entity_tags.py::"
         "test_words_with_a_blank_entity_id_are_chunks_of_their_own",)),
    Bug("word predictions drop a chunk's last word", ENTITY_TAGS,
        "predicted[order[start:end + 1]] = label\n"
        "                entity[order[start:end + 1]]",
        "predicted[order[start:end]] = label\n"
        "                entity[order[start:end]]",
        ("tests/tasks/test_entity_tags.py::"
         "test_word_predictions_give_every_word_of_a_decoded_chunk_its_label",)),
    Bug("Monte Carlo p-value without its +1", "dochar/metrics/intervals.py",
        "else (1 + hits) / (1 + len(swaps))", "else hits / len(swaps)",
        ("tests/metrics/test_intervals.py::"
         "test_monte_carlo_p_value_counts_the_observed_arrangement",)),
    Bug("compare ignores --method", COMPARE,
        "seed=seed, method=method)", "seed=seed)",
        (TEST_COMPARE + "test_the_method_option_chooses_the_test",)),
    Bug("compare verdict with low >= 0", COMPARE,
        '"A is better" if result.low > 0', '"A is better" if result.low >= 0',
        (TEST_COMPARE + "test_identical_runs_have_no_clear_difference",)),
    Bug("compare ignores the runs' entity_ignore", COMPARE,
        'ignore = run_a.config.get("evaluation", {}).get("entity_ignore", ["other"])',
        'ignore = ["other"]',
        (TEST_COMPARE + "test_the_runs_own_entity_ignore_list_decides_what_is_scored",)),
    Bug("a side of two documents loses its interval", "dochar/metrics/seen_unseen.py",
        "if n_documents < 2:", "if n_documents <= 2:",
        ("tests/splits/test_seen_unseen.py::test_a_side_of_two_documents_gets_its_interval",)),
    Bug("template fallback at distance == threshold", "dochar/models/template.py",
        "if distance < self.fallback_threshold:", "if distance <= self.fallback_threshold:",
        ("tests/models/test_template.py::"
         "test_the_fallback_needs_a_distance_strictly_below_the_threshold",)),
    Bug("estimator class one past the labels accepted", "dochar/models/saved.py",
        "classes.max() >= len(labels)", "classes.max() > len(labels)",
        ("tests/models/test_saved.py::test_estimator_classes_must_index_the_labels[one-past-True]",)),
    Bug("resume forgets the best weights", CHECKPOINTS,
        'return int(state["epoch"]) + 1, state["best_state"]',
        'return int(state["epoch"]) + 1, best_state',
        (TEST_RESUME + "test_resume_keeps_the_best_weights_of_an_earlier_epoch",)),
    Bug("resume skips the inputs check", CHECKPOINTS,
        'if state["inputs"] != self.inputs:', 'if "inputs" not in state:',
        (TEST_RESUME + "test_a_checkpoint_of_other_inputs_is_not_resumed",)),
    Bug("touching boxes drop out at distance 0", CANDIDATES,
        "box_gaps(page.boxes) <= options.max_distance",
        "box_gaps(page.boxes) < options.max_distance",
        (TEST_CANDIDATES + "test_touching_boxes_are_candidates_at_distance_zero",)),
    Bug("box gap as the larger axis gap", CANDIDATES,
        "return np.sqrt(gx * gx + gy * gy)", "return np.maximum(gx, gy)",
        (TEST_CANDIDATES + "test_distance_candidates_match_a_brute_force_euclidean_gap",)),
    Bug("directed candidates keep one orientation", CANDIDATES,
        "pairs = np.stack([np.concatenate([source, target]), np.concatenate([target, source])])",
        "pairs = np.stack([source, target])",
        (TEST_CANDIDATES + "test_directed_candidates_hold_both_orientations_of_every_edge",)),
)


def copy_tracked(workdir: Path) -> None:
    """The checkout's tracked sources (as they stand in the working tree) under ``workdir``."""
    tracked = subprocess.run(["git", "ls-files", *COPIED], cwd=ROOT, check=True,
                             capture_output=True, text=True).stdout.split()
    for name in tracked:
        target = workdir / name
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy2(ROOT / name, target)


def check_sites(workdir: Path, bugs: tuple[Bug, ...]) -> None:
    """Stop unless every bug's text occurs exactly once in its file."""
    for bug in bugs:
        found = (workdir / bug.path).read_text(encoding="utf-8").count(bug.old)
        if found != 1:
            raise SystemExit(f"bug {bug.name!r}: its text occurs {found} times in {bug.path}, "
                             f"not once; the code moved, move the bug with it:\n{bug.old}")


def run_tests(workdir: Path, tests: tuple[str, ...]) -> subprocess.CompletedProcess:
    """The named tests in the copy, imported from the copy, without slow tests (the default
    suite) and without bytecode (a stale .pyc of a planted file would be run in its place)."""
    env = {**os.environ, "OMP_NUM_THREADS": "1", "PYTHONPATH": str(workdir),
           "PYTHONDONTWRITEBYTECODE": "1",
           "DOCHAR_DATASETS": os.environ.get("DOCHAR_DATASETS",
                                             str(ROOT.parent / "shared" / "datasets"))}
    command = [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", "-x",
               "-m", "not slow", *tests]
    return subprocess.run(command, cwd=workdir, env=env, capture_output=True, text=True)


def check_unplanted(workdir: Path, bugs: tuple[Bug, ...]) -> None:
    """Stop unless the copy's dochar is the one imported and every named test passes on it."""
    where = subprocess.run([sys.executable, "-c", "import dochar; print(dochar.__file__)"],
                           cwd=workdir, env={**os.environ, "PYTHONPATH": str(workdir)},
                           capture_output=True, text=True, check=True).stdout.strip()
    if not Path(where).resolve().is_relative_to(workdir.resolve()):
        raise SystemExit(f"the tests would import dochar from {where}, not from the copy")
    tests = tuple(dict.fromkeys(test for bug in bugs for test in bug.tests))
    done = run_tests(workdir, tests)
    if done.returncode != 0:
        raise SystemExit(f"the named tests do not all pass without a planted bug (pytest exit "
                         f"{done.returncode}); fix that first:\n{done.stdout[-3000:]}")


@contextmanager
def planted(workdir: Path, bug: Bug) -> Iterator[None]:
    """The bug in the copy for the duration of the block, then the file as the checkout has it."""
    path = workdir / bug.path
    original = path.read_bytes()
    path.write_bytes(original.decode("utf-8").replace(bug.old, bug.new).encode("utf-8"))
    try:
        yield
    finally:
        path.write_bytes(original)
        if path.read_bytes() != (ROOT / bug.path).read_bytes():
            raise SystemExit(f"bug {bug.name!r}: {bug.path} in the copy differs from the "
                             f"checkout after undoing it; later verdicts would be of other code")


def verdict(workdir: Path, bug: Bug) -> bool:
    """Whether the bug's tests fail with it planted; any pytest exit but 0 or 1 (a test not
    found, a collection error) stops the tool, as it is no verdict on the tests."""
    with planted(workdir, bug):
        done = run_tests(workdir, bug.tests)
    if done.returncode not in (0, 1):
        raise SystemExit(f"bug {bug.name!r}: pytest exit {done.returncode}, no verdict:\n"
                         f"{done.stdout[-3000:]}\n{done.stderr[-2000:]}")
    return done.returncode == 1


def table(rows: list[tuple[Bug, bool]]) -> str:
    lines = ["| bug | file | test | verdict |", "| --- | --- | --- | --- |"]
    lines += [f"| {bug.name} | `{bug.path}` | {', '.join(f'`{t}`' for t in bug.tests)} | "
              f"{'caught' if caught else 'NOT CAUGHT'} |" for bug, caught in rows]
    return "\n".join(lines)


def main() -> int:
    with tempfile.TemporaryDirectory(prefix="dochar-planted-") as scratch:
        workdir = Path(scratch)
        copy_tracked(workdir)
        check_sites(workdir, BUGS)
        print(f"unplanted check of the named tests in {workdir}", file=sys.stderr, flush=True)
        check_unplanted(workdir, BUGS)
        rows = []
        for number, bug in enumerate(BUGS, start=1):
            rows.append((bug, verdict(workdir, bug)))
            print(f"{number}/{len(BUGS)} {bug.name}: "
                  f"{'caught' if rows[-1][1] else 'NOT CAUGHT'}", file=sys.stderr, flush=True)
    print(table(rows))
    return 0 if all(caught for _, caught in rows) else 1


if __name__ == "__main__":
    raise SystemExit(main())
