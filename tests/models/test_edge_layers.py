"""The edge-aware layers against their published propagation rules, worked out in numpy on a
four-node graph with hand-set weights and hand-set edge attributes.

Each expected output follows the paper's equation term by term (the equation is named beside
it); each check is paired with a deliberately wrong variant (edge term dropped, softmax over the
wrong neighbourhood, ...) that must NOT match, so a passing comparison carries information.
"""

from __future__ import annotations

import numpy as np
import pytest
import torch

from dochar.models.gnn import GNNStack
from dochar.models.layers import LAYERS, make_layer

ATOL = 1e-5
EDGE_AWARE = ("edge_attention", "transformer", "gine", "gated_relational")

# Directed toy graph, source j -> target i: node 1 hears 0, 2 (relation 1) and 3; node 2 hears
# 1 (relation 1) and 0; nodes 0 and 3 hear nobody. Two relations, two edge attributes.
SRC = [0, 2, 3, 1, 0]
TGT = [1, 1, 1, 2, 2]
TYP = [0, 1, 0, 1, 0]
ATTR = np.array([[1.0, 0.0], [0.0, 2.0], [-1.0, 0.5], [0.5, -1.0], [2.0, 1.0]])
X = np.array([[1.0, -1.0], [0.5, 2.0], [-1.5, 0.0], [2.0, 1.0]])
R, D = 2, 2


def _inputs(attr: np.ndarray | None = ATTR):
    return (torch.tensor(X, dtype=torch.float32), torch.tensor([SRC, TGT]),
            torch.tensor(TYP), None if attr is None else torch.tensor(attr, dtype=torch.float32))


def _set(module: torch.nn.Module, values: dict[str, list]) -> None:
    """Give every parameter a hand-chosen value (a missing name is a test error)."""
    params = dict(module.named_parameters())
    assert set(values) == set(params), sorted(set(params) ^ set(values))
    with torch.no_grad():
        for name, value in values.items():
            params[name].copy_(torch.tensor(value, dtype=torch.float32).reshape(params[name].shape))


def _run(layer: torch.nn.Module, attr: np.ndarray | None = ATTR) -> np.ndarray:
    layer.eval()
    return layer(*_inputs(attr)).detach().double().numpy()


def _edge_vectors(typ, attr, slots):
    """e_ij = [onehot(r_ij) ‖ a_ij], the edge vector every edge-aware layer documents."""
    return np.hstack([np.eye(slots)[typ], attr])


def _softmax_groups(scores: np.ndarray, group: np.ndarray, i: int) -> tuple[np.ndarray, np.ndarray]:
    edges = np.flatnonzero(group == i)
    if not edges.size:
        return edges, np.zeros((0,) + scores.shape[1:])
    w = np.exp(scores[edges] - scores[edges].max(axis=0))
    return edges, w / w.sum(axis=0)


def _assert_power(wrong: np.ndarray, actual: np.ndarray) -> None:
    assert not np.allclose(wrong, actual, atol=1e-3), "the wrong formula matched too: no power"


# --------------------------------------------------------------------------------------------------
# GATv2 with edge attributes

GAT = {  # heads = 2, 2 channels each: lin_l = Θ_t (source, message), lin_r = Θ_s (target)
    "conv.lin_l.weight": [[1, 0], [0, 1], [0.5, -0.5], [1, 1]],
    "conv.lin_l.bias": [0.1, -0.2, 0.0, 0.3],
    "conv.lin_r.weight": [[0, 1], [1, 0], [-1, 0.5], [0.5, 0.5]],
    "conv.lin_r.bias": [0.0, 0.1, 0.2, -0.1],
    "conv.lin_edge.weight": [[0.5, -0.5, 1.0, 1.0, 0.0], [0.0, 1.0, -1.0, 0.0, 0.5],
                             [1.0, 0.0, 0.5, -0.5, 1.0], [-0.5, 0.5, 0.0, 0.5, -1.0]],
    "conv.att": [[1.0, -1.0], [0.5, 2.0]],
    "conv.bias": [0.05, -0.05, 0.1, 0.0],
}


def gatv2_by_hand(variant: str = "paper") -> np.ndarray:
    """GATv2 (Brody et al., ICLR 2022; scoring a^T LeakyReLU(W [h_i ‖ h_j]) written, as in
    torch_geometric's GATv2Conv docs, with W = [Θ_s | Θ_t] and the edge term Θ_e e_ij added):
        α_ij = softmax_{j ∈ N(i) ∪ {i}} a^T LeakyReLU_0.2(Θ_s x_i + Θ_t x_j + Θ_e e_ij)
        x_i' = Σ_j α_ij Θ_t x_j + b          (2 heads of 2 channels, concatenated)
    Self loops i -> i carry relation slot R and zero attributes."""
    loops = list(range(4))
    src, tgt = np.array(SRC + loops), np.array(TGT + loops)
    typ = TYP + [R] * 4
    attr = np.vstack([ATTR, np.zeros((4, D))])
    if variant == "no_self_loops":
        src, tgt, typ, attr = np.array(SRC), np.array(TGT), TYP, ATTR
    if variant == "no_edge_attr":
        attr = np.zeros_like(attr)
    e = _edge_vectors(typ, attr, R + 1)
    W = {k: np.array(v, dtype=float) for k, v in GAT.items()}
    xt = (X @ W["conv.lin_l.weight"].T + W["conv.lin_l.bias"]).reshape(4, 2, 2)
    xs = (X @ W["conv.lin_r.weight"].T + W["conv.lin_r.bias"]).reshape(4, 2, 2)
    ee = (e @ W["conv.lin_edge.weight"].T).reshape(len(src), 2, 2)
    z = xs[tgt] + xt[src] + ee
    scores = np.einsum("ehc,hc->eh", np.where(z > 0, z, 0.2 * z), W["conv.att"])
    group = src if variant == "softmax_by_source" else tgt
    out = np.zeros((4, 2, 2))
    for i in range(4):
        edges, alpha = _softmax_groups(scores, group, i)
        if edges.size:
            out[i] = np.einsum("eh,ehc->hc", alpha, xt[src[edges]])
    return out.reshape(4, 4) + W["conv.bias"]


def test_edge_attention_is_gatv2_with_edge_attributes():
    layer = make_layer("edge_attention", 2, 4, num_relations=R, edge_dim=D, heads=2)
    _set(layer, GAT)
    out = _run(layer)
    np.testing.assert_allclose(out, gatv2_by_hand(), atol=ATOL)
    for variant in ("no_edge_attr", "softmax_by_source", "no_self_loops"):  # deliberate breaks
        _assert_power(gatv2_by_hand(variant), out)


# --------------------------------------------------------------------------------------------------
# Graph transformer (Shi et al., IJCAI 2021)

TRANSFORMER = {  # heads = 2, 2 channels each; lin_edge has no bias in the paper's rule either
    "conv.lin_query.weight": [[1, 0], [0, 1], [0.5, 0.5], [-1, 0]],
    "conv.lin_query.bias": [0.0, 0.1, -0.1, 0.2],
    "conv.lin_key.weight": [[0, 1], [1, -1], [1, 0], [0.5, 0.5]],
    "conv.lin_key.bias": [0.1, 0.0, 0.0, -0.2],
    "conv.lin_value.weight": [[1, 1], [0, -1], [0.5, 0], [0, 2]],
    "conv.lin_value.bias": [0.0, 0.0, 0.3, 0.1],
    "conv.lin_edge.weight": [[1.0, 0.0, 0.5, -1.0], [0.0, 1.0, 1.0, 0.5],
                             [0.5, 0.5, 0.0, 1.0], [-1.0, 0.0, 1.0, 0.0]],
    "conv.lin_skip.weight": [[0.5, 0], [0, 0.5], [1, 0], [0, -1]],
    "conv.lin_skip.bias": [0.1, 0.1, 0.0, 0.0],
}


def transformer_by_hand(variant: str = "paper") -> np.ndarray:
    """Shi et al., IJCAI 2021, section 3.1 (equations quoted from memory), per head c, d = 2:
        q_i = W_q x_i + b_q, k_j = W_k x_j + b_k, v_j = W_v x_j + b_v, ε_ij = W_e e_ij
        α_ij = softmax_{j ∈ N(i)} q_i^T (k_j + ε_ij) / sqrt(d)
        x_i' = W_r x_i + b_r + ‖_c Σ_j α_ij (v_j + ε_ij)"""
    W = {k: np.array(v, dtype=float) for k, v in TRANSFORMER.items()}
    attr = np.zeros_like(ATTR) if variant == "no_edge_attr" else ATTR
    e = _edge_vectors(TYP, attr, R)

    def heads(name, rows):
        return (rows @ W[f"conv.lin_{name}.weight"].T
                + W.get(f"conv.lin_{name}.bias", 0)).reshape(len(rows), 2, 2)

    q, k, v, eps = heads("query", X), heads("key", X), heads("value", X), heads("edge", e)
    src, tgt = np.array(SRC), np.array(TGT)
    key = k[src] + (0 if variant == "edge_in_value_only" else eps)
    scale = 1.0 if variant == "unscaled" else np.sqrt(2)
    scores = np.einsum("ehc,ehc->eh", q[tgt], key) / scale
    out = np.zeros((4, 2, 2))
    for i in range(4):
        edges, alpha = _softmax_groups(scores, tgt, i)
        if edges.size:
            out[i] = np.einsum("eh,ehc->hc", alpha, v[src[edges]] + eps[edges])
    return out.reshape(4, 4) + X @ W["conv.lin_skip.weight"].T + W["conv.lin_skip.bias"]


def test_transformer_layer_is_shi_et_al_graph_transformer():
    layer = make_layer("transformer", 2, 4, num_relations=R, edge_dim=D, heads=2)
    _set(layer, TRANSFORMER)
    out = _run(layer)
    np.testing.assert_allclose(out, transformer_by_hand(), atol=ATOL)
    for variant in ("no_edge_attr", "edge_in_value_only", "unscaled"):   # deliberate breaks
        _assert_power(transformer_by_hand(variant), out)
    # nodes 0 and 3 hear nobody: only the root term W_r x_i + b_r remains
    W = {k: np.array(v) for k, v in TRANSFORMER.items()}
    root = X @ W["conv.lin_skip.weight"].T + W["conv.lin_skip.bias"]
    np.testing.assert_allclose(out[[0, 3]], root[[0, 3]], atol=ATOL)


# --------------------------------------------------------------------------------------------------
# GINE (Hu et al., ICLR 2020)

GINE = {
    "conv.eps": [0.5],
    "conv.lin.weight": [[1.0, 0.0, 0.5, -0.5], [0.0, -1.0, 1.0, 0.5]],   # Θ_e, edge vector -> in
    "conv.lin.bias": [0.1, -0.1],
    "conv.nn.0.weight": [[1.0, -0.5], [0.5, 1.0]],
    "conv.nn.0.bias": [0.0, -0.5],
    "conv.nn.2.weight": [[1.0, 1.0], [-1.0, 0.5]],
    "conv.nn.2.bias": [0.2, 0.0],
}


def gine_by_hand(variant: str = "paper") -> np.ndarray:
    """GINE as torch_geometric's GINEConv documents it after Hu et al., ICLR 2020 (appendix,
    from memory):  x_i' = h_Θ((1 + ε) x_i + Σ_{j ∈ N(i)} ReLU(x_j + Θ_e e_ji + b_e)),
    h_Θ(z) = W_2 ReLU(W_1 z + b_1) + b_2."""
    W = {k: np.array(v, dtype=float) for k, v in GINE.items()}
    attr = np.zeros_like(ATTR) if variant == "no_edge_attr" else ATTR
    projected = _edge_vectors(TYP, attr, R) @ W["conv.lin.weight"].T + W["conv.lin.bias"]
    z = (1 + W["conv.eps"][0]) * X
    for i in range(4):
        incoming = [n for n, t in enumerate(TGT) if t == i]
        messages = [X[SRC[n]] + projected[n] for n in incoming]
        if not messages:
            continue
        if variant == "relu_after_sum":
            z[i] += np.maximum(np.sum(messages, axis=0), 0)
        elif variant == "mean":
            z[i] += np.mean(np.maximum(messages, 0), axis=0)
        else:
            z[i] += np.sum(np.maximum(messages, 0), axis=0)
    hidden = np.maximum(z @ W["conv.nn.0.weight"].T + W["conv.nn.0.bias"], 0)
    return hidden @ W["conv.nn.2.weight"].T + W["conv.nn.2.bias"]


def test_gine_layer_is_hu_et_al_rule():
    layer = make_layer("gine", 2, 2, num_relations=R, edge_dim=D)
    _set(layer, GINE)
    out = _run(layer)
    np.testing.assert_allclose(out, gine_by_hand(), atol=ATOL)
    for variant in ("no_edge_attr", "relu_after_sum", "mean"):   # deliberate breaks
        _assert_power(gine_by_hand(variant), out)


# --------------------------------------------------------------------------------------------------
# R-GCN with an edge-feature gate

GATED = {  # conv.weight = W_r stored (R, in, out): W_r h_j is h_j @ weight[r]
    "conv.weight": [[[1.0, 0.5], [0.0, -1.0]], [[-0.5, 1.0], [1.0, 0.0]]],
    "conv.root": [[0.5, 0.0], [0.0, 0.5]],
    "conv.bias": [0.1, -0.1],
    "gate_weight": [[1.0, -1.0], [0.5, 2.0]],   # w_r
    "gate_bias": [0.0, -1.0],                   # b_r
}


def gated_rgcn_by_hand(variant: str = "paper", aggr: str = "mean") -> np.ndarray:
    """R-GCN, Schlichtkrull et al. 2018 (ESWC), eq. 2 without σ, each message gated:
        h_i' = Σ_r Σ_{j ∈ N_i^r} (1 / c_{i,r}) g_ji W_r h_j + W_0 h_i + b,
        g_ji = σ(w_r^T a_ji + b_r),  c_{i,r} = |N_i^r| (1 with aggr="add")."""
    W = {k: np.array(v, dtype=float) for k, v in GATED.items()}
    out = X @ W["conv.root"] + W["conv.bias"]
    for n, (j, i, r) in enumerate(zip(SRC, TGT, TYP)):
        gate_relation = 1 - r if variant == "other_relation_gate" else r
        g = 1 / (1 + np.exp(-(W["gate_weight"][gate_relation] @ ATTR[n]
                              + W["gate_bias"][gate_relation])))
        if variant == "no_gate":
            g = 1.0
        same = [m for m, (t, q) in enumerate(zip(TGT, TYP)) if t == i and q == r]
        c = len(same) if aggr == "mean" else 1
        out[i] += g * X[j] @ W["conv.weight"][r] / c
    return out


@pytest.mark.parametrize("aggr", ["mean", "add"])
def test_gated_relational_layer_is_rgcn_eq2_with_gates(aggr):
    layer = make_layer("gated_relational", 2, 2, num_relations=R, edge_dim=D, aggr=aggr)
    _set(layer, GATED)
    out = _run(layer)
    np.testing.assert_allclose(out, gated_rgcn_by_hand(aggr=aggr), atol=ATOL)
    for variant in ("no_gate", "other_relation_gate"):   # deliberate breaks
        _assert_power(gated_rgcn_by_hand(variant, aggr), out)
    other = "add" if aggr == "mean" else "mean"   # break: the other normaliser
    _assert_power(gated_rgcn_by_hand(aggr=other), out)


def test_gated_relational_without_attributes_scales_each_relation_by_sigma_of_its_bias():
    # edge_dim = 0: g_ji = σ(b_r), so with b_r = 0 every message is halved: R-GCN eq. 2 at 1/2
    gated = make_layer("gated_relational", 2, 2, num_relations=R)
    plain = make_layer("relational", 2, 2, num_relations=R)
    with torch.no_grad():
        gated.conv.weight.copy_(torch.tensor(GATED["conv.weight"]) * 2)
        plain.conv.weight.copy_(torch.tensor(GATED["conv.weight"]))
        for layer in (gated, plain):
            layer.conv.root.copy_(torch.tensor(GATED["conv.root"]))
            layer.conv.bias.zero_()
    np.testing.assert_allclose(_run(gated, None), _run(plain, None), atol=ATOL)


# --------------------------------------------------------------------------------------------------
# the shared interface: edge_dim, edge_attr and the stack


@pytest.mark.parametrize("name", EDGE_AWARE)
def test_edge_aware_layer_refuses_missing_or_misshapen_attributes(name):
    layer = make_layer(name, 2, 4, num_relations=R, edge_dim=D)
    with pytest.raises(ValueError, match=rf"{name} layer: was built for 2 edge features.*None"):
        _run(layer, None)
    with pytest.raises(ValueError, match=r"edge_attr must be a float tensor of shape \(5, 2\)"):
        _run(layer, ATTR[:, :1])
    blind = make_layer(name, 2, 4, num_relations=R)   # edge_dim = 0: the relation alone
    assert _run(blind, None).shape == (4, 4)
    with pytest.raises(ValueError, match="built without edge features"):
        _run(blind)


@pytest.mark.parametrize("name", sorted(set(LAYERS) - set(EDGE_AWARE)))
def test_other_layers_accept_and_ignore_edge_attributes(name):
    layer = make_layer(name, 2, 4, num_relations=R, edge_dim=D)
    torch.manual_seed(0)
    np.testing.assert_allclose(_run(layer), _run(layer, None), atol=ATOL)


@pytest.mark.parametrize("name", EDGE_AWARE)
def test_stack_passes_edge_attributes_to_every_block(name):
    torch.manual_seed(0)
    stack = GNNStack(in_dim=2, num_classes=3, num_relations=R, layer=name, hidden_dim=4,
                     depth=2, edge_dim=D)
    x, edge_index, edge_type, attr = _inputs()
    stack.eval()
    out = stack(x, edge_index, edge_type, edge_attr=attr)
    assert out.shape == (4, 3)
    # the attributes matter: changing one edge's attributes changes its target's output
    changed = attr.clone()
    changed[0] = torch.tensor([-3.0, 4.0])
    assert not torch.allclose(stack(x, edge_index, edge_type, edge_attr=changed)[1], out[1])
    with pytest.raises(ValueError, match="layer_options"):
        GNNStack(in_dim=2, num_classes=3, num_relations=R, layer=name, edge_dim=D,
                 layer_options={"edge_dim": 3})


@pytest.mark.parametrize("name", EDGE_AWARE)
def test_gradient_reaches_every_parameter_with_edge_attributes(name):
    torch.manual_seed(0)
    g = torch.Generator().manual_seed(1)
    x, edge_index = torch.randn(10, 2, generator=g), torch.randint(0, 10, (2, 30), generator=g)
    edge_type, attr = torch.arange(30) % R, torch.randn(30, D, generator=g)
    stack = GNNStack(in_dim=2, num_classes=3, num_relations=R, layer=name, hidden_dim=4,
                     depth=2, edge_dim=D)
    torch.nn.functional.cross_entropy(stack(x, edge_index, edge_type, edge_attr=attr),
                                      torch.arange(10) % 3).backward()
    for parameter_name, p in stack.named_parameters():
        assert p.grad is not None and p.grad.abs().sum() > 0, parameter_name
