"""The one training loop: seeded, early-stopped on the objective's validation score.

Every task trains here; its objective (:mod:`dochar.models.objectives`) supplies the loss, the
validation score and, for links, the decision threshold kept with the best epoch.
"""

from __future__ import annotations

import copy
import math
import os
import random
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import torch
from threadpoolctl import threadpool_limits
from torch_geometric.data import Batch, Data
from torch_geometric.loader import DataLoader
from tqdm import tqdm

from dochar.models.objectives import NodeClasses

_THREAD_LIMITS: list = []  # held for the life of the process: OpenMP/BLAS pools stay capped


def seed_everything(seed: int, threads: int) -> None:
    """Make a CPU rerun bit-identical: seeds, a fixed thread count (torch and the OpenMP/BLAS
    pools scikit-learn uses), deterministic kernels."""
    _THREAD_LIMITS[:] = [threadpool_limits(limits=threads)]
    random.seed(seed)
    np.random.seed(seed)
    torch.manual_seed(seed)
    torch.set_num_threads(threads)
    torch.use_deterministic_algorithms(True)
    # deterministic mode also fills every new tensor with NaN (a guard for kernels that read
    # memory they never wrote); no kernel here does, and the fills cost ~8% of a training epoch
    torch.utils.deterministic.fill_uninitialized_memory = False
    os.environ.setdefault("CUBLAS_WORKSPACE_CONFIG", ":4096:8")


def predict_proba(model: torch.nn.Module, graphs: Sequence[Data]) -> list[np.ndarray]:
    """Class probabilities per page of a node classifier (eval mode)."""
    return NodeClasses(1).outputs(model, graphs)


@dataclass
class TrainHistory:
    best_epoch: int = 0
    best_val_score: float = -1.0
    epochs_run: int = 0
    threshold: float | None = None      # the objective's decision threshold at the best epoch
    score_name: str = "val_macro_f1"
    losses: list[float] = field(default_factory=list)
    val_scores: list[float] = field(default_factory=list)
    learning_rates: list[float] = field(default_factory=list)

    def curve(self) -> pd.DataFrame:
        """One row per epoch: mean training loss, the validation score (when there is a
        validation set), learning rate, and whether it is the epoch whose weights were kept."""
        epochs = np.arange(1, len(self.losses) + 1)
        frame = pd.DataFrame({"epoch": epochs, "train_loss": self.losses,
                              "learning_rate": self.learning_rates[:len(epochs)]})
        if self.val_scores:
            frame[self.score_name] = self.val_scores[:len(epochs)]
        frame["kept"] = frame["epoch"] == self.best_epoch
        return frame.set_index("epoch")


def epoch_learning_rate(cfg: Mapping[str, Any], epoch: int) -> float:
    """The learning rate of ``epoch`` (1-based): ``constant``, or ``cosine``: a linear warm-up
    over ``warmup_epochs``, then half a cosine from the peak toward zero, which it would reach
    one epoch past ``max_epochs`` (Loshchilov and Hutter, ICLR 2017, eq. 5, one cycle). A
    function of the epoch alone, so a resumed run continues the same curve."""
    peak, warmup = float(cfg["learning_rate"]), int(cfg.get("warmup_epochs", 0))
    if cfg.get("schedule", "constant") == "constant":
        return peak
    if epoch <= warmup:
        return peak * epoch / warmup
    decay = max(int(cfg["max_epochs"]) - warmup, 1)
    return peak * 0.5 * (1 + math.cos(math.pi * (epoch - warmup - 1) / decay))


def train(model: torch.nn.Module, train_graphs: Sequence[Data], val_graphs: Sequence[Data],
          objective: Any, cfg: Mapping[str, Any], seed: int,
          checkpoint: Any = None, last_epoch: int | None = None) -> TrainHistory:
    """AdamW on the objective's loss, at each epoch's learning rate; keep the weights of the
    best validation epoch. AdamW runs fused (one element-wise pass per tensor: a third of the
    time of torch's default per-operation update on CPU, and the same at any thread count).

    ``checkpoint`` (an ``EpochCheckpoint``) is saved after every epoch and resumed from first.
    ``last_epoch`` stops the run there, on the learning-rate curve of ``max_epochs``."""
    generator = torch.Generator().manual_seed(seed)
    optimizer = torch.optim.AdamW(model.parameters(), lr=float(cfg["learning_rate"]),
                                  weight_decay=float(cfg["weight_decay"]), fused=True)
    objective.start(train_graphs)
    history = TrainHistory(score_name=objective.score_name)
    best_state = copy.deepcopy(model.state_dict())
    val_batch = Batch.from_data_list(list(val_graphs)) if val_graphs else None
    first = 1
    if checkpoint is not None:
        first, best_state = checkpoint.restore(model, optimizer, generator, history, best_state)
    stop = int(cfg["max_epochs"]) if last_epoch is None else min(last_epoch,
                                                                  int(cfg["max_epochs"]))
    epochs = tqdm(range(first, stop + 1), desc="epochs", leave=False,
                  disable=None if cfg.get("progress", True) else True)
    for epoch in epochs:
        model.train()
        for group in optimizer.param_groups:
            group["lr"] = epoch_learning_rate(cfg, epoch)
        total = 0.0
        for batch in DataLoader(list(objective.epoch_graphs(train_graphs, epoch)),
                                batch_size=int(cfg["pages_per_batch"]), shuffle=True,
                                generator=generator):
            optimizer.zero_grad()
            loss = objective.loss(model, batch)
            loss.backward()
            optimizer.step()
            total += loss.item() * batch.num_graphs
        history.losses.append(total / max(len(train_graphs), 1))
        history.learning_rates.append(float(optimizer.param_groups[0]["lr"]))
        history.epochs_run = epoch
        if val_batch is None:  # no validation documents: train the full budget, keep the last
            best_state, history.best_epoch = copy.deepcopy(model.state_dict()), epoch
            history.threshold = objective.threshold
            if checkpoint is not None:
                checkpoint.save(epoch, model, optimizer, generator, history, best_state)
            continue
        score, threshold = objective.validate(model, val_batch)
        history.val_scores.append(score)
        if score > history.best_val_score:
            history.best_val_score, history.best_epoch = score, epoch
            history.threshold = threshold
            best_state = copy.deepcopy(model.state_dict())
        epochs.set_postfix(loss=f"{history.losses[-1]:.3f}", val=f"{score:.3f}",
                           best=f"{history.best_val_score:.3f}")
        if epoch - history.best_epoch >= int(cfg["patience"]):
            break
        if checkpoint is not None:
            checkpoint.save(epoch, model, optimizer, generator, history, best_state)
    model.load_state_dict(best_state)
    return history
