"""Each task end to end through `dochar run`, a GNN and its forest counterpart side by side,
on synthetic certificates and on a handful of FUNSD forms; then `dochar compare` on them."""

from __future__ import annotations

from pathlib import Path

import pytest

from dochar.runs.bundle import RunBundle
from tests.test_combinations import funsd_small  # noqa: F401 (the fixture)
from tests.test_experiment import dochar, store_runs

# a sweep over model kinds takes no kind-specific keys (the schemas refuse keys a model
# does not read), so both systems keep their configured sizes
TINY = ["train.max_epochs=2", "evaluation.bootstrap_resamples=30", "train.progress=false", "tracking.experiment=e2e",
        "model=relational,random_forest"]
SYNTH = ["data.documents=24"]


def children(cwd: Path):
    runs = store_runs(cwd)
    return runs[runs["tags.mlflow.parentRunId"].notna()]


@pytest.mark.parametrize("task,extra", [("entity_tags", ["task.scheme=bioes"]),
                                        ("segment_labels", [])])
def test_task_runs_on_synthetic_certificates(tmp_path, task, extra):
    dochar(tmp_path, "run", "-m", f"task={task}", *extra, *SYNTH, *TINY)
    runs = children(tmp_path)
    assert sorted(runs["tags.model"]) == ["random_forest", "relational"]
    assert (runs["tags.task"] == task).all()
    for name in ("macro_f1", "macro_f1_low", "macro_f1_high", "word/macro_f1"):
        assert runs[f"metrics.{name}"].between(0, 1).all(), name
    if task == "entity_tags":
        assert runs["metrics.entity_f1"].between(0, 1).all()
        assert (runs["metrics.entity_f1_low"] <= runs["metrics.entity_f1"]).all()
        assert "metrics.f1/S-analyte" in runs         # per-class F1 over the tags
    else:
        assert "metrics.entity_f1" not in runs or runs["metrics.entity_f1"].isna().all()
    # the paired comparison reads the task from the runs and scores nodes of the same pages
    ids = runs["run_id"].tolist()
    score = "entity_f1" if task == "entity_tags" else "macro_f1"
    result = dochar(tmp_path, "compare", ids[0][:12], ids[1][:12], "--experiment", "e2e",
                    "--score", score, "--resamples", "200")
    assert "A - B =" in result.stdout


@pytest.mark.parametrize("task", ["entity_tags", "segment_labels"])
def test_task_runs_on_funsd_forms(tmp_path, task, funsd_small):  # noqa: F811
    dochar(tmp_path, "run", "-m", f"task={task}", "data=funsd", f"data.path={funsd_small}",
           "split=fixed", "graph=knn", *TINY)
    runs = children(tmp_path)
    assert sorted(runs["tags.model"]) == ["random_forest", "relational"]
    labels = ({"O", "B-question", "I-question", "B-answer", "I-answer", "B-header", "I-header"}
              if task == "entity_tags" else {"header", "question", "answer", "other"})
    for label in labels:
        assert runs[f"metrics.f1/{label}"].between(0, 1).all(), label
    assert runs["metrics.word/macro_f1"].between(0, 1).all()


def test_bundle_labels_are_the_task_classes(tmp_path):
    from hydra import compose, initialize_config_dir

    from dochar.config import CONFIG_DIR
    from dochar.experiment import run_experiment

    with initialize_config_dir(str(CONFIG_DIR), version_base=None):
        cfg = compose("config", overrides=["task=segment_labels", "model=random_forest",
                                           *SYNTH, *[o for o in TINY if "model=" not in o],
                                           "tracking.enabled=false"])
    bundle, _ = run_experiment(cfg)
    assert isinstance(bundle, RunBundle)
    assert bundle.labels == list(cfg.data.labels)
    # one prediction row per segment, fewer than the words they are made of
    words = sum(bundle.metrics[f"word/support/{label}"] for label in cfg.data.labels)
    assert 0 < len(bundle.predictions) < words
    assert set(bundle.predictions["text"].str.contains(" ")) == {True, False}
