"""The CI gate: its rule on hand-made numbers, its per-class intervals against a brute-force
bootstrap, its files read back, and its exit codes on real runs (a tiny reference here; the
committed reference and baseline in the tests marked slow)."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from sklearn.metrics import f1_score

from dochar.gate.baseline import Baseline, class_intervals, run_scores
from dochar.gate.command import COULD_NOT_RUN, PASS, REGRESSION, main, run_reference
from dochar.gate.rules import GateConfigError, Score, Tolerances, check_metric, compare
from dochar.runs.bundle import RunBundle
from tests.helpers import REPO

TINY = ["data.documents=40", "split=random", "features=geometry_text", "model=relational",
        "train.max_epochs=10", "train.patience=10", "train.threads=1", "train.progress=false",
        "tracking.enabled=false", "evaluation.bootstrap_resamples=300", "seed=0"]
TOLERANCE = {"mode": "interval", "macro_f1": 0.02, "entity_f1": 0.02, "class_f1": 0.05}

# Elements and attributes allowed by the JUnit schema of Jenkins' xUnit plugin (junit-10.xsd,
# jenkinsci/xunit-plugin, MIT, G. Boissinot 2014), read from the schema file; required ones last.
JUNIT_SCHEMA = {
    "testsuites": ({"testsuite"}, {"name", "time", "tests", "failures", "disabled", "errors"},
                   set()),
    "testsuite": ({"testsuite", "properties", "testcase", "system-out", "system-err"},
                  {"name", "tests", "failures", "errors", "time", "disabled", "skipped", "skips",
                   "timestamp", "hostname", "id", "package", "assertions", "file", "skip", "log",
                   "url"}, {"tests"}),
    "properties": ({"property"}, set(), set()),
    "property": (set(), {"name", "value"}, {"name", "value"}),
    "testcase": ({"skipped", "error", "failure", "system-out", "system-err"},
                 {"name", "assertions", "time", "timestamp", "classname", "status", "class",
                  "file", "line", "log", "group", "url"}, {"name"}),
    "failure": (set(), {"type", "message"}, set()),
    "error": (set(), {"type", "message"}, set()),
    "skipped": (set(), {"type", "message"}, set()),
    "system-out": (set(), set(), set()),
    "system-err": (set(), set(), set()),
}


def assert_junit_schema(element: ET.Element) -> None:
    children, allowed, required = JUNIT_SCHEMA[element.tag]
    assert set(element.attrib) <= allowed, (element.tag, set(element.attrib) - allowed)
    assert required <= set(element.attrib), (element.tag, required - set(element.attrib))
    for child in element:
        assert child.tag in children, (element.tag, child.tag)
        assert_junit_schema(child)


# --- the rule -------------------------------------------------------------------------------

def test_interval_rule_fails_only_below_low_minus_tolerance():
    rules = Tolerances(mode="interval", macro_f1=0.02)
    base = Score(0.90, low=0.85, high=0.95)
    # threshold = low - tolerance = 0.83 (the rule in the module docstring, worked by hand)
    assert check_metric("macro_f1", base, Score(0.83), rules).verdict == "ok"
    assert check_metric("macro_f1", base, Score(0.8299), rules).verdict == "regression"
    assert check_metric("macro_f1", base, Score(0.9501), rules).verdict == "better"
    assert check_metric("macro_f1", base, None, rules).failed
    assert check_metric("macro_f1", base, Score(0.84), rules).threshold == pytest.approx(0.83)


def test_absolute_rule_uses_the_value_and_class_overrides():
    rules = Tolerances(mode="absolute", class_f1=0.05, classes={"client": 0.2})
    base = Score(0.90, low=0.80, high=0.95)
    assert check_metric("f1/unit", base, Score(0.84), rules).verdict == "regression"  # < 0.85
    assert check_metric("f1/client", base, Score(0.71), rules).verdict == "ok"        # >= 0.70
    assert check_metric("f1/client", base, Score(0.69), rules).verdict == "regression"


def test_interval_mode_without_interval_falls_back_to_the_value():
    check = check_metric("entity_f1", Score(0.7), Score(0.65), Tolerances(entity_f1=0.01))
    assert check.verdict == "regression" and "no interval" in check.note


def test_compare_orders_headline_first_and_flags_new_metrics():
    base = {"f1/b": Score(0.5), "macro_f1": Score(0.5), "entity_f1": Score(0.5)}
    now = {**base, "f1/a": Score(0.9)}
    checks = compare(base, now, Tolerances())
    assert [c.metric for c in checks] == ["macro_f1", "entity_f1", "f1/b", "f1/a"]
    assert checks[-1].verdict == "new" and not checks[-1].failed
    assert all(c.change == 0.0 and c.verdict == "ok" for c in checks[:3])


@pytest.mark.parametrize("bad, where", [({"mode": "sideways"}, "mode"),
                                        ({"macro_f1": -0.1}, "macro_f1"),
                                        ({"class_f1": "wide"}, "class_f1"),
                                        ({"classes": {"unit": float("nan")}}, "classes.unit"),
                                        ({"entity": 0.1}, "unknown key")])
def test_bad_tolerances_are_located(bad, where):
    with pytest.raises(GateConfigError, match=where):
        Tolerances.from_config(bad)


# --- per-class intervals ----------------------------------------------------------------------

def test_class_intervals_match_a_brute_force_bootstrap():
    """Oracle: resample documents with the draws documented in bootstrap_scores, score each
    resample with sklearn.metrics.f1_score(average=None), take percentiles (Efron & Tibshirani
    1993, ch. 13, percentile interval)."""
    labels = ["analyte", "result", "unit", "other"]
    rng = np.random.default_rng(3)
    docs = np.repeat([f"d{i}" for i in range(7)], 30)
    truth = rng.choice(labels, len(docs))
    predicted = np.where(rng.random(len(docs)) < 0.7, truth, rng.choice(labels, len(docs)))
    frame = pd.DataFrame({"doc_id": docs, "label": truth, "predicted": predicted})
    bundle = RunBundle(name="t", labels=labels, metrics={}, predictions=frame)
    got = class_intervals(bundle, resamples=200, confidence=0.9, seed=11)
    groups = np.unique(docs)
    draws = np.random.default_rng(11).integers(0, len(groups), size=(200, len(groups)))
    by_doc = {g: frame[frame["doc_id"] == g] for g in groups}
    scores = []
    for draw in draws:
        sample = pd.concat([by_doc[groups[g]] for g in draw])
        scores.append(f1_score(sample["label"], sample["predicted"], labels=labels, average=None,
                               zero_division=0))
    low, high = np.percentile(scores, [5, 95], axis=0)
    for i, label in enumerate(labels):
        assert got[label] == pytest.approx((low[i], high[i]))


# --- real runs: a tiny reference experiment -----------------------------------------------------

@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> dict[str, Path]:
    """The tiny model, and a planted regression of it: the text flags removed from its features."""
    root = tmp_path_factory.mktemp("gate-runs")
    folders = {}
    for name, extra in {"model": [], "weakened": ["features=geometry"]}.items():
        folders[name] = run_reference([*TINY, *extra]).save(root / name)
    return folders


def gate_config(folder: Path, *, overrides=TINY, **changes) -> Path:
    config = {"baseline": str(folder / "baseline.yaml"), "overrides": list(overrides),
              "tolerance": dict(TOLERANCE), "data_check": "error", **changes}
    path = folder / "tiny.yaml"
    path.write_text(yaml.safe_dump(config))
    return path


def gate(config: Path, out: Path, *arguments: str) -> int:
    return main(["--config", str(config), "--out", str(out), *arguments])


@pytest.fixture
def baseline(runs, tmp_path) -> Path:
    config = gate_config(tmp_path)
    assert gate(config, tmp_path / "out", "--update", "--from-run", str(runs["model"])) == PASS
    return config


def read_outputs(out: Path) -> tuple[ET.Element, str]:
    root = ET.parse(out / "junit.xml").getroot()
    assert_junit_schema(root)
    return root, (out / "summary.md").read_text()


def test_the_model_passes_its_own_baseline_bit_for_bit(runs, baseline, tmp_path, capsys):
    assert gate(baseline, tmp_path / "out", "--from-run", str(runs["model"])) == PASS
    root, summary = read_outputs(tmp_path / "out")
    suite = root.find("testsuite")
    metrics = [case.get("name") for case in suite.iter("testcase")]
    assert metrics[:2] == ["macro_f1", "entity_f1"] and "f1/analyte" in metrics
    assert suite.get("tests") == str(len(metrics)) and suite.get("failures") == "0"
    assert summary.startswith("## dochar gate `tiny`: PASS")
    assert "bit for bit" in summary and "bit for bit" in capsys.readouterr().out


def test_the_reference_run_reproduces_the_baseline(runs, baseline, tmp_path):
    """The gate's own reference run (a fresh run of TINY) must equal the stored run exactly."""
    assert gate(baseline, tmp_path / "out") == PASS
    rerun = RunBundle.load(tmp_path / "out" / "run")
    assert rerun.metrics == RunBundle.load(runs["model"]).metrics
    assert "bit for bit" in (tmp_path / "out" / "summary.md").read_text()


def test_a_weakened_model_fails(runs, baseline, tmp_path):
    assert gate(baseline, tmp_path / "out", "--from-run", str(runs["weakened"])) == REGRESSION
    root, summary = read_outputs(tmp_path / "out")
    failed = {case.get("name"): case.find("failure") for case in root.iter("testcase")
              if case.find("failure") is not None}
    assert "macro_f1" in failed and failed["macro_f1"].get("type") == "regression"
    assert root.find("testsuite").get("failures") == str(len(failed))
    assert summary.startswith("## dochar gate `tiny`: FAIL") and "**regression**" in summary
    assert "features.groups" in summary   # the config difference is named


def test_update_rewrites_the_baseline_and_says_what_changed(runs, baseline, tmp_path, capsys):
    before = Baseline.read(tmp_path / "baseline.yaml")
    capsys.readouterr()
    assert gate(baseline, tmp_path / "out", "--update", "--from-run", str(runs["weakened"])) == PASS
    printed = capsys.readouterr().out
    after = Baseline.read(tmp_path / "baseline.yaml")
    weakened = RunBundle.load(runs["weakened"])
    assert after.scores["macro_f1"].value == weakened.metrics["macro_f1"]
    assert f"macro_f1: {before.scores['macro_f1'].value:.4f} -> " \
           f"{weakened.metrics['macro_f1']:.4f}" in printed
    assert "config features.groups" in printed
    assert gate(baseline, tmp_path / "out", "--from-run", str(runs["weakened"])) == PASS


def test_baseline_file_is_sorted_exact_and_diffable(runs, baseline, tmp_path):
    text = (tmp_path / "baseline.yaml").read_text()
    data = yaml.safe_load(text)
    assert list(data) == sorted(data) and list(data["metrics"]) == sorted(data["metrics"])
    assert {"data_fingerprint", "git_commit", "dochar_version", "created", "overrides"} <= set(data)
    assert data["overrides"] == TINY
    bundle = RunBundle.load(runs["model"])
    assert data["data_fingerprint"] == bundle.tags["data_fingerprint"]
    assert Baseline.read(tmp_path / "baseline.yaml").scores == run_scores(bundle)  # exact floats
    assert all(line.count("value:") <= 1 for line in text.splitlines())          # one per line


def test_other_data_cannot_be_compared_unless_told_to_warn(runs, baseline, tmp_path):
    path = tmp_path / "baseline.yaml"
    path.write_text(path.read_text().replace(Baseline.read(path).data_fingerprint, "0" * 16))
    assert gate(baseline, tmp_path / "out", "--from-run", str(runs["model"])) == COULD_NOT_RUN
    root, summary = read_outputs(tmp_path / "out")
    assert root.find("testsuite/testcase/error").get("type") == "could-not-run"
    assert "not comparable" in summary
    assert gate(baseline, tmp_path / "out", "--from-run", str(runs["model"]),
                "data_check=warn") == PASS
    assert "warning: the run's data" in (tmp_path / "out" / "summary.md").read_text()


# --- could not run: exit code 2, never 1 ---------------------------------------------------------

@pytest.mark.parametrize("arguments, message", [
    (["model=no_such_model"], "bad experiment config"),
    (["tolerance.mode=sideways"], "tolerance.mode"),
    (["tolerance.classes={no_such_class: 0.1}"], "no_such_class"),
    (["not-a-setting"], "expected key=value"),
])
def test_bad_config_or_missing_data_could_not_run(runs, baseline, tmp_path, capsys, arguments,
                                                  message):
    assert gate(baseline, tmp_path / "out", *arguments) == COULD_NOT_RUN
    assert message in capsys.readouterr().err
    root, _ = read_outputs(tmp_path / "out")
    assert message in root.find("testsuite/testcase/error").get("message")


def test_missing_data_could_not_run(baseline, tmp_path, capsys):
    missing = gate_config(tmp_path, overrides=["data=word_table", "data.path=/nonexistent/w.csv",
                                               "data.labels=[a,b]", "tracking.enabled=false"])
    assert gate(missing, tmp_path / "out") == COULD_NOT_RUN
    error = capsys.readouterr().err
    assert "reference run failed" in error and "/nonexistent/w.csv" in error


def test_missing_baseline_gate_config_or_run_could_not_run(runs, tmp_path):
    config = gate_config(tmp_path)
    assert gate(config, tmp_path / "out", "--from-run", str(runs["model"])) == COULD_NOT_RUN
    assert main(["--config", "no_such_gate", "--out", str(tmp_path / "o")]) == COULD_NOT_RUN
    assert gate(config, tmp_path / "out", "--update",
                "--from-run", str(tmp_path / "no_run")) == COULD_NOT_RUN
    assert gate(config, tmp_path / "out", "--update", "--from-run", str(runs["model"]),
                "seed=1") == COULD_NOT_RUN   # overrides need a run of their own


@pytest.mark.slow   # creating an MLflow SQLite store runs its schema migrations (seconds)
def test_a_tracked_run_is_gated_by_its_run_id(runs, baseline, tmp_path):
    from dochar.runs.tracking import log_run

    uri = f"sqlite:///{tmp_path / 'mlflow.db'}"
    run_id = log_run(RunBundle.load(runs["model"]), tmp_path / "logged", uri=uri,
                     experiment="gate-check")
    assert gate(baseline, tmp_path / "out", "--from-run", run_id, "--tracking-uri", uri) == PASS
    assert gate(baseline, tmp_path / "out", "--from-run", "0" * 32,
                "--tracking-uri", uri) == COULD_NOT_RUN


# --- the committed reference experiment and baseline ---------------------------------------------

@pytest.mark.slow
@pytest.mark.parametrize("arguments, expected", [
    ([], PASS),                          # the committed model passes its committed baseline
    (["features=geometry"], REGRESSION),  # planted regression: text flags removed
    (["seed=1"], PASS),                   # seed-only change: within the interval tolerances
], ids=["committed_model", "planted_regression", "seed_change"])
def test_committed_reference(tmp_path, arguments, expected):
    assert (REPO / "reports" / "baseline" / "reference.yaml").is_file()
    code = main(["--config", "reference", "--out", str(tmp_path), *arguments,
                 f"baseline={REPO / 'reports' / 'baseline' / 'reference.yaml'}"])
    assert code == expected
    root, _ = read_outputs(tmp_path)
    failed = {case.get("name") for case in root.iter("testcase")
              if case.find("failure") is not None}
    assert ("macro_f1" in failed) == (expected == REGRESSION)
