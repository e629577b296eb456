"""`dochar run +experiment=cord_rows_forest` end to end on CORD: row F1 recounted from the
run's pair rows with a plain union-find (an oracle written apart from the scorer)."""

from __future__ import annotations

import os
import subprocess
import sys
from collections import defaultdict

import pytest

from dochar.runs.bundle import RunBundle
from tests.helpers import REPO


def _rows(pairs, keep) -> set[frozenset]:
    """Groups of two nodes or more joined by the kept pairs (union-find, path halving)."""
    parent: dict = {}

    def find(x):
        parent.setdefault(x, x)
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for (a, b), linked in zip(pairs, keep):
        find(a), find(b)
        if linked:
            parent[find(a)] = find(b)
    groups = defaultdict(set)
    for node in parent:
        groups[find(node)].add(node)
    return {frozenset(g) for g in groups.values() if len(g) > 1}


@pytest.mark.slow   # imports 600 receipts and fits a forest: a minute or more on two cores
def test_cord_rows_forest_run(tmp_path, cord_root):
    env = {**os.environ, "PYTHONPATH": str(REPO), "DOCHAR_DATASETS": str(cord_root.parent)}
    result = subprocess.run(
        [sys.executable, "-m", "dochar.cli", "run", "+experiment=cord_rows_forest",
         "model.options.n_estimators=20", "evaluation.bootstrap_resamples=50",
         "tracking.experiment=cord"], cwd=tmp_path, env=env, capture_output=True, text=True,
        timeout=1800)
    assert result.returncode == 0, result.stdout[-3000:] + result.stderr[-3000:]
    (summary,) = (tmp_path / "outputs").glob("**/run/summary.json")
    bundle = RunBundle.load(summary.parent)
    frame = bundle.predictions
    assert frame["doc_id"].nunique() == 120          # the test receipts: id % 5 == 0
    correct = predicted = true = 0
    for _, page in frame.groupby("doc_id"):
        pairs = list(zip(page["source"], page["target"]))
        found = _rows(pairs, page["predicted"] == "link")
        truth = _rows(pairs, page["source_entity"] == page["target_entity"])
        correct, predicted, true = (correct + len(found & truth), predicted + len(found),
                                    true + len(truth))
    assert bundle.metrics["row_f1"] == pytest.approx(2 * correct / (predicted + true))
    assert bundle.metrics["row_f1_low"] <= bundle.metrics["row_f1"] <= \
        bundle.metrics["row_f1_high"]
    # candidate recall of the test receipts, seed 0: 0.986 (knn k=16), 0.857 (reading order)
    assert 0.8 < bundle.metrics["candidate_recall"] <= 1
