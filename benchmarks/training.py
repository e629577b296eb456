"""Training figures for the relational GNN, with the random forest beside it.

* one training epoch (the loop of :func:`dochar.models.training.train`, validation included),
  against the same weights computed the way the model was computed before its sparse product
  (:mod:`benchmarks.reference_training`), and, for context, the dense products of the relational
  layers alone: the arithmetic no loop or kernel change can avoid;
* training to the early stop (the preset's epochs and patience) against the forest's fit.

Prediction speed lives in :mod:`benchmarks.prediction`.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import torch
from omegaconf import OmegaConf

from benchmarks.inputs import RunInputs
from benchmarks.reference_training import reference_copy
from benchmarks.report import Figure, timed
from dochar.models.inputs import label_indices, to_graphs, to_matrix
from dochar.models.baselines import make_baseline
from dochar.models.objectives import NodeClasses
from dochar.models.training import seed_everything, train


def training_figures(inputs: RunInputs, repeats: int, judged: bool, trees: int = 300
                     ) -> list[Figure]:
    seed_everything(0, 1)
    index = {label: i for i, label in enumerate(inputs.labels)}
    graphs = {part: to_graphs(inputs.sets[part], inputs.featurizer, index)
              for part in ("train", "val")}
    one_epoch = {**OmegaConf.to_container(inputs.cfg.train), "max_epochs": 1, "progress": False}
    model = inputs.model()
    reference = reference_copy(model)
    same = same_function(model, reference, graphs["train"][:8])
    epoch, reference_epoch = (
        timed(lambda m=m: train(m, graphs["train"], graphs["val"],
                                NodeClasses(len(inputs.labels)), one_epoch, 0), repeats)
        for m in (model, reference))
    floor = timed(dense_products(inputs, graphs["train"]), repeats)
    words = sum(len(p) for p in inputs.sets["train"].pages)
    forest, forest_fit = fitted_forest(inputs, index, trees)
    full = {**OmegaConf.to_container(inputs.cfg.train), "progress": False}
    history = []
    to_stop = timed(lambda: history.append(train(inputs.model(), graphs["train"], graphs["val"],
                                                 NodeClasses(len(inputs.labels)), full, 0)))
    return [
        Figure("new layers compute the reference's function (largest logit difference)",
               f"{same:.1e}", "reference computation", comparison="<=", threshold=1e-4,
               number=same),
        Figure(f"training epoch, {len(graphs['train'])} pages ({words:,} words), seconds",
               f"{epoch:.3f} s", comparison="<=", threshold=0.2, judged=judged, number=epoch),
        Figure("training epoch: speed-up over the reference computation",
               f"{epoch:.3f} s", f"{reference_epoch:.3f} s", reference_epoch / epoch, ">=", 8,
               judged),
        Figure("the relational layers' dense products alone, one epoch (forward + backward)",
               f"{floor:.3f} s", number=floor),
        Figure(f"training to the early stop ({history[-1].epochs_run} epochs) / random forest "
               f"fit ({trees} trees), same words", f"{to_stop:.1f} s", f"{forest_fit:.1f} s",
               to_stop / forest_fit, "<=", 2, judged),
    ]


def same_function(model: torch.nn.Module, reference: torch.nn.Module, graphs) -> float:
    from torch_geometric.data import Batch

    batch = Batch.from_data_list(list(graphs))
    args = (batch.x, batch.edge_index, batch.edge_type, batch.chars)
    return float((model.predict_proba(*args) - reference.predict_proba(*args)).abs().max())


def dense_products(inputs: RunInputs, graphs) -> Callable[[], None]:
    """Each relational layer's one product [h | m_1 .. m_R] @ [W_0; W_1 .. W_R], forward and
    backward, batch by batch as an epoch sees them: the floor under any implementation. The
    operands are drawn before the clock starts."""
    from torch_geometric.loader import DataLoader

    width, relations = int(inputs.cfg.model.hidden_dim), len(inputs.sets["train"].relations)
    weight = torch.randn((relations + 1) * width, width, requires_grad=True)
    batches = DataLoader(list(graphs), batch_size=int(inputs.cfg.train.pages_per_batch))
    operands = [torch.randn(batch.num_nodes, (relations + 1) * width, requires_grad=True)
                for batch in batches for _ in range(int(inputs.cfg.model.depth))]

    def products() -> None:
        for stacked in operands:
            (stacked @ weight).sum().backward()
    return products


def fitted_forest(inputs: RunInputs, index: dict[str, int], trees: int):
    """The ``model=random_forest`` settings (300 trees; fewer in smoke mode) on the run's words."""
    cfg = inputs.cfg
    options = dict(n_estimators=trees, min_samples_leaf=1)
    forest = make_baseline("random_forest", 0, **options)
    x = to_matrix(inputs.sets["train"], inputs.featurizer,
                  hash_features=int(cfg.features.hash_features), neighbour_features=False)
    y = np.concatenate([label_indices(p, index) for p in inputs.sets["train"].pages])
    return forest, timed(lambda: forest.fit(x, y))
