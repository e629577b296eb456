"""Learning curves: real tiny runs along the curve, and the curve metrics the report reads."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hydra import compose, initialize_config_dir

from dochar.curve import (
    LearningCurveError,
    curve_metrics,
    run_learning_curve,
)
from dochar.report.summaries import learning_curve
from dochar.runs.bundle import RunBundle
from tests.helpers import CONFIGS

TINY = ["data.documents=40", "train.max_epochs=2", "evaluation.bootstrap_resamples=20",
        "tracking.enabled=false", "train.progress=false", "train.threads=1"]


def _config(*overrides: str):
    with initialize_config_dir(str(CONFIGS), version_base="1.3"):
        return compose("config", overrides=[*TINY, *overrides])


def _collect():
    runs: list[tuple[RunBundle, object]] = []
    return runs, lambda bundle, model, cfg: runs.append((bundle, cfg))


@pytest.mark.parametrize("model", [pytest.param("relational", marks=pytest.mark.slow),
                                   "random_forest"])
def test_curve_of_a_gnn_and_a_baseline(model):
    cfg = _config(f"model={model}", *(["model.options.n_estimators=20"]
                                      if model == "random_forest" else []))
    runs, hook = _collect()
    frame = run_learning_curve(cfg, [4, None, 10], on_run=hook)
    # the whole training part runs first (it fixes the pool), then the largest subset
    assert [cfg.split.train_documents for _, cfg in runs] == [None, 10, 4]
    pool = int(runs[0][0].metrics["split/train_documents"])
    assert frame["n_train_documents"].tolist() == [4, 10, pool] and pool > 10
    assert frame["requested_documents"].tolist() == ["4", "10", "all"]
    # validation and test documents stay fixed along the curve: only training shrinks
    tests = [sorted(b.predictions["doc_id"].unique()) for b, _ in runs]
    assert tests[0] == tests[1] == tests[2]
    assert len({b.metrics["split/val_documents"] for b, _ in runs}) == 1
    by_size = {int(b.metrics["split/train_documents"]): b for b, _ in runs}
    for _, row in frame.iterrows():
        bundle = by_size[row["n_train_documents"]]
        assert bundle.tags["train_documents"] == str(row["n_train_documents"])
        for score in ("macro_f1", "macro_f1_low", "macro_f1_high", "entity_f1"):
            assert row[score] == bundle.metrics[score]
        assert row["macro_f1_low"] <= row["macro_f1"] <= row["macro_f1_high"]
    # the report reads curve/<n>/<score> back as (n, score) points (dochar.report.summaries)
    carrier = runs[0][0]
    carrier.metrics.update(curve_metrics(frame))
    assert learning_curve(carrier, "macro_f1") == [(float(n), v) for n, v in
                                                   zip(frame["n_train_documents"],
                                                       frame["macro_f1"])]


def test_a_size_beyond_the_pool_stops_after_the_first_run():
    cfg = _config("model=random_forest", "model.options.n_estimators=10")
    runs, hook = _collect()
    with pytest.raises(LearningCurveError, match=r"size 1000: the training part holds only "
                                                 r"\d+ documents"):
        run_learning_curve(cfg, [1000, None], on_run=hook)
    assert len(runs) == 1


@pytest.mark.parametrize("sizes, message", [([], "no learning-curve sizes"),
                                            ([0], "size 0"), ([True], "size True"),
                                            ([5, 5], r"\[5\] given more than once"),
                                            ([None, None], r"\[None\] given more than once")])
def test_curve_sizes_are_checked(sizes, message):
    with pytest.raises(LearningCurveError, match=message):
        run_learning_curve(_config(), sizes)


def test_curve_metrics_average_seeds_by_hand():
    frame = pd.DataFrame({"system": ["gnn"] * 4 + ["forest"],
                          "n_train_documents": [10, 10, 50, 50, 10],
                          "macro_f1": [0.4, 0.5, 0.6, 0.8, 0.3],
                          "micro_f1": [0.7, 0.8, 0.9, 0.9, 0.6],
                          "entity_f1": [0.1, 0.2, np.nan, 0.4, np.nan],
                          "macro_f1_low": [0.3, 0.4, 0.5, 0.7, 0.2],
                          "macro_f1_high": [0.5, 0.6, 0.7, 0.9, 0.4]})
    metrics = curve_metrics(frame, "gnn")
    # by hand: means over the two seeds at each size; intervals only for single runs
    assert metrics == pytest.approx({"curve/10/macro_f1": 0.45, "curve/10/micro_f1": 0.75,
                                     "curve/10/entity_f1": 0.15, "curve/50/macro_f1": 0.7,
                                     "curve/50/micro_f1": 0.9, "curve/50/entity_f1": 0.4})
    assert curve_metrics(frame, "forest") == pytest.approx(
        {"curve/10/macro_f1": 0.3, "curve/10/micro_f1": 0.6, "curve/10/macro_f1_low": 0.2,
         "curve/10/macro_f1_high": 0.4})
    with pytest.raises(LearningCurveError, match=r"holds 2 systems \['forest', 'gnn'\]"):
        curve_metrics(frame)
    with pytest.raises(LearningCurveError, match="system 'svm' not in the curve table"):
        curve_metrics(frame, "svm")
