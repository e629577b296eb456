"""The learning rate of each epoch against the cosine schedule of Loshchilov and Hutter (SGDR,
ICLR 2017, eq. 5, one cycle, eta_min = 0) after a linear warm-up (Goyal et al. 2017), worked by
hand for a peak of 1."""

from __future__ import annotations

import math

import pytest

from dochar.models.training import epoch_learning_rate

COSINE = {"learning_rate": 1.0, "schedule": "cosine", "warmup_epochs": 2, "max_epochs": 6}


def test_constant_schedule_keeps_the_rate():
    cfg = {"learning_rate": 0.003, "schedule": "constant", "warmup_epochs": 5, "max_epochs": 9}
    assert [epoch_learning_rate(cfg, e) for e in range(1, 10)] == [0.003] * 9
    assert epoch_learning_rate({"learning_rate": 0.01, "max_epochs": 3}, 2) == 0.01  # no keys


def test_cosine_warms_up_then_decays_by_half_a_cosine():
    # warm-up epochs 1, 2: 1/2, 2/2; then T_cur = 0, 1, 2, 3 of T = 6 - 2 = 4 epochs:
    # 0.5 * (1 + cos(pi * T_cur / 4)) = 1, 0.8536, 0.5, 0.1464
    expected = [0.5, 1.0, 1.0, 0.5 * (1 + math.sqrt(0.5)), 0.5, 0.5 * (1 - math.sqrt(0.5))]
    got = [epoch_learning_rate(COSINE, e) for e in range(1, 7)]
    assert got == pytest.approx(expected, abs=1e-12)
    assert epoch_learning_rate({**COSINE, "warmup_epochs": 0}, 1) == 1.0   # no warm-up
