"""Each layer against its published propagation rule, evaluated by hand in numpy on a tiny graph.

Every formula check is paired with a deliberately wrong variant of the same formula that must NOT
match, so a comparison that passes carries information.
"""

from __future__ import annotations

import numpy as np
import pytest
import torch
import torch.nn.functional as F

from dochar.models.layers import LAYERS, layer_options, make_layer

ATOL = 1e-5

# Directed toy graph, edges source j -> target i with a relation type. Node 1 has two incoming
# edges of relation 0 and one of relation 1, node 2 one of relation 0 and two of relation 1,
# node 0 one of relation 1, node 3 none, so per-relation, global-mean and sum normalisation differ.
SRC = [0, 2, 3, 1, 3, 0, 1]
TGT = [1, 1, 1, 0, 2, 2, 2]
TYP = [0, 0, 1, 1, 0, 1, 1]


def _graph(src=SRC, tgt=TGT, typ=TYP):
    return torch.tensor([src, tgt], dtype=torch.long), torch.tensor(typ, dtype=torch.long)


def _features(n: int, d: int, seed: int = 0) -> torch.Tensor:
    return torch.randn(n, d, generator=torch.Generator().manual_seed(seed))


def _randomise(module: torch.nn.Module, seed: int = 1) -> None:
    """Overwrite every parameter (biases start at zero and would hide a missing bias term)."""
    g = torch.Generator().manual_seed(seed)
    with torch.no_grad():
        for p in module.parameters():
            p.copy_(torch.randn(p.shape, generator=g) * 0.5)


def _np(t: torch.Tensor) -> np.ndarray:
    return t.detach().double().numpy()


def _assert_power(wrong: np.ndarray, actual: np.ndarray) -> None:
    assert not np.allclose(wrong, actual, atol=1e-3), "the wrong formula matched too: test has no power"


# --------------------------------------------------------------------------------------------------
# R-GCN


def rgcn_by_hand(x, W, W0, b, src, tgt, typ, normalise="per_relation"):
    """Schlichtkrull et al. 2018 (ESWC), eq. 2 without σ: h_i' = Σ_r Σ_{j∈N_i^r} W_r h_j / c_{i,r}
    + W_0 h_i, with c_{i,r} = |N_i^r|. W[r] is stored (in, out), so W_r h_j is x_j @ W[r]."""
    n = x.shape[0]
    out = x @ W0 + b if W0 is not None else np.tile(b, (n, 1))
    for i in range(n):
        incoming = [(j, r) for j, t, r in zip(src, tgt, typ) if t == i]
        for j, r in incoming:
            per_relation = sum(1 for _, q in incoming if q == r)
            c = {"per_relation": per_relation, "sum": 1, "all": len(incoming)}[normalise]
            out[i] += x[j] @ W[r] / c
    return out


def test_relational_layer_is_rgcn_eq2():
    layer = make_layer("relational", 3, 2, num_relations=2)
    _randomise(layer)
    x = _features(4, 3)
    out = _np(layer(x, *_graph()))
    conv = layer.conv
    args = (_np(x), _np(conv.weight), _np(conv.root), _np(conv.bias), SRC, TGT, TYP)
    np.testing.assert_allclose(out, rgcn_by_hand(*args), atol=ATOL)
    # deliberate breaks: sum instead of mean, one mean over all relations, reversed edge direction
    _assert_power(rgcn_by_hand(*args, normalise="sum"), out)
    _assert_power(rgcn_by_hand(*args, normalise="all"), out)
    _assert_power(rgcn_by_hand(*args[:4], TGT, SRC, TYP), out)


@pytest.mark.parametrize("aggr", ["mean", "add"])
def test_relational_layer_gradients_match_rgcnconv(aggr):
    # reference: torch-geometric's RGCNConv (the layer's own parameters) on its loop over
    # relations, differentiated by autograd; parallel edges (0 -> 1 twice) count twice in both
    import torch_geometric.backend

    layer = make_layer("relational", 3, 2, num_relations=2, aggr=aggr)
    _randomise(layer)
    edge_index, edge_type = _graph(SRC + [0], TGT + [1], TYP + [0])
    x = _features(4, 3, seed=4).requires_grad_()
    weights = _features(4, 2, seed=5)
    got = torch.autograd.grad((layer(x, edge_index, edge_type) * weights).sum(),
                              [x, *layer.parameters()])
    saved = torch_geometric.backend.use_segment_matmul
    torch_geometric.backend.use_segment_matmul = False
    try:
        reference = (layer.conv(x, edge_index, edge_type) * weights).sum()
    finally:
        torch_geometric.backend.use_segment_matmul = saved
    for g, e in zip(got, torch.autograd.grad(reference, [x, *layer.parameters()])):
        torch.testing.assert_close(g, e, atol=ATOL, rtol=0)


def test_relational_layer_follows_edges_changed_in_place():
    # the layer keeps each graph's sparse operator: an in-place edit of the edge tensors must
    # not reuse the operator of the edges they held before (rule: eq. 2 by hand, as above)
    layer = make_layer("relational", 3, 2, num_relations=2)
    _randomise(layer)
    x = _features(4, 3)
    edge_index, edge_type = _graph()
    layer(x, edge_index, edge_type)
    edge_index[0, 0], edge_type[-1] = 3, 0
    args = (_np(layer.conv.weight), _np(layer.conv.root), _np(layer.conv.bias))
    src, typ = [3, *SRC[1:]], [*TYP[:-1], 0]
    np.testing.assert_allclose(_np(layer(x, edge_index, edge_type)),
                               rgcn_by_hand(_np(x), *args, src, TGT, typ), atol=ATOL)


def test_relational_layer_basis_decomposition_eq3():
    # Schlichtkrull et al. 2018, eq. 3: W_r = Σ_b a_rb V_b (conv.comp = a, conv.weight = V)
    layer = make_layer("relational", 3, 2, num_relations=3, num_bases=2)
    _randomise(layer)
    typ = [0, 2, 1, 1, 2, 0, 1]
    x = _features(4, 3, seed=3)
    out = _np(layer(x, *_graph(typ=typ)))
    a, V = _np(layer.conv.comp), _np(layer.conv.weight)
    assert a.shape == (3, 2) and V.shape == (2, 3, 2)
    W = np.einsum("rb,bio->rio", a, V)
    rest = (_np(layer.conv.root), _np(layer.conv.bias), SRC, TGT, typ)
    np.testing.assert_allclose(out, rgcn_by_hand(_np(x), W, *rest), atol=ATOL)
    # deliberate break: coefficients of the wrong relation
    _assert_power(rgcn_by_hand(_np(x), np.einsum("rb,bio->rio", a[[1, 2, 0]], V), *rest), out)


# --------------------------------------------------------------------------------------------------
# 3x3 convolution = relational layer on the pixel grid (common practice, no single source)

OFFSETS = [(dy, dx) for dy in (-1, 0, 1) for dx in (-1, 0, 1)]  # relation k <-> kernel tap k


def _pixel_grid(h: int, w: int, skip_centre: bool):
    """Edge from pixel (y+dy, x+dx) to pixel (y, x), typed by the offset; off-image = no edge."""
    src, tgt, typ = [], [], []
    offsets = [o for o in OFFSETS if not (skip_centre and o == (0, 0))]
    for y in range(h):
        for x in range(w):
            for k, (dy, dx) in enumerate(offsets):
                if 0 <= y + dy < h and 0 <= x + dx < w:
                    src.append((y + dy) * w + x + dx)
                    tgt.append(y * w + x)
                    typ.append(k)
    return _graph(src, tgt, typ), offsets


@pytest.mark.parametrize("aggr", ["add", "mean"])
def test_conv2d_is_relational_layer_with_nine_relations(aggr):
    # torch.nn.functional.conv2d (cross-correlation), C_in=2, C_out=3, zero padding=1
    g = torch.Generator().manual_seed(7)
    image = torch.randn(1, 2, 4, 5, generator=g)
    kernel = torch.randn(3, 2, 3, 3, generator=g)
    kernel_bias = torch.randn(3, generator=g)
    expected = F.conv2d(image, kernel, kernel_bias, padding=1)[0]

    (edge_index, edge_type), offsets = _pixel_grid(4, 5, skip_centre=False)
    layer = make_layer("relational", 2, 3, num_relations=9, aggr=aggr, root_weight=False)
    with torch.no_grad():
        for k, (dy, dx) in enumerate(offsets):
            layer.conv.weight[k] = kernel[:, :, dy + 1, dx + 1].T
        layer.conv.bias.copy_(kernel_bias)
    nodes = image[0].permute(1, 2, 0).reshape(20, 2)
    out = layer(nodes, edge_index, edge_type).T.reshape(3, 4, 5)
    # With aggr="mean" it still matches: every pixel has at most one neighbour per direction, so
    # c_{i,r} = 1; a mean taken across all nine relations at once would fail here.
    torch.testing.assert_close(out, expected, atol=ATOL, rtol=0)
    # deliberate break: edges pointing the other way compute the flipped (true) convolution
    flipped = layer(nodes, edge_index.flip(0), edge_type).T.reshape(3, 4, 5)
    _assert_power(_np(flipped), _np(expected))


def test_conv2d_centre_tap_as_root_weight():
    # same identity with eight direction relations and W_0 = centre tap (torch conv2d, padding=1)
    g = torch.Generator().manual_seed(8)
    image = torch.randn(1, 2, 3, 4, generator=g)
    kernel = torch.randn(3, 2, 3, 3, generator=g)
    expected = F.conv2d(image, kernel, None, padding=1)[0]
    (edge_index, edge_type), offsets = _pixel_grid(3, 4, skip_centre=True)
    layer = make_layer("relational", 2, 3, num_relations=8, aggr="add", bias=False)
    with torch.no_grad():
        for k, (dy, dx) in enumerate(offsets):
            layer.conv.weight[k] = kernel[:, :, dy + 1, dx + 1].T
        layer.conv.root.copy_(kernel[:, :, 1, 1].T)
    nodes = image[0].permute(1, 2, 0).reshape(12, 2)
    out = layer(nodes, edge_index, edge_type).T.reshape(3, 3, 4)
    torch.testing.assert_close(out, expected, atol=ATOL, rtol=0)
    # deliberate break: without the centre tap the identity must fail
    with torch.no_grad():
        layer.conv.root.zero_()
    _assert_power(_np(layer(nodes, edge_index, edge_type).T.reshape(3, 3, 4)), _np(expected))


# --------------------------------------------------------------------------------------------------
# GATv2


def _leaky(z):
    return np.where(z > 0, z, 0.2 * z)  # negative slope 0.2, GATv2Conv default


def gatv2_by_hand(layer, x, src, tgt, typ, variant="pyg"):
    """torch_geometric GATv2Conv docs (GATv2, Brody et al., ICLR 2022), per head h:
        α_ij = softmax_{j∈N(i)} a^T LeakyReLU(Θ_s x_i + Θ_t x_j + Θ_e e_ij),
        x_i' = Σ_j α_ij Θ_t x_j   (+ output bias)
    In the code Θ_t is lin_l (applied to the source j, also the message) and Θ_s is lin_r (applied
    to the target i), each with its own bias. The paper writes a^T LeakyReLU(W [h_i ‖ h_j]), which
    is the same map with W = [Θ_s | Θ_t] (paper form quoted from memory)."""
    conv = layer.conv
    H, C = conv.heads, conv.out_channels
    n = x.shape[0]
    xt = (x @ _np(conv.lin_l.weight).T + _np(conv.lin_l.bias)).reshape(n, H, C)
    xs = (x @ _np(conv.lin_r.weight).T + _np(conv.lin_r.bias)).reshape(n, H, C)
    e = _np(layer.edge_embedding.weight)[typ] @ _np(conv.lin_edge.weight).T
    if variant == "no_edge_type":
        e = np.zeros_like(e)
    e = e.reshape(len(typ), H, C)
    att = _np(conv.att)[0]  # (H, C)
    z = xs[tgt] + xt[src] + e
    if variant == "gat_static":  # GAT (Veličković et al. 2018) order: LeakyReLU after the product
        scores = _leaky(np.einsum("ehc,hc->eh", z, att))
    else:
        scores = np.einsum("ehc,hc->eh", _leaky(z), att)
    group = np.asarray(src if variant == "softmax_by_source" else tgt)
    out = np.zeros((n, H, C))
    for i in range(n):
        edges = np.flatnonzero(group == i)
        if edges.size == 0:
            continue
        w = np.exp(scores[edges] - scores[edges].max(axis=0))
        alpha = w / w.sum(axis=0)  # (edges, H)
        out[i] = np.einsum("eh,ehc->hc", alpha, xt[np.asarray(src)[edges]])
    out = out.reshape(n, H * C) if conv.concat else out.mean(axis=1)
    return out + _np(conv.bias)


@pytest.mark.parametrize("concat", [True, False])
def test_attention_layer_is_gatv2_with_learned_self_loops(concat):
    layer = make_layer("attention", 3, 4, num_relations=2, heads=2, concat=concat, type_dim=3)
    _randomise(layer)
    layer.eval()
    src, tgt, typ = SRC + [3], TGT + [3], TYP + [0]  # an existing self loop keeps its own type
    x = _features(4, 3, seed=5)
    out = _np(layer(x, *_graph(src, tgt, typ)))
    assert out.shape == (4, 4)
    loops = list(range(4))
    args = (layer, _np(x), src + loops, tgt + loops, typ + [2] * 4)  # self-loop embedding row = R
    np.testing.assert_allclose(out, gatv2_by_hand(*args), atol=ATOL)
    for variant in ("gat_static", "no_edge_type", "softmax_by_source"):  # deliberate breaks
        _assert_power(gatv2_by_hand(*args, variant=variant), out)
    # deliberate break: without the added self loops
    _assert_power(gatv2_by_hand(layer, _np(x), src, tgt, typ), out)


def test_attention_layer_mean_self_loops():
    # torch_geometric add_self_loops(fill_value="mean"): loop attribute = mean of incoming edges'
    layer = make_layer("attention", 3, 2, num_relations=2, self_loops="mean", type_dim=2)
    _randomise(layer, seed=4)
    x = _features(4, 3, seed=6)
    out = _np(layer(x, *_graph()))
    emb = _np(layer.edge_embedding.weight)
    loop_attr = np.zeros((4, 2))
    for i in range(4):
        incoming = [r for t, r in zip(TGT, TYP) if t == i]
        if incoming:
            loop_attr[i] = emb[incoming].mean(axis=0)
    # append the loop attributes as extra embedding rows 2..5 so the hand formula can index them
    layer.edge_embedding.weight = torch.nn.Parameter(torch.tensor(np.vstack([emb, loop_attr])))
    loops = list(range(4))
    args = (layer, _np(x), SRC + loops, TGT + loops, TYP + [2, 3, 4, 5])
    np.testing.assert_allclose(out, gatv2_by_hand(*args), atol=ATOL)
    _assert_power(gatv2_by_hand(layer, _np(x), SRC, TGT, TYP), out)  # break: no loops


def test_attention_layer_rejects_heads_that_do_not_divide_out_dim():
    with pytest.raises(ValueError, match="not divisible by heads"):
        make_layer("attention", 3, 5, num_relations=2, heads=2)


# --------------------------------------------------------------------------------------------------
# GraphSAGE max, GCN, none


def test_max_layer_is_sage_max():
    # torch_geometric SAGEConv docs: x_i' = W_1 x_i + W_2 · agg_{j∈N(i)} x_j, agg = elementwise max
    # (lin_r = W_1 without bias, lin_l = W_2 with bias); empty neighbourhood aggregates to 0.
    layer = make_layer("max", 3, 2, num_relations=2)
    _randomise(layer)
    x = _features(4, 3, seed=9)
    out = _np(layer(x, *_graph()))
    xn = _np(x)

    def by_hand(reduce):
        agg = np.zeros_like(xn)
        for i in range(4):
            nbrs = [j for j, t in zip(SRC, TGT) if t == i]
            if nbrs:
                agg[i] = reduce(xn[nbrs], axis=0)
        conv = layer.conv
        return agg @ _np(conv.lin_l.weight).T + _np(conv.lin_l.bias) + xn @ _np(conv.lin_r.weight).T

    np.testing.assert_allclose(out, by_hand(np.max), atol=ATOL)
    _assert_power(by_hand(np.mean), out)  # deliberate breaks: mean or sum instead of max
    _assert_power(by_hand(np.sum), out)
    # edge types are ignored by design
    other_types = torch.tensor([1, 1, 0, 0, 1, 0, 0])
    np.testing.assert_allclose(_np(layer(x, _graph()[0], other_types)), out, atol=ATOL)


UNDIRECTED = [(0, 1), (1, 2), (2, 3), (1, 3), (3, 4)]


def test_gcn_layer_is_kipf_welling_rule():
    # Kipf & Welling, ICLR 2017, eq. 2 (equation number quoted from memory): D^-1/2 (A+I) D^-1/2 X W
    src = [a for a, b in UNDIRECTED] + [b for a, b in UNDIRECTED]
    tgt = [b for a, b in UNDIRECTED] + [a for a, b in UNDIRECTED]
    typ = [0, 1, 0, 1, 0, 1, 0, 1, 0, 1]
    layer = make_layer("gcn", 3, 2, num_relations=2)
    _randomise(layer)
    x = _features(5, 3, seed=10)
    out = _np(layer(x, *_graph(src, tgt, typ)))
    A = np.zeros((5, 5))
    A[tgt, src] = 1.0
    A_hat = A + np.eye(5)
    d = A_hat.sum(axis=1)
    XW = _np(x) @ _np(layer.conv.lin.weight).T
    b = _np(layer.conv.bias)
    np.testing.assert_allclose(out, np.diag(d ** -0.5) @ A_hat @ np.diag(d ** -0.5) @ XW + b, atol=ATOL)
    _assert_power(A_hat @ XW + b, out)  # deliberate breaks: no normalisation, random-walk D^-1
    _assert_power(np.diag(1 / d) @ A_hat @ XW + b, out)
    # edge types are ignored, and a parallel edge of another type does not count twice
    doubled = _graph(src + src[:3], tgt + tgt[:3], typ + [1, 0, 1])
    np.testing.assert_allclose(_np(layer(x, *doubled)), out, atol=ATOL)


def test_none_layer_ignores_edges():
    layer = make_layer("none", 3, 2, num_relations=2)
    _randomise(layer)
    x = _features(4, 3)
    out = _np(layer(x, *_graph()))
    np.testing.assert_allclose(out, _np(x) @ _np(layer.linear.weight).T + _np(layer.linear.bias),
                               atol=ATOL)
    empty = (torch.empty(2, 0, dtype=torch.long), torch.empty(0, dtype=torch.long))
    np.testing.assert_allclose(_np(layer(x, *empty)), out, atol=ATOL)
    np.testing.assert_allclose(_np(layer(x, *_graph(TGT, SRC, [1] * 7))), out, atol=ATOL)
    # contrast: a message-passing layer does change when the edges change
    rgcn = make_layer("relational", 3, 2, num_relations=2)
    assert not torch.allclose(rgcn(x, *_graph()), rgcn(x, *empty))


# --------------------------------------------------------------------------------------------------
# registry and input checks


def test_registry_names_and_unknown_layer():
    assert set(LAYERS) == {"relational", "attention", "max", "gcn", "none", "edge_attention",
                           "transformer", "gine", "gated_relational"}
    with pytest.raises(ValueError, match=r"unknown layer 'rgcn'.*attention.*gcn.*max.*none.*relational"):
        make_layer("rgcn", 3, 2, 2)


def test_unknown_option_lists_valid_options():
    assert "num_bases" in layer_options("relational")
    with pytest.raises(ValueError, match=r"no option\(s\) \['heads'\].*num_bases"):
        make_layer("relational", 3, 2, 2, heads=2)
    with pytest.raises(ValueError, match="aggr must be one of"):
        make_layer("relational", 3, 2, 2, aggr="max")


@pytest.mark.parametrize("name", sorted(LAYERS))
def test_bad_graph_inputs_are_located(name):
    layer = make_layer(name, 3, 4, num_relations=2)
    x = _features(4, 3)
    edge_index, edge_type = _graph()
    with pytest.raises(ValueError, match=rf"{name} layer: edge_type holds 2 at edge 3"):
        layer(x, edge_index, torch.tensor([0, 0, 1, 2, 0, 1, 1]))
    with pytest.raises(ValueError, match=rf"{name} layer: edge_index holds 9 at edge 1"):
        layer(x, torch.tensor([[0, 9, 3, 1, 3, 0, 1], TGT]), edge_type)
    with pytest.raises(ValueError, match="x has 5 features per node, the layer expects 3"):
        layer(_features(4, 5), edge_index, edge_type)
    with pytest.raises(ValueError, match="edge_type must have shape"):
        layer(x, edge_index, edge_type[:3])
    with pytest.raises(ValueError, match="must have dtype torch.long"):
        layer(x, edge_index.float(), edge_type)
