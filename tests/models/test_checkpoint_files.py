"""The checkpoint file's parts: what its key and inputs digest depend on, which unfinished
writes are removed, and that a failed write keeps the previous checkpoint whole.

Expected values are the documented rules of dochar/models/checkpoints.py worked out by hand:
a digest changes when any tensor training sees changes (common practice: a content hash), the
key ignores the display-only settings, and a ``<key>.pt.<pid>-<random>.partial`` file
(dochar/data/files.py) is removed unless another process with that pid still runs
(``os.kill(pid, 0)``, POSIX ``kill(2)``).
"""

from __future__ import annotations

import os
import random
import subprocess
import sys
from dataclasses import make_dataclass

import numpy as np
import pytest
import torch
from torch_geometric.data import Data

from dochar.data import files
from dochar.data.files import OutputWriteError, remove_stale_partials
from dochar.models import checkpoints
from dochar.models.checkpoints import EpochCheckpoint, inputs_digest, training_key


def _graph(**change) -> Data:
    tensors = {"x": torch.zeros(3, 2), "y": torch.tensor([0, 1, 0]),
               "edge_index": torch.tensor([[0, 1], [1, 2]]), "edge_type": torch.tensor([0, 1]),
               "chars": torch.tensor([[3, 4], [5, 0], [6, 0]])}
    return Data(**{**tensors, **change})


@pytest.mark.parametrize("name, value", [
    ("x", torch.ones(3, 2)), ("y", torch.tensor([1, 1, 0])),
    ("edge_index", torch.tensor([[0, 2], [1, 2]])), ("edge_type", torch.tensor([1, 1])),
    ("chars", torch.tensor([[3, 4], [5, 0], [6, 1]]))])
def test_the_inputs_digest_changes_with_every_tensor_training_sees(name, value):
    same = inputs_digest([_graph()], [_graph()])
    assert same == inputs_digest([_graph()], [_graph()])           # a function of the content
    assert len(same) == 20 and int(same, 16) >= 0                    # 20 hex digits
    assert inputs_digest([_graph(**{name: value})], [_graph()]) != same
    assert inputs_digest([_graph()], [_graph(**{name: value})]) != same


def test_the_inputs_digest_tells_which_set_a_page_is_in():
    """A page moved from training to validation is other inputs."""
    a, b = _graph(), _graph(x=torch.ones(3, 2))
    assert inputs_digest([a, b], []) != inputs_digest([a], [b])
    # the tensor's name is hashed too: the same bytes under another name are other inputs
    assert inputs_digest([Data(x=torch.zeros(2))]) != inputs_digest([Data(y=torch.zeros(2))])


def test_the_training_key_ignores_display_settings_only():
    model, train = {"layer": "relational", "depth": 1}, {"max_epochs": 8, "progress": True,
                                                          "checkpoint_dir": "/a"}
    key = training_key(model, train, 0, "inputs")
    assert len(key) == 20
    assert training_key(model, {**train, "progress": False, "checkpoint_dir": "/b"}, 0,
                        "inputs") == key
    assert training_key(model, {**train, "max_epochs": 9}, 0, "inputs") != key
    assert training_key({**model, "depth": 2}, train, 0, "inputs") != key
    assert training_key(model, train, 1, "inputs") != key
    assert training_key(model, train, 0, "other inputs") != key


def test_the_training_key_reads_omegaconf_sections_like_dicts():
    from omegaconf import OmegaConf

    model, train = {"depth": 1, "hidden": "${depth}"}, {"max_epochs": 8}
    resolved = training_key({"depth": 1, "hidden": 1}, train, 0, "i")
    assert training_key(OmegaConf.create(model), OmegaConf.create(train), 0, "i") == resolved


def _dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def test_partials_of_finished_writers_are_removed_and_a_running_writers_kept(tmp_path, caplog):
    dead = _dead_pid()
    running = subprocess.Popen([sys.executable, "-c", "import sys; sys.stdin.readline(); "
                                "print('still running')"], stdin=subprocess.PIPE,
                               stdout=subprocess.PIPE, text=True)
    try:
        names = {"dead": f"k.pt.{dead}-0a1b.partial",
                 "running": f"k.pt.{running.pid}-0a1b.partial",
                 "own": f"k.pt.{os.getpid()}-0a1b.partial", "no pid": "k.pt.x.partial",
                 "checkpoint": "k.pt", "other file": "notes.partial"}
        for name in names.values():
            (tmp_path / name).write_bytes(b"half")
        with caplog.at_level("INFO", logger=files.__name__):
            removed = remove_stale_partials(tmp_path)
        # asked whether it runs (signal 0), not signalled: it lives on to answer
        assert running.communicate("go\n", timeout=60) == ("still running\n", None)
    finally:
        running.kill()
        running.wait()
    gone = {names["dead"]}   # this process's own and unnamed partials are not a dead writer's
    assert sorted(p.name for p in removed) == sorted(gone)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(set(names.values()) - gone)
    assert sorted(r.getMessage() for r in caplog.records) == sorted(
        f"removed {tmp_path / name}, a write its killed process left unfinished"
        for name in gone)


def test_a_partial_another_start_removed_first_is_no_error(tmp_path, monkeypatch):
    """Two runs starting in one folder may both list a stale partial; the second to remove it
    finds it gone."""
    gone = tmp_path / "k.pt.4194305-0a1b.partial"  # above Linux's largest pid: no such process
    monkeypatch.setattr(files.Path, "glob", lambda self, pattern: iter([gone]))
    assert remove_stale_partials(tmp_path) == []


def test_a_writer_of_another_user_counts_as_running(monkeypatch):
    """kill(2) fails with EPERM for a process that exists under another user (POSIX)."""
    def refused(pid, signal):
        raise PermissionError(1, "Operation not permitted")

    monkeypatch.setattr(files.os, "kill", refused)
    assert files.process_running(12345) is True


def test_removing_a_checkpoint_removes_its_file_and_stale_partials_only(tmp_path):
    checkpoint = EpochCheckpoint(tmp_path, "k", "inputs")
    for name in ("k.pt", "other.pt", f"k.pt.{_dead_pid()}-0a1b.partial"):
        (tmp_path / name).write_bytes(b"x")
    checkpoint.remove()
    assert [p.name for p in tmp_path.iterdir()] == ["other.pt"]
    checkpoint.remove()                        # nothing left to remove is no error
    assert [p.name for p in tmp_path.iterdir()] == ["other.pt"]


def test_a_write_that_fails_keeps_the_previous_checkpoint(tmp_path, monkeypatch):
    model = torch.nn.Linear(2, 1)
    optimizer = torch.optim.SGD(model.parameters(), lr=0.1)
    generator = torch.Generator().manual_seed(0)
    history = make_dataclass("History", [("losses", list)])([1.0])
    checkpoint = EpochCheckpoint(tmp_path, "k", "inputs")
    checkpoint.save(1, model, optimizer, generator, history, {"w": torch.ones(1)})
    before = checkpoint.path.read_bytes()

    def fail(state, handle):
        handle.write(b"half a checkpoint")
        raise OSError("disk full")

    monkeypatch.setattr(checkpoints.torch, "save", fail)
    with pytest.raises(OutputWriteError, match="disk full"):
        checkpoint.save(2, model, optimizer, generator, history, {"w": torch.zeros(1)})
    assert checkpoint.path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["k.pt"]


def test_restore_gives_back_the_random_states_and_the_saved_best(tmp_path, capsys):
    """What the next epoch draws after a restore is what it drew after the save; the folder
    is created on the first save, however deep."""
    tmp_path = tmp_path / "not" / "there"
    History = make_dataclass("History", [("losses", list), ("best_epoch", int)])
    model = torch.nn.Linear(2, 1)
    optimizer = torch.optim.SGD(model.parameters(), lr=0.1)
    generator = torch.Generator().manual_seed(3)
    torch.manual_seed(4), np.random.seed(5), random.seed(6)
    np.random.normal()                                  # a cached Gaussian in NumPy's state
    best = {"w": torch.full((1,), 7.0)}
    checkpoint = EpochCheckpoint(tmp_path, "k", "inputs")
    checkpoint.save(3, model, optimizer, generator, History([0.5, 0.25], 2), best)
    expected = (torch.rand(2, generator=generator), torch.rand(2), np.random.normal(),
                np.random.rand(), random.random())

    torch.manual_seed(0), np.random.seed(0), random.seed(0)
    fresh_generator = torch.Generator().manual_seed(0)
    history = History([], 0)
    first, kept = EpochCheckpoint(tmp_path, "k", "inputs").restore(
        torch.nn.Linear(2, 1), torch.optim.SGD(model.parameters(), lr=0.1), fresh_generator,
        history, {"w": torch.zeros(1)})
    assert first == 4 and torch.equal(kept["w"], best["w"])
    assert capsys.readouterr().out == (f"resuming training from the checkpoint of epoch 3: "
                                       f"{tmp_path / 'k.pt'}\n")
    assert history == History([0.5, 0.25], 2)
    drawn = (torch.rand(2, generator=fresh_generator), torch.rand(2), np.random.normal(),
             np.random.rand(), random.random())
    assert torch.equal(drawn[0], expected[0]) and torch.equal(drawn[1], expected[1])
    assert drawn[2:] == expected[2:]


def test_no_checkpoint_file_starts_at_epoch_one_with_the_given_best(tmp_path):
    best = {"w": torch.ones(1)}
    first, kept = EpochCheckpoint(tmp_path, "k", "inputs").restore(
        torch.nn.Linear(2, 1), None, None, None, best)
    assert first == 1 and kept is best


def test_a_checkpoint_of_other_inputs_is_named_in_the_warning(tmp_path, caplog):
    model = torch.nn.Linear(2, 1)
    optimizer = torch.optim.SGD(model.parameters(), lr=0.1)
    history = make_dataclass("History", [("losses", list)])([1.0])
    EpochCheckpoint(tmp_path, "k", "old inputs").save(1, model, optimizer, torch.Generator(),
                                                      history, {})
    with caplog.at_level("WARNING", logger=checkpoints.__name__):
        first, _ = EpochCheckpoint(tmp_path, "k", "new inputs").restore(
            model, optimizer, torch.Generator(), history, {})
    assert first == 1
    assert [r.getMessage() for r in caplog.records] == [
        f"checkpoint {tmp_path / 'k.pt'} is of other training inputs; starting afresh"]


class _Planted:
    """Unpickling this runs code (pickle's __reduce__ protocol): a checkpoint must never."""

    ran = False

    def __reduce__(self):
        return (_mark_ran, ())


def _mark_ran():
    _Planted.ran = True
    return {}


def test_a_checkpoint_holding_code_is_refused_unrun(tmp_path):
    """torch.load(weights_only=True) refuses globals it does not allow (torch's serialization
    notes); the checkpoint must be loaded that way."""
    torch.save({"inputs": "inputs", "epoch": 1, "model": _Planted()}, tmp_path / "k.pt")
    with pytest.raises(Exception, match="(?i)weights_only|unsupported global"):
        EpochCheckpoint(tmp_path, "k", "inputs").restore(
            torch.nn.Linear(2, 1), None, None, None, {})
    assert _Planted.ran is False


def test_a_write_that_cannot_start_raises_its_own_error(tmp_path, monkeypatch):
    """No partial file was made, so there is none to clean up: the caller sees why the write
    failed, not a missing file."""
    def refused(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(checkpoints, "open", refused, raising=False)
    model = torch.nn.Linear(2, 1)
    history = make_dataclass("History", [("losses", list)])([])
    with pytest.raises(OutputWriteError, match="permission denied"):
        EpochCheckpoint(tmp_path, "k", "inputs").save(
            1, model, torch.optim.SGD(model.parameters(), lr=0.1), torch.Generator(), history, {})
    assert list(tmp_path.iterdir()) == []
