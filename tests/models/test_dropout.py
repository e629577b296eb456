"""The GNN's dropout against the rule of inverted dropout (Srivastava et al., JMLR 2014, and
``torch.nn.Dropout``'s documentation): keep each element with probability 1 - p, scale the kept
by 1 / (1 - p), identity in eval mode."""

from __future__ import annotations

import pytest
import torch
from scipy.stats import binomtest, chisquare

from dochar.models.dropout import Dropout


@pytest.mark.parametrize("p", [0.1, 0.3, 0.5, 0.9])
def test_kept_share_and_scale_follow_p(p):
    torch.manual_seed(0)
    x = torch.full((300, 128), 2.0)
    out = Dropout(p)(x)
    kept = out != 0
    # the scale uses p rounded to a multiple of 2^-16: off by at most 2^-17 / (1 - p), relative
    torch.testing.assert_close(out[kept], torch.full_like(out[kept], 2.0 / (1 - p)),
                               rtol=2**-17 / (1 - p) + 1e-7, atol=0)
    assert binomtest(int(kept.sum()), kept.numel(), 1 - p).pvalue > 1e-4


def test_masks_are_independent_of_position():
    # each of the four 16-bit lanes of a draw, and rows and columns, keep at the same rate:
    # a chi-square test of the kept counts by position modulo 4 (a lane) and by column
    torch.manual_seed(1)
    out = Dropout(0.3)(torch.ones(2_000, 64))
    kept = (out != 0).double()
    for counts in (kept.flatten().view(-1, 4).sum(0), kept.sum(0)):
        assert chisquare(counts.numpy()).pvalue > 1e-4


def test_eval_mode_zero_p_and_repeatability():
    x = torch.randn(50, 7)
    layer = Dropout(0.4)
    assert layer.eval()(x) is x
    assert Dropout(0.0)(x) is x
    layer.train()
    torch.manual_seed(3)
    first = layer(x)
    torch.manual_seed(3)
    torch.testing.assert_close(layer(x), first, rtol=0, atol=0)
    assert not torch.equal(layer(x), first)          # the next draw differs
    x.requires_grad_()
    layer(x).sum().backward()                        # the gradient is the mask itself
    grads = x.grad.unique()
    assert grads[0] == 0 and len(grads) == 2 and grads[1].item() == pytest.approx(1 / 0.6, rel=2e-5)
    with pytest.raises(ValueError, match=r"p must lie in \[0, 1\)"):
        Dropout(1.0)
