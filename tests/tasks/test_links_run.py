"""`dochar run task=links` end to end on small synthetic data: both link kinds, the pair GNN
and the forest logged to one MLflow store, and `dochar compare` on link F1."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from dochar.runs.bundle import RunBundle
from tests.helpers import REPO

TINY = ["task=links", "data.documents=12", "train.max_epochs=3", "train.progress=false",
        "evaluation.bootstrap_resamples=50", "features=geometry_text", "tracking.experiment=links"]
SYSTEMS = (["model=relational", "model.hidden_dim=16"],
           ["model=random_forest", "model.options.n_estimators=20"])


def dochar(cwd: Path, *args: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    result = subprocess.run([sys.executable, "-m", "dochar.cli", *args], cwd=cwd, env=env,
                            capture_output=True, text=True, timeout=900)
    assert result.returncode == 0, result.stdout[-3000:] + result.stderr[-3000:]
    return result


@pytest.mark.slow   # four small trainings and a compare: minutes on a shared 2-core machine
@pytest.mark.parametrize("kind", ["key_value", "same_entity"])
def test_links_gnn_and_forest(tmp_path, kind):
    printed = "".join(dochar(tmp_path, "run", *system, f"task.link_kind={kind}", *TINY).stdout
                      for system in SYSTEMS)
    bundles = [RunBundle.load(p.parent) for p in
               sorted((tmp_path / "outputs").glob("**/run/summary.json"))]
    assert sorted(b.tags["model"] for b in bundles) == ["random_forest", "relational"]
    for bundle in bundles:
        frame = bundle.predictions
        # link F1 recounted from the rows: TP, FP, FN (common practice, beta = 1)
        true, predicted = frame["label"] == "link", frame["predicted"] == "link"
        tp, fp, fn = (true & predicted).sum(), (~true & predicted).sum(), (true & ~predicted).sum()
        assert bundle.metrics["link_f1"] == pytest.approx(2 * tp / (2 * tp + fp + fn))
        assert bundle.metrics["link_f1_low"] <= bundle.metrics["link_f1"] \
            <= bundle.metrics["link_f1_high"]
        assert 0 < bundle.metrics["candidate_recall"] <= 1
        # true links that were no candidate are scored as missed, never as found
        assert (frame.loc[~frame["candidate"], "predicted"] == "none").all()
        assert ("entity_f1" in bundle.metrics) == (kind == "same_entity")
        if kind == "same_entity":
            assert 0 < bundle.metrics["entity_f1"] <= 1
        assert f"{bundle.metrics['link_f1']:.3f}" in printed
    ids = [b.run_id for b in bundles]
    compared = dochar(tmp_path, "compare", ids[0][:12], ids[1][:12], "--score", "link_f1",
                      "--experiment", "links", "--tracking-uri",
                      f"sqlite:///{tmp_path / 'mlflow.db'}", "--resamples", "200")
    differences = re.findall(r"A - B = ([+-][0-9.]+)", compared.stdout)
    expected = bundles[0].metrics["link_f1"] - bundles[1].metrics["link_f1"]
    assert float(differences[0]) == pytest.approx(expected, abs=1e-4)
    assert np.isfinite(float(re.findall(r"p = ([0-9.e-]+)", compared.stdout)[0]))
