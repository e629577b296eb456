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
