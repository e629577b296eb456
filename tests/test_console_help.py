"""What the everyday commands print: complete usage lines, a `run --help` that says what a run
does and which choices exist, a "did you mean" for a mistyped option, key or choice, p-values
written one way, and the store's lock file kept out of `git status`.

Expected choices are read off the config folder's files here; expected spellings are the ones
typed in each case.
"""

from __future__ import annotations

import re
import subprocess

import pytest
import yaml

from dochar import cli
from dochar.metrics.intervals import PairedResult
from dochar.runs.bundle import RunBundle
from dochar.runs.compare import format_comparison
from dochar.runs.numbers import p_value
from tests.helpers import CONFIGS, REPO

SUBCOMMANDS = {"run", "curve", "graph-stats", "compare", "report", "runs", "gate", "import",
               "predict", "tracking-server"}   # the commands cli.py's docstring lists


def call(capsys, monkeypatch, tmp_path, *argv: str) -> tuple[int, str, str]:
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("DOCHAR_TRACEBACK", raising=False)
    try:
        code = cli.main(list(argv))
    except SystemExit as stop:   # argparse ends --help and usage errors this way
        code = stop.code
    out = capsys.readouterr()
    return code, out.out, out.err


def test_usage_line_lists_every_subcommand(capsys, monkeypatch, tmp_path):
    code, out, _ = call(capsys, monkeypatch, tmp_path, "--help")
    listed = re.search(r"\{([^}]*)\}", out).group(1).split(",")
    assert code == 0 and set(listed) == SUBCOMMANDS


@pytest.mark.parametrize("command", ["run", "curve", "graph-stats"])
def test_run_help_says_what_it_does_and_lists_the_choices(capsys, monkeypatch, tmp_path,
                                                          command):
    code, out, _ = call(capsys, monkeypatch, tmp_path, command, "--help")
    assert code == 0 and out.startswith(f"usage: dochar {command}")
    assert "Hydra" not in out and "base_" not in out and "examples:" in out
    assert f"\n  dochar {command} " in out   # an example of this very command
    flat = " ".join(out.split())
    for group in (p for p in CONFIGS.iterdir() if p.is_dir() and p.name != "gate"):
        names = [p.stem for p in group.glob("*.yaml")
                 if not p.stem.startswith("base_") and p.stem != "common"]
        for name in names:
            assert re.search(rf"(?<![\w-]){re.escape(name)}\*?(,|$| )", flat), (group, name)
    # each group's default (configs/config.yaml's defaults list) carries the mark
    listed = yaml.safe_load((CONFIGS / "config.yaml").read_text())["defaults"]
    for group, name in (next(iter(d.items())) for d in listed if isinstance(d, dict)):
        assert f" {name}*" in flat, (group, name)


@pytest.mark.parametrize("argv, hint", [
    (["report", "--experment", "x"], "did you mean --experiment?"),
    (["runs", "--limt", "3"], "did you mean --limit?"),
    (["predict", "--modle", "m"], "did you mean --model?"),
])
def test_a_mistyped_option_gets_the_command_usage_and_a_suggestion(capsys, monkeypatch,
                                                                   tmp_path, argv, hint):
    code, _, err = call(capsys, monkeypatch, tmp_path, *argv)
    assert code == 2 and hint in err
    assert f"usage: dochar {argv[0]}" in err   # the subcommand's usage, not the top level's


@pytest.mark.parametrize("override, hint", [
    ("data.document=60", "did you mean data.documents?"),
    ("+train.patiense=3", "did you mean train.patience?"),
    ("model=randomforest", "did you mean random_forest?"),
])
def test_a_mistyped_key_or_choice_gets_a_suggestion(capsys, monkeypatch, tmp_path, override,
                                                    hint):
    code, _, err = call(capsys, monkeypatch, tmp_path, "run", override, "tracking.enabled=false")
    assert code == 2 and hint in err
    assert "Schema" not in err and "base_" not in err   # no internal class or schema names


def test_p_values_are_written_one_way(tmp_path):
    # common practice: p below 0.001 is written "< 0.001", larger ones to three decimals
    assert [p_value(v) for v in (0.0004998, 0.0009, 0.001, 0.0123, 1.0)] == \
        ["< 0.001", "< 0.001", "0.001", "0.012", "1.000"]
    run = RunBundle(name="a", labels=["x"], metrics={}, predictions=None, run_id="r")
    result = PairedResult(difference=0.33, low=0.2, high=0.4, p_value=0.0004998, n_documents=60,
                          method="bootstrap", score_a=0.98, score_b=0.65)
    text = format_comparison(run, run, result, "macro_f1")
    assert "p < 0.001" in text and "0.0004998" not in text and "5e-04" not in text


@pytest.mark.parametrize("left_by_a_run", [
    "mlflow.db.lock",                              # MLflow's SQLite store
    "mlflow.db.claims/0123456789abcdef0123.lock",  # a sweep job's claim (dochar/runs/sweep.py)
])
def test_what_the_demo_leaves_beside_its_store_is_ignored_by_git(left_by_a_run):
    done = subprocess.run(["git", "check-ignore", "-q", "--no-index", left_by_a_run], cwd=REPO)
    assert done.returncode == 0, f"{left_by_a_run} would show in `git status` after `make demo`"
