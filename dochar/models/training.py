"""The training loop: seeded, class-weighted, early-stopped on validation macro-F1."""

from __future__ import annotations

import copy
import os
import random
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import torch
from sklearn.metrics import f1_score
from threadpoolctl import threadpool_limits
from torch_geometric.data import Batch, Data
from torch_geometric.loader import DataLoader
from tqdm import tqdm

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


def class_weights(graphs: Sequence[Data], num_classes: int, scheme: str) -> torch.Tensor:
    """Inverse-frequency weights n / (C * n_c) (scikit-learn's 'balanced'); absent classes get 1."""
    if scheme == "none":
        return torch.ones(num_classes)
    if scheme != "balanced":
        raise ValueError(f"train.class_weighting: expected 'balanced' or 'none', got {scheme!r}")
    counts = torch.bincount(torch.cat([g.y for g in graphs]), minlength=num_classes).double()
    weights = counts.sum() / (num_classes * counts.clamp(min=1))
    weights[counts == 0] = 1.0
    return weights.float()


def forward(model: torch.nn.Module, batch: Data) -> torch.Tensor:
    return model(batch.x, batch.edge_index, batch.edge_type, getattr(batch, "chars", None))


def predict_batch(model: torch.nn.Module, batch: Batch) -> torch.Tensor:
    """Class probabilities of every word of a batch (the stack's eval-mode prediction)."""
    return model.predict_proba(batch.x, batch.edge_index, batch.edge_type,
                               getattr(batch, "chars", None))


def predict_proba(model: torch.nn.Module, graphs: Sequence[Data]) -> list[np.ndarray]:
    batch = Batch.from_data_list(list(graphs))
    sizes = torch.diff(batch.ptr).tolist()
    return [part.numpy() for part in torch.split(predict_batch(model, batch), sizes)]


def macro_f1(model: torch.nn.Module, batch: Batch) -> float:
    y_pred = predict_batch(model, batch).argmax(dim=1).numpy()
    return float(f1_score(batch.y.numpy(), y_pred, average="macro", zero_division=0))


@dataclass
class TrainHistory:
    best_epoch: int = 0
    best_val_macro_f1: float = -1.0
    epochs_run: int = 0
    losses: list[float] = field(default_factory=list)
    val_scores: list[float] = field(default_factory=list)
    learning_rates: list[float] = field(default_factory=list)

    def curve(self) -> pd.DataFrame:
        """One row per epoch: mean training loss, validation macro-F1 (when there is a
        validation set), learning rate, and whether it is the epoch whose weights were kept."""
        epochs = np.arange(1, len(self.losses) + 1)
        frame = pd.DataFrame({"epoch": epochs, "train_loss": self.losses,
                              "learning_rate": self.learning_rates[:len(epochs)]})
        if self.val_scores:
            frame["val_macro_f1"] = self.val_scores[:len(epochs)]
        frame["kept"] = frame["epoch"] == self.best_epoch
        return frame.set_index("epoch")


def train(model: torch.nn.Module, train_graphs: Sequence[Data], val_graphs: Sequence[Data],
          num_classes: int, cfg: Mapping[str, Any], seed: int,
          checkpoint: Any = None) -> TrainHistory:
    """AdamW on weighted cross-entropy; keep the weights of the best validation epoch.

    ``checkpoint`` (an ``EpochCheckpoint``) is saved after every epoch and resumed from first."""
    loader = DataLoader(list(train_graphs), batch_size=int(cfg["pages_per_batch"]), shuffle=True,
                        generator=torch.Generator().manual_seed(seed))
    optimizer = torch.optim.AdamW(model.parameters(), lr=float(cfg["learning_rate"]),
                                  weight_decay=float(cfg["weight_decay"]))
    loss_fn = torch.nn.CrossEntropyLoss(
        weight=class_weights(train_graphs, num_classes, cfg["class_weighting"]))
    history, best_state = TrainHistory(), copy.deepcopy(model.state_dict())
    val_batch = Batch.from_data_list(list(val_graphs)) if val_graphs else None
    first = 1
    if checkpoint is not None:
        first, best_state = checkpoint.restore(model, optimizer, loader.generator, history,
                                               best_state)
    epochs = tqdm(range(first, int(cfg["max_epochs"]) + 1), desc="epochs", leave=False,
                  disable=None if cfg.get("progress", True) else True)
    for epoch in epochs:
        model.train()
        total = 0.0
        for batch in loader:
            optimizer.zero_grad()
            loss = loss_fn(forward(model, batch), batch.y)
            loss.backward()
            optimizer.step()
            total += loss.item() * batch.num_graphs
        history.losses.append(total / len(train_graphs))
        history.learning_rates.append(float(optimizer.param_groups[0]["lr"]))
        if val_batch is None:  # no validation documents: train the full budget, keep the last
            best_state, history.best_epoch, history.epochs_run = model.state_dict(), epoch, epoch
            if checkpoint is not None:
                checkpoint.save(epoch, model, optimizer, loader.generator, history, best_state)
            continue
        score = macro_f1(model, val_batch)
        history.val_scores.append(score)
        history.epochs_run = epoch
        if score > history.best_val_macro_f1:
            history.best_val_macro_f1, history.best_epoch = score, epoch
            best_state = copy.deepcopy(model.state_dict())
        epochs.set_postfix(loss=f"{history.losses[-1]:.3f}", val_f1=f"{score:.3f}",
                           best=f"{history.best_val_macro_f1:.3f}")
        if epoch - history.best_epoch >= int(cfg["patience"]):
            break
        if checkpoint is not None:
            checkpoint.save(epoch, model, optimizer, loader.generator, history, best_state)
    model.load_state_dict(best_state)
    return history
