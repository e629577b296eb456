"""Resume: a run killed during training and started again with the same config ends with the
same scores, bit for bit, as a run never interrupted.

The training loop is deterministic (tests/test_determinism.py), so resuming is exact when the
checkpoint restores every state the next epoch reads: weights, optimiser moments, the loader's
shuffling generator and the global random states, the history and the best weights so far.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import torch

from dochar.gate.command import run_reference
from dochar.models import training
from dochar.models.checkpoints import EpochCheckpoint
from dochar.models.objectives import NodeClasses
from tests.helpers import REPO

# Dropout and an eight-page loader, so both the global torch RNG and the shuffling generator
# matter: a resume that forgot either would drift.
RUN = ["data.documents=24", "split=random", "model=relational", "model.hidden_dim=16",
       "model.depth=1", "model.dropout=0.3", "features=geometry_text", "train.max_epochs=40",
       "train.patience=40", "train.pages_per_batch=4", "train.progress=false",
       "tracking.enabled=false", "evaluation.bootstrap_resamples=50"]
TIMINGS = {"train_seconds", "pages_per_second"}


def scores(summary: dict) -> dict:
    return {"metrics": summary["metrics"],
            "cost": {k: v for k, v in summary["cost"].items() if k not in TIMINGS}}


def start_run(cwd: Path, checkpoints: Path, run_dir: Path) -> subprocess.Popen:
    command = [sys.executable, "-m", "dochar.cli", "run", *RUN,
               f"train.checkpoint_dir={checkpoints}", f"hydra.run.dir={run_dir}"]
    return subprocess.Popen(command, cwd=cwd, env={**os.environ, "PYTHONPATH": str(REPO)},
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)


def saved_epoch(checkpoints: Path) -> int:
    files = list(checkpoints.glob("*.pt"))
    if not files:
        return 0
    try:
        return int(torch.load(files[0], weights_only=True)["epoch"])
    except (FileNotFoundError, RuntimeError, EOFError):  # renamed away or removed meanwhile
        return 0


def test_a_run_killed_during_training_resumes_to_identical_scores(tmp_path):
    checkpoints = tmp_path / "checkpoints"
    killed = start_run(tmp_path, checkpoints, tmp_path / "killed")
    deadline = time.monotonic() + 600
    while saved_epoch(checkpoints) < 3 and killed.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    epoch_at_kill = saved_epoch(checkpoints)
    os.kill(killed.pid, signal.SIGKILL)
    killed.wait()
    assert 3 <= epoch_at_kill < 40, "the run must be killed mid-training"
    assert not (tmp_path / "killed" / "run" / "summary.json").exists()

    resumed = start_run(tmp_path, checkpoints, tmp_path / "resumed")
    output, _ = resumed.communicate(timeout=900)
    assert resumed.returncode == 0, output[-3000:]
    assert "resuming training from the checkpoint of epoch" in output
    assert not list(checkpoints.glob("*")), "a finished run leaves no checkpoint behind"

    uninterrupted = run_reference([*RUN, "train.checkpoint_dir=null"])
    resumed_summary = json.loads((tmp_path / "resumed" / "run" / "summary.json").read_text())
    expected = scores({"metrics": uninterrupted.metrics, "cost": uninterrupted.cost})
    assert scores(resumed_summary) == expected        # exact float equality, every metric


class Stopped(Exception):
    pass


class StopAfter(EpochCheckpoint):
    """Saves like the real checkpoint, then stops the process's training at one epoch, as a kill
    right after a save would."""

    def __init__(self, folder, stop_at: int) -> None:
        super().__init__(folder, "k", "inputs")
        self.stop_at = stop_at

    def save(self, epoch, *args) -> None:
        super().save(epoch, *args)
        if epoch == self.stop_at:
            raise Stopped


@pytest.mark.parametrize("stop_at", [1, 4])
def test_resumed_training_repeats_the_uninterrupted_history(tmp_path, stop_at):
    """In one process: the same trajectory (losses, validation scores, best epoch, weights)."""
    from tests.runs.training_inputs import tiny_training

    model, graphs, cfg = tiny_training()
    reference = training.train(model, graphs["train"], graphs["val"], NodeClasses(4), cfg, seed=0)
    reference_weights = {k: v.clone() for k, v in model.state_dict().items()}

    model, graphs, cfg = tiny_training()
    with pytest.raises(Stopped):
        training.train(model, graphs["train"], graphs["val"], NodeClasses(4), cfg, seed=0,
                       checkpoint=StopAfter(tmp_path, stop_at))
    model, graphs, cfg = tiny_training()     # a fresh process would rebuild everything
    resumed = training.train(model, graphs["train"], graphs["val"], NodeClasses(4), cfg, seed=0,
                             checkpoint=EpochCheckpoint(tmp_path, "k", "inputs"))
    assert resumed == reference
    assert all(torch.equal(model.state_dict()[k], v) for k, v in reference_weights.items())


@pytest.mark.parametrize("stop_at", [4, 6])
def test_resume_keeps_the_best_weights_of_an_earlier_epoch(tmp_path, stop_at):
    """Best epoch 4 of 8 (see tiny_training): stopped at or after it, the resumed run must
    still end on epoch 4's weights, which only the checkpoint holds."""
    from sklearn.metrics import f1_score

    from tests.runs.training_inputs import tiny_training

    model, graphs, cfg = tiny_training(learning_rate=0.2)
    reference = training.train(model, graphs["train"], graphs["val"], NodeClasses(4), cfg, seed=0)
    reference_weights = {k: v.clone() for k, v in model.state_dict().items()}
    assert reference.best_epoch == 4 < cfg["max_epochs"] == reference.epochs_run

    model, graphs, cfg = tiny_training(learning_rate=0.2)
    with pytest.raises(Stopped):
        training.train(model, graphs["train"], graphs["val"], NodeClasses(4), cfg, seed=0,
                       checkpoint=StopAfter(tmp_path, stop_at))
    model, graphs, cfg = tiny_training(learning_rate=0.2)
    resumed = training.train(model, graphs["train"], graphs["val"], NodeClasses(4), cfg, seed=0,
                             checkpoint=EpochCheckpoint(tmp_path, "k", "inputs"))
    assert resumed == reference
    assert all(torch.equal(model.state_dict()[k], v) for k, v in reference_weights.items())
    # the kept weights score the best validation macro-F1 (scikit-learn's f1_score), not the
    # last epoch's
    predicted = np.concatenate(training.predict_proba(model, graphs["val"])).argmax(axis=1)
    truth = torch.cat([graph.y for graph in graphs["val"]]).numpy()
    score = f1_score(truth, predicted, average="macro", zero_division=0)
    assert score == pytest.approx(max(reference.val_scores))
    assert score != pytest.approx(reference.val_scores[-1])


def test_a_checkpoint_of_other_inputs_is_not_resumed(tmp_path, capsys):
    """A checkpoint left by training on other pages (data seed 8) under the same file name:
    training on the seed-7 pages must start afresh and end as an uninterrupted run on them."""
    from dochar.models.checkpoints import inputs_digest
    from tests.runs.training_inputs import tiny_training

    model, graphs, cfg = tiny_training()
    reference = training.train(model, graphs["train"], graphs["val"], NodeClasses(4), cfg, seed=0)
    reference_weights = {k: v.clone() for k, v in model.state_dict().items()}

    model, other, cfg = tiny_training(data_seed=8)
    digest_other = inputs_digest(other["train"], other["val"])
    stopping = StopAfter(tmp_path, 2)
    stopping.inputs = digest_other
    with pytest.raises(Stopped):
        training.train(model, other["train"], other["val"], NodeClasses(4), cfg, seed=0,
                       checkpoint=stopping)
    capsys.readouterr()

    model, graphs, cfg = tiny_training()
    digest = inputs_digest(graphs["train"], graphs["val"])
    assert digest != digest_other
    history = training.train(model, graphs["train"], graphs["val"], NodeClasses(4), cfg, seed=0,
                             checkpoint=EpochCheckpoint(tmp_path, "k", digest))
    assert "resuming" not in capsys.readouterr().out
    assert history == reference
    assert all(torch.equal(model.state_dict()[k], v) for k, v in reference_weights.items())
