"""Class weights against scikit-learn's compute_class_weight("balanced"): n / (C * n_c)."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from sklearn.utils.class_weight import compute_class_weight
from torch_geometric.data import Data

from dochar.models.objectives import class_weights


def pages(*labels: list[int]) -> list[Data]:
    return [Data(y=torch.tensor(page)) for page in labels]


def test_balanced_weights_equal_scikit_learns():
    y = [0, 0, 0, 1, 2, 2, 3, 3, 3, 3, 3, 1]
    expected = compute_class_weight("balanced", classes=np.arange(4), y=np.array(y))
    got = class_weights(pages(y[:5], y[5:]), 4, "balanced")
    assert got.numpy() == pytest.approx(expected, rel=1e-6)


def test_absent_class_gets_one_and_present_ones_keep_sklearns_ratios():
    """With a class absent, dochar divides by all C classes, scikit-learn by the present ones:
    the present weights differ by the constant factor C_present / C."""
    y = np.array([0, 0, 2, 2, 2, 3])
    expected = compute_class_weight("balanced", classes=np.array([0, 2, 3]), y=y)
    got = class_weights(pages(y.tolist()), 4, "balanced").numpy()
    assert got[1] == 1.0
    assert got[[0, 2, 3]] == pytest.approx(expected * 3 / 4, rel=1e-6)


def test_no_weighting_is_all_ones():
    assert class_weights(pages([0, 1]), 3, "none").tolist() == [1.0, 1.0, 1.0]


class _Fixed(torch.nn.Module):
    """A 'network' that returns given logits, so the loss alone is under test."""

    def __init__(self, logits: list[list[float]]) -> None:
        super().__init__()
        self.logits = torch.tensor(logits)

    def forward(self, *inputs) -> torch.Tensor:
        return self.logits


def test_label_smoothing_matches_the_formula_worked_by_hand():
    """Szegedy et al., CVPR 2016, section 7: the target is (1 − ε) on the true class plus ε / C
    on every class, so the loss is (1 − ε)(−log p_y) + (ε / C) Σ_c (−log p_c)."""
    from dochar.models.objectives import NodeClasses

    logits = [[2.0, 0.5, -1.0], [0.0, 1.0, 3.0]]
    y = [0, 1]
    epsilon, classes = 0.1, 3
    z = np.array(logits)
    log_p = z - np.log(np.exp(z).sum(axis=1, keepdims=True))
    expected = np.mean([(1 - epsilon) * -log_p[i, y[i]] + epsilon / classes * -log_p[i].sum()
                        for i in range(2)])
    objective = NodeClasses(classes, "none", label_smoothing=epsilon)
    objective.start(pages(y))
    batch = Data(x=torch.zeros(2, 1), edge_index=torch.zeros(2, 0, dtype=torch.long),
                 edge_type=torch.zeros(0, dtype=torch.long), y=torch.tensor(y))
    assert objective.loss(_Fixed(logits), batch).item() == pytest.approx(expected, rel=1e-6)
    plain = NodeClasses(classes, "none")
    plain.start(pages(y))
    assert plain.loss(_Fixed(logits), batch).item() == pytest.approx(
        np.mean([-log_p[i, y[i]] for i in range(2)]), rel=1e-6)


@pytest.mark.parametrize("epsilon", [-0.1, 1.0])
def test_label_smoothing_outside_zero_to_one_is_refused_by_its_key(epsilon):
    from dochar.models.objectives import NodeClasses, TrainOptionError

    with pytest.raises(TrainOptionError, match="train.label_smoothing"):
        NodeClasses(3, "none", label_smoothing=epsilon)


def test_the_run_option_reaches_the_loss():
    from dochar.models.objectives import objective_for

    objective = objective_for("nodes", {"class_weighting": "none", "label_smoothing": 0.2},
                              num_classes=3, seed=0)
    objective.start(pages([0, 1, 2]))
    assert objective.loss_fn.label_smoothing == 0.2
