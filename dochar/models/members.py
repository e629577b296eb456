"""Several independently trained stacks whose class probabilities are averaged.

A deep ensemble (Lakshminarayanan, Pritzel and Blundell, "Simple and Scalable Predictive
Uncertainty Estimation using Deep Ensembles", NeurIPS 2017): each member starts from its own
seed and trains on its own; predictions are the mean of the members' softmax outputs. Networks
from different seeds make partly different errors, so their mean is steadier than any one of
them (on CORD's validation receipts: docs/results-receipts.md).
"""

from __future__ import annotations

import torch
from torch import Tensor


def member_seeds(seed: int, members: int) -> list[int]:
    """Run seed s with m members trains members with seeds s·m … s·m + m − 1, so the runs of
    different seeds share no member."""
    return [seed * members + index for index in range(members)]


class MemberAverage(torch.nn.Module):
    """``p(y | x) = (1/M) Σ_m softmax(f_m(x))``; ``forward`` returns ``log p`` so a softmax of it
    gives the mean back, and every caller treats it as logits."""

    def __init__(self, members: list[torch.nn.Module]) -> None:
        super().__init__()
        if len(members) < 2:
            raise ValueError(f"MemberAverage: needs at least 2 members, got {len(members)}")
        self.members = torch.nn.ModuleList(members)

    def forward(self, *inputs: Tensor | None) -> Tensor:
        return torch.log(self._mean(lambda member: torch.softmax(member(*inputs), dim=1)))

    @torch.no_grad()
    def predict_proba(self, *inputs: Tensor | None) -> Tensor:
        return self._mean(lambda member: member.predict_proba(*inputs))

    def _mean(self, probabilities) -> Tensor:
        total = probabilities(self.members[0])
        for member in self.members[1:]:
            total = total + probabilities(member)
        return total / len(self.members)
