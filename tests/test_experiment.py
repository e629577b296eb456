"""The main job end to end, through the `dochar` command, against a real MLflow store."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import mlflow
import pandas as pd
import pytest

from dochar.runs.bundle import RunBundle
from dochar.runs.numbers import p_phrase

TINY = ["data.documents=30", "train.max_epochs=3", "evaluation.bootstrap_resamples=50",
        "++model.hidden_dim=16", "train.progress=false", "tracking.experiment=e2e"]


def dochar(cwd: Path, *args: str) -> subprocess.CompletedProcess:
    result = subprocess.run([sys.executable, "-m", "dochar.cli", *args], cwd=cwd,
                            capture_output=True, text=True, timeout=900)
    assert result.returncode == 0, result.stdout[-3000:] + result.stderr[-3000:]
    return result


@pytest.fixture(scope="module")
def sweep(tmp_path_factory) -> tuple[Path, str]:
    cwd = tmp_path_factory.mktemp("sweep")
    # a sweep over model kinds takes no kind-specific keys: the schemas refuse keys a model
    # does not read (model.options on a GNN, model.hidden_dim on a forest)
    result = dochar(cwd, "run", "-m", "model=relational,random_forest",
                    *[o for o in TINY[:-2] if not o.startswith("++model.")],
                    "train.progress=false", "tracking.experiment=e2e")
    return cwd, result.stdout


def store_runs(cwd: Path) -> pd.DataFrame:
    """Every run of the store as a row: run_id, metrics.*, params.*, tags.*."""
    client = mlflow.MlflowClient(tracking_uri=f"sqlite:///{cwd / 'mlflow.db'}")
    experiment = client.get_experiment_by_name("e2e")
    rows = []
    for run in client.search_runs([experiment.experiment_id]):
        rows.append({"run_id": run.info.run_id,
                     **{f"metrics.{k}": v for k, v in run.data.metrics.items()},
                     **{f"params.{k}": v for k, v in run.data.params.items()},
                     **{f"tags.{k}": v for k, v in run.data.tags.items()}})
    return pd.DataFrame(rows)


def test_sweep_table_agrees_with_the_store(sweep):
    cwd, stdout = sweep
    runs = store_runs(cwd)
    children = runs[runs["tags.mlflow.parentRunId"].notna()]
    assert len(children) == 2 and (runs["tags.kind"] == "sweep").sum() == 1
    for _, run in children.iterrows():
        # the printed ranked table shows each run's macro-F1 and its run id as logged
        assert f"{run['metrics.macro_f1']:.3f}" in stdout
        assert run["run_id"][:12] in stdout
    summaries = sorted((cwd / "outputs" / "sweeps").glob("*/*/run/summary.json"))
    for path in summaries:
        summary = json.loads(path.read_text())
        logged = runs.set_index("run_id").loc[summary["run_id"]]
        for key, value in summary["metrics"].items():
            assert logged[f"metrics.{key}"] == pytest.approx(value, abs=1e-12)


def test_run_logs_config_tags_and_artifacts(sweep):
    cwd, _ = sweep
    run = store_runs(cwd).query("`tags.model` == 'relational'").iloc[0]
    assert run["params.model.layer"] == "relational" and run["params.data.documents"] == "30"
    for tag in ("git_commit", "data_fingerprint", "dataset", "split_protocol", "graph_builder",
                "features", "sweep_id"):
        assert run[f"tags.{tag}"]
    client = mlflow.MlflowClient(tracking_uri=f"sqlite:///{cwd / 'mlflow.db'}")
    names = {a.path for a in client.list_artifacts(run["run_id"])}
    assert {"summary.json", "config.yaml", "predictions.parquet", "per_class.csv",
            "confusion.csv", "confusion_counts.png", "confusion_normalised.png",
            "calibration.png", "run_report.html", "model"} <= names
    folder = mlflow.artifacts.download_artifacts(run_id=run["run_id"],
                                                 tracking_uri=client.tracking_uri)
    bundle = RunBundle.load(folder)
    per_class = bundle.tables["per_class"]
    for label in bundle.labels:
        assert run[f"metrics.f1/{label}"] == pytest.approx(per_class.loc[label, "f1"])


def test_invalid_documents_are_counted_and_skipped(tmp_path):
    import data_synth

    table = data_synth.generate(12, seed=1)
    first = table["doc_id"].iloc[0]
    table.loc[table.index[0], "x1"] = -5.0  # x1 left of x0 in one document
    path = tmp_path / "words.csv"
    table.to_csv(path, index=False)
    result = dochar(tmp_path, "run", "data=word_table", f"data.path={path}",
                    f"data.labels=[{','.join(data_synth.LABELS)}]", "split=random",
                    "model=random_forest", "model.options.n_estimators=10",
                    "tracking.enabled=false", "train.progress=false")
    log = result.stdout + result.stderr
    assert "12 documents in, 11 used, 1 reported" in log
    assert f"document {first}" in log and re.search(r"x1 -5 is left of x0 [\d.]+", log)
    summary = json.loads(next(tmp_path.glob("outputs/runs/*/run/summary.json")).read_text())
    assert (summary["metrics"]["data/documents_in"], summary["metrics"]["data/documents_used"],
            summary["metrics"]["data/documents_reported"]) == (12, 11, 1)


def test_strict_mode_stops_on_a_bad_table(tmp_path):
    import data_synth

    table = data_synth.generate(4, seed=1)
    table.loc[table.index[3], "label"] = "price"
    path = tmp_path / "words.parquet"
    table.to_parquet(path)
    result = subprocess.run([sys.executable, "-m", "dochar.cli", "run", "data=word_table",
                             f"data.path={path}", f"data.labels=[{','.join(data_synth.LABELS)}]",
                             "strict=true", "tracking.enabled=false"], cwd=tmp_path,
                            capture_output=True, text=True, timeout=300)
    assert result.returncode != 0
    assert "row 4, column 'label'" in result.stderr + result.stdout


def test_funsd_run_logs_per_class_f1_for_gnn_and_forest(funsd_root, tmp_path):
    result = dochar(tmp_path, "run", "-m", "data=funsd", f"data.path={funsd_root}",
                    "split=fixed", "model=relational,random_forest", "train.max_epochs=3",
                    "evaluation.bootstrap_resamples=50", "train.progress=false",
                    "tracking.experiment=e2e")
    runs = store_runs(tmp_path)
    children = runs[runs["tags.mlflow.parentRunId"].notna()]
    assert sorted(children["tags.model"]) == ["random_forest", "relational"]
    for label in ("header", "question", "answer", "other"):
        assert children[f"metrics.f1/{label}"].between(0, 1).all()
    # the official split: 50 test forms, 149 training forms shared by train and validation
    assert (children["metrics.split/test_documents"] == 50).all()
    assert (children["metrics.split/train_documents"]
            + children["metrics.split/val_documents"] == 149).all()
    assert "per-class F1" in result.stdout


def _macro_f1(frame: pd.DataFrame) -> float:
    """scikit-learn's macro-F1 over the labels present in truth or prediction (the rule of
    dochar.metrics.words, checked against sklearn in tests/metrics)."""
    from sklearn.metrics import f1_score

    present = sorted(set(frame["label"]) | set(frame["predicted"]))
    return float(f1_score(frame["label"], frame["predicted"], labels=present, average="macro"))


def test_compare_prints_the_paired_difference_of_two_logged_runs(sweep):
    """The printout against a paired bootstrap written here (Koehn 2004): the documented draws,
    default_rng(seed).integers(0, G, (R, G)) over the sorted test document ids, shared by both
    runs; each resample glued from document copies and scored with scikit-learn."""
    import numpy as np

    cwd, _ = sweep
    runs = store_runs(cwd)
    children = runs[runs["tags.mlflow.parentRunId"].notna()].sort_values("tags.model")
    ids = children["run_id"].tolist()
    uri = f"sqlite:///{cwd / 'mlflow.db'}"
    result = dochar(cwd, "compare", ids[0][:12], ids[1][:12], "--experiment", "e2e",
                    "--tracking-uri", uri, "--resamples", "200")
    by_id = {bundle.run_id: bundle.predictions for bundle in
             (RunBundle.load(summary.parent) for summary in
              (cwd / "outputs" / "sweeps").glob("*/*/run/summary.json"))}
    frame_a, frame_b = by_id[ids[0]], by_id[ids[1]]
    score_a, score_b = _macro_f1(frame_a), _macro_f1(frame_b)
    for run_id, score in ((ids[0], score_a), (ids[1], score_b)):   # as the run logged it
        assert children.set_index("run_id").loc[run_id, "metrics.macro_f1"] == pytest.approx(score)
    docs = np.sort(frame_a["doc_id"].astype(str).unique())
    draws = np.random.default_rng(0).integers(0, len(docs), size=(200, len(docs)))
    by_a, by_b = dict(list(frame_a.groupby("doc_id"))), dict(list(frame_b.groupby("doc_id")))
    deltas = np.array([_macro_f1(pd.concat([by_a[docs[g]] for g in draw]))
                       - _macro_f1(pd.concat([by_b[docs[g]] for g in draw])) for draw in draws])
    low, high = np.percentile(deltas, [2.5, 97.5])
    observed = score_a - score_b
    p_value = (1 + np.sum(np.abs(deltas - observed) >= abs(observed) - 1e-12)) / 201
    assert f"macro_f1 = {score_a:.4f}" in result.stdout
    assert f"macro_f1 = {score_b:.4f}" in result.stdout
    assert f"A - B = {observed:+.4f}" in result.stdout
    assert f"[{low:+.4f}, {high:+.4f}]" in result.stdout
    assert p_phrase(p_value) in result.stdout   # the house way of writing p (runs/numbers.py)
    verdict = ("A is better" if low > 0 else "B is better" if high < 0
               else "no clear difference")
    assert result.stdout.strip().endswith(f"verdict: {verdict}")
