"""Resume: a run killed during training and started again with the same config ends with the
same scores, bit for bit, as a run never interrupted.

The training loop is deterministic (tests/test_determinism.py), so resuming is exact when the
checkpoint restores every state the next epoch reads: weights, optimiser moments, the loader's
shuffling generator and the global random states, the history and the best weights so far.

A kill can land anywhere, so the command-line tests kill a real `dochar run` at chosen instants
(tests/runs/kill_points.py: mid-epoch, inside the checkpoint write at a given byte, between the
write and its rename, right after a save, after training) and start it again: every time the
scores equal an uninterrupted run's and no checkpoint or partial file is left.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import torch

from dochar.gate.command import run_reference
from dochar.models import training
from dochar.data.files import writer_pid
from dochar.models.checkpoints import EpochCheckpoint
from dochar.models.objectives import NodeClasses
from tests.helpers import REPO

# Dropout and a shuffled loader of several batches, so both the global torch RNG and the
# shuffling generator matter: a resume that forgot either would drift.
EPOCHS = 12
RUN = ["data.documents=24", "split=random", "model=relational", "model.hidden_dim=16",
       "model.depth=1", "model.dropout=0.3", "features=geometry_text",
       f"train.max_epochs={EPOCHS}", f"train.patience={EPOCHS}", "train.pages_per_batch=4",
       "train.progress=false", "tracking.enabled=false", "evaluation.bootstrap_resamples=50"]
TIMINGS = {"train_seconds", "pages_per_second"}
KILLED = -signal.SIGKILL

# Kill points (tests/runs/kill_points.py) and the epoch the next start must resume from
# (None: no whole checkpoint yet, it starts afresh). The default suite kills one run three
# times (inside a checkpoint write, mid-epoch, after training); the slow tests kill a fresh
# run at each of many instants, and one run again and again.
BATCHES_PER_EPOCH = 4     # the split's training pages in batches of train.pages_per_batch


def killed_in_batch(n: int) -> tuple[str, int | None]:
    """Kill before the n-th batch of a fresh start: the epoch before is the last saved."""
    return f"batch:{n}", ((n - 1) // BATCHES_PER_EPOCH) or None


SLOW_POINTS = [
    *[(f"write:1:{size}", None) for size in (1, 64, 4096)],
    *[(f"write:{epoch}:{size}", epoch - 1) for epoch, size in
      ((2, 1), (2, 30), (4, 512), (7, 2000), (9, 5000), (EPOCHS, 100_000))],
    ("written:1", None), ("written:6", 5), ("saved:1", 1), ("saved:5", 5),
    *[killed_in_batch(n) for n in (2, 9, 17, 30, 41, 48)],
    ("trained", EPOCHS),
]


def scores(summary: dict) -> dict:
    return {"metrics": summary["metrics"],
            "cost": {k: v for k, v in summary["cost"].items() if k not in TIMINGS}}


def start_run(cwd: Path, checkpoints: Path, run_dir: Path,
              kill_at: str | None = None) -> subprocess.Popen:
    entry = ["-m", "tests.runs.kill_points", kill_at] if kill_at else ["-m", "dochar.cli", "run"]
    command = [sys.executable, *entry, *RUN, f"train.checkpoint_dir={checkpoints}",
               f"hydra.run.dir={run_dir}"]
    return subprocess.Popen(command, cwd=cwd, env={**os.environ, "PYTHONPATH": str(REPO)},
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)


def finish(process: subprocess.Popen) -> str:
    output, _ = process.communicate(timeout=900)
    return output


@pytest.fixture(scope="module")
def uninterrupted() -> dict:
    reference = run_reference([*RUN, "train.checkpoint_dir=null"])
    return scores({"metrics": reference.metrics, "cost": reference.cost})


def check_resumed(output: str, epoch: int | None) -> None:
    if epoch is None:
        assert "resuming training" not in output, output[-3000:]
    else:
        assert f"resuming training from the checkpoint of epoch {epoch}:" in output, output[-3000:]


def kill_and_resume(tmp_path: Path, legs: list[tuple[str, int | None]], expected: dict) -> None:
    """Start the run once per leg, each killed at its point, then once more to the end. After
    each kill: the run folder is not written and a kill inside a write left its partial file;
    at each next start: it resumed from the epoch expected and the stale partial is gone; at the
    end: the uninterrupted run's scores and an empty checkpoint folder."""
    checkpoints = tmp_path / "checkpoints"
    resume_epoch: int | None = None
    stale: list[Path] = []
    for leg, (point, next_epoch) in enumerate(legs):
        process = start_run(tmp_path, checkpoints, tmp_path / f"leg{leg}", kill_at=point)
        output = finish(process)
        assert process.returncode == KILLED, f"{point}: not reached\n{output[-3000:]}"
        if leg:
            check_resumed(output, resume_epoch)
        assert not [p for p in stale if p.exists()], f"{point}: a stale partial outlived a start"
        assert not (tmp_path / f"leg{leg}" / "run" / "summary.json").exists()
        stale = list(checkpoints.glob("*.partial"))
        if point.startswith(("write", "written")):
            assert [writer_pid(p) for p in stale] == [process.pid], point
            if point.startswith("write"):
                assert 0 < stale[0].stat().st_size <= int(point.split(":")[2])
        resume_epoch = next_epoch
    resumed = start_run(tmp_path, checkpoints, tmp_path / "resumed")
    output = finish(resumed)
    assert resumed.returncode == 0, output[-3000:]
    check_resumed(output, resume_epoch)
    assert not list(checkpoints.glob("*")), "a finished run leaves no checkpoint nor partial"
    summary = json.loads((tmp_path / "resumed" / "run" / "summary.json").read_text())
    assert scores(summary) == expected        # exact float equality, every metric


def test_a_run_killed_three_times_resumes_to_identical_scores(tmp_path, uninterrupted):
    """Killed inside the write of epoch 3's checkpoint (700 bytes in), then, resumed from
    epoch 2, in the 3rd batch of epoch 4, then, resumed from epoch 3, after training."""
    legs = [("write:3:700", 2), (f"batch:{BATCHES_PER_EPOCH + 3}", 3), ("trained", EPOCHS)]
    kill_and_resume(tmp_path, legs, uninterrupted)


@pytest.mark.slow
@pytest.mark.parametrize("point, resume_epoch", SLOW_POINTS, ids=[p for p, _ in SLOW_POINTS])
def test_a_run_killed_anywhere_resumes_to_identical_scores(tmp_path, uninterrupted, point,
                                                           resume_epoch):
    kill_and_resume(tmp_path, [(point, resume_epoch)], uninterrupted)


@pytest.mark.slow
def test_a_run_killed_again_while_resuming_still_ends_identical(tmp_path, uninterrupted):
    """Each start resumes the one before and is killed further on, twice inside a write."""
    legs = [("write:2:300", 1), ("batch:9", 3), ("written:7", 6), ("saved:9", 9)]
    kill_and_resume(tmp_path, legs, uninterrupted)


class Stopped(Exception):
    pass


class StopAfter(EpochCheckpoint):
    """Saves like the real checkpoint, then stops the process's training at one epoch, as a kill
    right after a save would."""

    def __init__(self, folder, stop_at: int, inputs: str = "inputs") -> None:
        super().__init__(folder, "k", inputs)
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

    model, graphs, cfg = tiny_training(learning_rate=0.3)
    reference = training.train(model, graphs["train"], graphs["val"], NodeClasses(4), cfg, seed=0)
    reference_weights = {k: v.clone() for k, v in model.state_dict().items()}
    assert reference.best_epoch == 4 < cfg["max_epochs"] == reference.epochs_run

    model, graphs, cfg = tiny_training(learning_rate=0.3)
    with pytest.raises(Stopped):
        training.train(model, graphs["train"], graphs["val"], NodeClasses(4), cfg, seed=0,
                       checkpoint=StopAfter(tmp_path, stop_at))
    model, graphs, cfg = tiny_training(learning_rate=0.3)
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
