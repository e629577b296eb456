"""Epoch checkpoints of the training loop, so a killed run resumes where it stopped.

A checkpoint holds everything the next epoch depends on: model and optimiser states, the
loader's shuffling generator, the global torch / NumPy / Python random states, the epoch, the
history (scores, best epoch: the early-stopping counter is ``epoch - best_epoch``) and the best
weights so far. Resuming from it gives bit-identical results to an uninterrupted run, because
the loop is deterministic once those states are equal (tests/test_determinism.py).

Each save goes through :func:`dochar.data.files.atomic_write` (a partial file renamed over the
old one), so a kill at any moment leaves the previous checkpoint or the new one, never half of
one. A kill inside the write leaves that partial file (``<key>.pt.<pid>-<random>.partial``); the
next save or start in the folder and every run that ends remove the partials whose writing
process no longer runs. The file is keyed by the run's config hash
and the digest of its training inputs; a checkpoint of other inputs is never resumed.
"""

from __future__ import annotations

import dataclasses
import hashlib
import logging
import random
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import torch
from torch_geometric.data import Data

from dochar.data.files import atomic_write, remove_stale_partials

log = logging.getLogger(__name__)


def inputs_digest(*graph_sets: Sequence[Data]) -> str:
    """Digest of the tensors training sees (features, labels, edges, character ids), set by
    set: a page moved from training to validation makes other inputs."""
    digest = hashlib.sha256()
    for graphs in graph_sets:
        digest.update(f"set of {len(graphs)} graphs".encode())
        for graph in graphs:
            for name in ("x", "y", "edge_index", "edge_type", "chars"):
                value = getattr(graph, name, None)
                if isinstance(value, torch.Tensor):
                    digest.update(name.encode())
                    digest.update(value.contiguous().numpy().tobytes())
    return digest.hexdigest()[:20]


class EpochCheckpoint:
    """One checkpoint file per (config, inputs); removed once training has ended."""

    def __init__(self, folder: str | Path, key: str, inputs: str) -> None:
        self.path = Path(folder) / f"{key}.pt"
        self.inputs = inputs

    def save(self, epoch: int, model: torch.nn.Module, optimizer: torch.optim.Optimizer,
             generator: torch.Generator, history: Any, best_state: dict) -> None:
        state = {"epoch": epoch, "inputs": self.inputs, "model": model.state_dict(),
                 "optimizer": optimizer.state_dict(), "loader_generator": generator.get_state(),
                 "torch_rng": torch.get_rng_state(), "numpy_rng": _numpy_state(),
                 "python_rng": _python_state(), "history": dataclasses.asdict(history),
                 "best_state": best_state}
        with atomic_write(self.path) as scratch, open(scratch, "wb") as handle:
            torch.save(state, handle)   # a full disk, Ctrl-C: the previous checkpoint stays

    def restore(self, model: torch.nn.Module, optimizer: torch.optim.Optimizer,
                generator: torch.Generator, history: Any, best_state: dict) -> tuple[int, dict]:
        """Load the saved states into the given objects; return (first epoch to run, best)."""
        remove_stale_partials(self.path.parent)
        if not self.path.exists():
            return 1, best_state
        state = torch.load(self.path, weights_only=True)  # tensors and plain values only
        if state["inputs"] != self.inputs:
            log.warning("checkpoint %s is of other training inputs; starting afresh", self.path)
            return 1, best_state
        model.load_state_dict(state["model"])
        optimizer.load_state_dict(state["optimizer"])
        generator.set_state(state["loader_generator"])
        torch.set_rng_state(state["torch_rng"])
        _set_numpy_state(state["numpy_rng"])
        _set_python_state(state["python_rng"])
        for name, value in state["history"].items():
            setattr(history, name, value)
        print(f"resuming training from the checkpoint of epoch {state['epoch']}: {self.path}")
        return int(state["epoch"]) + 1, state["best_state"]

    def remove(self) -> None:
        self.path.unlink(missing_ok=True)
        remove_stale_partials(self.path.parent)


def _numpy_state() -> dict:
    """NumPy's legacy MT19937 state as tensors and numbers (loadable with weights_only)."""
    name, keys, position, has_gauss, cached = np.random.get_state()
    return {"name": name, "keys": torch.from_numpy(keys.astype(np.int64)),
            "position": int(position), "has_gauss": int(has_gauss), "cached": float(cached)}


def _set_numpy_state(state: dict) -> None:
    np.random.set_state((state["name"], state["keys"].numpy().astype(np.uint32),
                         state["position"], state["has_gauss"], state["cached"]))


def _python_state() -> dict:
    version, internal, gauss = random.getstate()
    return {"version": version, "internal": list(internal), "gauss": gauss}


def _set_python_state(state: dict) -> None:
    random.setstate((state["version"], tuple(state["internal"]), state["gauss"]))


def training_key(model_cfg: Any, train_cfg: Any, seed: int, inputs: str) -> str:
    """What decides the training trajectory given its inputs: model and training settings
    (without display-only keys), the seed and the inputs' digest."""
    train_settings = {k: v for k, v in dict(train_cfg).items()
                      if k not in {"progress", "checkpoint_dir"}}
    text = repr((sorted(_plain(model_cfg).items()), sorted(_plain(train_settings).items()),
                 seed, inputs))
    return hashlib.sha256(text.encode()).hexdigest()[:20]


def _plain(section: Any) -> dict:
    from omegaconf import DictConfig, OmegaConf

    if isinstance(section, DictConfig):
        return OmegaConf.to_container(section, resolve=True)
    return dict(section)
