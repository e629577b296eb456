"""Training figures for the relational GNN, with the random forest beside it.

* one training epoch (the loop of :func:`dochar.models.training.train`, validation included)
  against the dense products of the relational layers alone, the arithmetic no loop or kernel
  change can avoid; the model computes the same function as the way it was computed before
  (:mod:`benchmarks.reference_training`); beside it, for context, the dense arithmetic of the
  whole epoch (every layer, the char CNN, input and head, the validation pass) counted by
  ``torch.utils.flop_counter`` against the floor's, the share of the epoch the floor leaves out;
* training to the kept model with the preset's recipe (its schedule, epochs and patience)
  against the forest's fit, and the recipe's validation score against the recipe the preset
  had before issue 25 (:data:`EARLIER_RECIPE`), over seeds 0-2;
* training on two threads against one (wall clock), and two-thread reruns bit for bit.

Prediction speed lives in :mod:`benchmarks.prediction`.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import torch
from omegaconf import OmegaConf

from benchmarks.inputs import RunInputs
from benchmarks.reference_training import reference_copy
from benchmarks.report import Figure, timed
from dochar.models.inputs import label_indices, to_graphs, to_matrix
from dochar.models.baselines import make_baseline
from dochar.models.objectives import NodeClasses
from dochar.models.training import TrainHistory, seed_everything, train

# the FUNSD R-GCN preset's training recipe before issue 25: constant learning rate, 200 epochs,
# early stop after 40 without a better validation macro-F1
EARLIER_RECIPE = {"schedule": "constant", "warmup_epochs": 0, "max_epochs": 200, "patience": 40}
SEEDS = (0, 1, 2)
EPOCHS = 3   # epochs of the timed short run: its set-up is shared as in a run of many epochs


def training_figures(inputs: RunInputs, repeats: int, judged: bool, trees: int = 300,
                     earlier: Mapping[str, Any] = EARLIER_RECIPE) -> list[Figure]:
    seed_everything(0, 1)
    index = {label: i for i, label in enumerate(inputs.labels)}
    graphs = {part: to_graphs(inputs.sets[part], inputs.featurizer, index)
              for part in ("train", "val")}
    recipe = {**OmegaConf.to_container(inputs.cfg.train), "progress": False}
    model = inputs.model()
    same = same_function(model, reference_copy(model), graphs["train"][:8])
    short = {**recipe, "max_epochs": EPOCHS, "patience": EPOCHS}   # a run's set-up, shared
    epoch = timed(lambda: train(model, graphs["train"], graphs["val"],
                                NodeClasses(len(inputs.labels)), short, 0), repeats) / EPOCHS
    floor = timed(dense_products(inputs, graphs["train"]), repeats)
    arithmetic = epoch_flops(inputs, graphs, short) / counted_flops(
        dense_products(inputs, graphs["train"]))
    words = sum(len(p) for p in inputs.sets["train"].pages)
    _, forest_fit = fitted_forest(inputs, index, trees)
    runs = {name: [trained(inputs, graphs, settings, seed) for seed in SEEDS]
            for name, settings in (("faster", recipe), ("earlier", {**recipe, **earlier}))}
    to_kept, history = runs["faster"][0]
    scores = {name: np.array([h.best_val_score for _, h in found]) for name, found in runs.items()}
    spread = float(np.ptp(scores["earlier"]))
    gain = float(scores["faster"].mean() - scores["earlier"].mean())
    two, one, identical = thread_figures(inputs, graphs, {**recipe, "max_epochs": 4})
    return [
        Figure("new layers compute the reference's function (largest logit difference)",
               f"{same:.1e}", "reference computation", comparison="<=", threshold=1e-4,
               number=same),
        Figure(f"training epoch (mean of {EPOCHS}), {len(graphs['train'])} pages ({words:,} "
               f"words) / the relational layers' dense products alone (forward + backward), "
               f"one thread",
               f"{epoch:.3f} s", f"{floor:.3f} s", epoch / floor, "<=", 1.3, judged),
        Figure("dense arithmetic of that epoch (all layers, char CNN, input and head, the "
               "validation pass) / the floor's, floating-point operations counted by "
               "torch.utils.flop_counter", f"{arithmetic:.3f}", "1 (the floor)",
               number=arithmetic),
        Figure(f"training to the kept model (best epoch {history.best_epoch}, stopped at "
               f"{history.epochs_run}: {recipe['schedule']} schedule, patience "
               f"{recipe['patience']}) / random forest fit ({trees} trees), same words",
               f"{to_kept:.1f} s", f"{forest_fit:.1f} s", to_kept / forest_fit, "<=", 3,
               judged),
        Figure(f"validation macro-F1, preset recipe − earlier recipe (constant rate, patience "
               f"{earlier.get('patience', recipe['patience'])}), mean of seeds 0-2; target: "
               f"within the earlier recipe's seed range", f"{gain:+.3f} ("
               f"{' '.join(f'{v:.3f}' for v in scores['faster'])})",
               ' '.join(f'{v:.3f}' for v in scores["earlier"]), comparison=">=",
               threshold=round(-spread, 3), judged=judged, number=gain),
        Figure("training on 2 threads / 1 thread, 4 epochs, wall clock (an idle 2-core "
               "machine)", f"{two:.2f} s", f"{one:.2f} s", two / one, "<=", 0.6, judged),
        Figure("training twice on 2 threads: bit-identical weights", "yes" if identical else "NO",
               comparison=">=", threshold=1, number=float(identical)),
    ]


def trained(inputs: RunInputs, graphs: dict, recipe: Mapping[str, Any], seed: int
            ) -> tuple[float, TrainHistory]:
    """CPU seconds to the stop (the patience epochs included) and the history of one run."""
    seed_everything(seed, int(recipe["threads"]))
    model = inputs.model()
    history: list[TrainHistory] = []
    seconds = timed(lambda: history.append(train(model, graphs["train"], graphs["val"],
                                                 NodeClasses(len(inputs.labels)), recipe, seed)))
    return seconds, history[0]


def thread_figures(inputs: RunInputs, graphs: dict, recipe: Mapping[str, Any]
                   ) -> tuple[float, float, bool]:
    """Wall seconds of the same training on two threads and on one (CPU seconds would add the
    two threads up), and whether two runs on two threads end with identical weights."""
    def weights(threads: int) -> tuple[float, dict]:
        seed_everything(0, threads)
        model = inputs.model()
        started = time.perf_counter()
        train(model, graphs["train"], graphs["val"], NodeClasses(len(inputs.labels)),
              {**recipe, "threads": threads}, 0)
        return time.perf_counter() - started, model.state_dict()

    try:
        (two, first), (again, second) = weights(2), weights(2)
        one, _ = weights(1)
    finally:
        seed_everything(0, 1)
    identical = all(torch.equal(first[key], second[key]) for key in first)
    return min(two, again), one, identical      # the first run also starts the thread pool


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


def counted_flops(work: Callable[[], object]) -> int:
    """Floating-point operations of the dense products (mm, addmm, convolutions) ``work`` runs."""
    from torch.utils.flop_counter import FlopCounterMode

    with FlopCounterMode(display=False) as counter:
        work()
    return counter.get_total_flops()


def epoch_flops(inputs: RunInputs, graphs: dict, recipe: Mapping[str, Any]) -> int:
    """The dense arithmetic of one epoch of the preset, validation included, on a fresh model."""
    seed_everything(0, 1)
    model = inputs.model()
    return counted_flops(lambda: train(model, graphs["train"], graphs["val"],
                                       NodeClasses(len(inputs.labels)),
                                       {**recipe, "max_epochs": 1, "patience": 1}, 0))


def fitted_forest(inputs: RunInputs, index: dict[str, int], trees: int):
    """The ``model=random_forest`` settings (300 trees; fewer in smoke mode) on the run's words."""
    cfg = inputs.cfg
    options = dict(n_estimators=trees, min_samples_leaf=1)
    forest = make_baseline("random_forest", 0, **options)
    x = to_matrix(inputs.sets["train"], inputs.featurizer,
                  hash_features=int(cfg.features.hash_features), neighbour_features=False)
    y = np.concatenate([label_indices(p, index) for p in inputs.sets["train"].pages])
    return forest, timed(lambda: forest.fit(x, y))

