"""GNN stack wiring, trainability and determinism; baselines and their neighbour features."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.datasets import make_classification
from sklearn.dummy import DummyClassifier
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler

from dochar.models import LAYERS, GNNStack, count_parameters
from dochar.models.baselines import BASELINES, make_baseline, neighbour_aggregates

NUM_RELATIONS = 3


class TinyCharEncoder(torch.nn.Module):
    """Mean of character embeddings: the smallest module with the char-encoder interface."""

    def __init__(self, vocab: int = 12, dim: int = 4) -> None:
        super().__init__()
        self.embedding = torch.nn.Embedding(vocab, dim)

    def forward(self, chars: torch.Tensor) -> torch.Tensor:
        return self.embedding(chars).mean(dim=1)


def _graph(n: int = 10, num_edges: int = 24, seed: int = 0):
    g = torch.Generator().manual_seed(seed)
    x = torch.randn(n, 5, generator=g)
    edge_index = torch.randint(0, n, (2, num_edges), generator=g)
    edge_type = torch.arange(num_edges) % NUM_RELATIONS  # every relation occurs
    chars = torch.randint(0, 12, (n, 7), generator=g)
    return x, edge_index, edge_type, chars


def _model(layer: str, with_chars: bool, **kwargs) -> GNNStack:
    encoder = TinyCharEncoder() if with_chars else None
    return GNNStack(5, 4, NUM_RELATIONS, layer=layer, hidden_dim=8, char_encoder=encoder,
                    char_dim=4 if with_chars else 0, **kwargs)


@pytest.mark.parametrize("with_chars", [False, True])
@pytest.mark.parametrize("layer", sorted(LAYERS))
def test_forward_shape_and_probabilities(layer, with_chars):
    x, edge_index, edge_type, chars = _graph()
    model = _model(layer, with_chars)
    chars = chars if with_chars else None
    assert model(x, edge_index, edge_type, chars).shape == (10, 4)
    proba = model.predict_proba(x, edge_index, edge_type, chars)
    torch.testing.assert_close(proba.sum(dim=1), torch.ones(10))
    assert model.training  # predict_proba restores the mode it found


@pytest.mark.parametrize("depth,hidden,norm,residual",
                         [(1, 8, "batch", True), (3, 16, "layer", False), (2, 32, "none", True)])
def test_options_shape_the_network(depth, hidden, norm, residual):
    x, edge_index, edge_type, _ = _graph()
    model = GNNStack(5, 4, NUM_RELATIONS, layer="none", hidden_dim=hidden, depth=depth, norm=norm,
                     residual=residual)
    assert model(x, edge_index, edge_type).shape == (10, 4)
    assert len(model.blocks) == depth
    norm_type = {"batch": torch.nn.BatchNorm1d, "layer": torch.nn.LayerNorm,
                 "none": torch.nn.Identity}[norm]
    assert all(isinstance(block.norm, norm_type) for block in model.blocks)
    # nn.Linear(a, b) holds a*b + b scalars, BatchNorm1d / LayerNorm 2*dim (torch docs)
    norm_size = 0 if norm == "none" else 2 * hidden
    expected = (5 * hidden + hidden) + depth * (hidden * hidden + hidden + norm_size) \
        + (hidden * hidden + hidden) + (hidden * 4 + 4)
    assert count_parameters(model) == expected
    model.head[0].weight.requires_grad_(False)
    assert count_parameters(model) == expected - hidden * hidden


@pytest.mark.parametrize("residual", [True, False])
def test_residual_carries_the_input_past_a_silent_block(residual):
    # a block whose layer outputs 0 adds nothing: relu(0) = 0, so h passes only via the residual
    x, edge_index, edge_type, _ = _graph()
    model = GNNStack(5, 4, NUM_RELATIONS, layer="none", hidden_dim=8, depth=1, norm="none",
                     residual=residual, dropout=0.0)
    with torch.no_grad():
        for p in model.blocks[0].layer.parameters():
            p.zero_()
    logits = model(x, edge_index, edge_type)
    if residual:
        torch.testing.assert_close(logits, model.head(model.input_projection(x)))
    else:
        torch.testing.assert_close(logits, model.head(torch.zeros(1, 8)).expand(10, 4))


@pytest.mark.parametrize("layer", sorted(LAYERS))
def test_gradient_reaches_every_parameter(layer):
    torch.manual_seed(0)
    x, edge_index, edge_type, chars = _graph()
    model = _model(layer, True, depth=2)
    loss = torch.nn.functional.cross_entropy(model(x, edge_index, edge_type, chars),
                                             torch.arange(10) % 4)
    loss.backward()
    for name, p in model.named_parameters():
        assert p.grad is not None and torch.isfinite(p.grad).all(), name
        assert p.grad.abs().sum() > 0, f"no gradient reaches {name}"


@pytest.fixture
def deterministic_algorithms():
    previous = torch.are_deterministic_algorithms_enabled()
    torch.use_deterministic_algorithms(True)
    yield
    torch.use_deterministic_algorithms(previous)


@pytest.mark.parametrize("layer", sorted(LAYERS))
def test_same_seed_same_model_and_output(layer, deterministic_algorithms):
    x, edge_index, edge_type, chars = _graph()
    runs = []
    for _ in range(2):
        torch.manual_seed(123)
        model = _model(layer, True)  # train mode: dropout draws from the seeded generator too
        out = model(x, edge_index, edge_type, chars)
        out.sum().backward()
        runs.append((out.detach(), [p.grad.clone() for p in model.parameters()]))
    torch.testing.assert_close(runs[0][0], runs[1][0], rtol=0, atol=0)
    for a, b in zip(runs[0][1], runs[1][1]):
        torch.testing.assert_close(a, b, rtol=0, atol=0)
    torch.manual_seed(124)
    assert not torch.equal(_model(layer, True)(x, edge_index, edge_type, chars), runs[0][0])


@pytest.mark.parametrize("layer", sorted(LAYERS))
def test_overfits_a_tiny_separable_problem(layer):
    # sanity check (common practice): a network that cannot fit 30 separable nodes is miswired
    torch.manual_seed(0)
    x, edge_index, edge_type, _ = _graph(n=30, num_edges=60, seed=1)
    labels = x[:, :3].argmax(dim=1)  # linearly separable in the node's own features
    model = GNNStack(5, 3, NUM_RELATIONS, layer=layer, hidden_dim=16, dropout=0.0)
    optimiser = torch.optim.Adam(model.parameters(), lr=0.01)
    for step in range(1, 401):
        optimiser.zero_grad()
        torch.nn.functional.cross_entropy(model(x, edge_index, edge_type), labels).backward()
        optimiser.step()
        if step % 25 == 0 and (model.predict_proba(x, edge_index, edge_type).argmax(1) == labels).all():
            break
    predicted = model.predict_proba(x, edge_index, edge_type).argmax(dim=1)
    assert (predicted == labels).all(), f"{(predicted == labels).float().mean():.0%} after {step} steps"


def test_bad_arguments_are_reported():
    x, edge_index, edge_type, chars = _graph()
    with pytest.raises(ValueError, match=r"unknown layer 'sage'.*attention.*gcn.*max.*none.*relational"):
        GNNStack(5, 4, NUM_RELATIONS, layer="sage")
    with pytest.raises(ValueError, match=r"model.norm='group': unknown norm.*batch.*layer.*none"):
        GNNStack(5, 4, NUM_RELATIONS, norm="group")
    with pytest.raises(ValueError, match="char_encoder and char_dim"):
        GNNStack(5, 4, NUM_RELATIONS, char_encoder=TinyCharEncoder())
    with pytest.raises(ValueError, match="model.depth=0: must be an int >= 1"):
        GNNStack(5, 4, NUM_RELATIONS, depth=0)
    with pytest.raises(ValueError, match="no option"):
        GNNStack(5, 4, NUM_RELATIONS, layer="gcn", layer_options={"heads": 2})
    model = _model("relational", True)
    with pytest.raises(ValueError, match="needs chars"):
        model(x, edge_index, edge_type)
    with pytest.raises(ValueError, match=r"x must have shape \(nodes, 5\)"):
        model(x[:, :3], edge_index, edge_type, chars)
    wrong = GNNStack(5, 4, NUM_RELATIONS, char_encoder=TinyCharEncoder(dim=4), char_dim=6)
    with pytest.raises(ValueError, match=r"char_encoder returned shape \(10, 4\), expected \(10, 6\)"):
        wrong(x, edge_index, edge_type, chars)
    with pytest.raises(ValueError, match="no char_encoder"):
        _model("relational", False)(x, edge_index, edge_type, chars)


# --------------------------------------------------------------------------------------------------
# neighbour aggregates (plain-loop reference as oracle)


def aggregates_by_loop(features, edge_index, edge_type, num_relations):
    n, d = features.shape
    out = np.zeros((n, 2 * d * num_relations))
    for i in range(n):
        for r in range(num_relations):
            rows = [features[j] for j, t, k in zip(edge_index[0], edge_index[1], edge_type)
                    if t == i and k == r]
            if rows:
                out[i, 2 * d * r:2 * d * r + d] = np.mean(rows, axis=0)
                out[i, 2 * d * r + d:2 * d * (r + 1)] = np.max(rows, axis=0)
    return out


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 7), d=st.integers(1, 3), relations=st.integers(1, 3),
       edges=st.integers(0, 20), seed=st.integers(0, 2**16))
def test_neighbour_aggregates_match_loop(n, d, relations, edges, seed):
    rng = np.random.default_rng(seed)
    features = rng.normal(size=(n, d))
    edge_index = rng.integers(0, n, size=(2, edges))  # duplicates and self loops included
    edge_type = rng.integers(0, relations, size=edges)
    np.testing.assert_allclose(neighbour_aggregates(features, edge_index, edge_type, relations),
                               aggregates_by_loop(features, edge_index, edge_type, relations))


def test_neighbour_max_of_negative_features_is_not_clipped_at_zero():
    features = np.array([[-3.0, -1.0], [-2.0, -5.0], [4.0, 4.0]])
    out = neighbour_aggregates(features, np.array([[0, 1], [2, 2]]), np.array([1, 1]), 2)
    # node 2, relation 1: mean (-2.5, -3), max (-2, -1); relation 0 and nodes 0, 1: zeros
    np.testing.assert_array_equal(out[2], [0, 0, 0, 0, -2.5, -3.0, -2.0, -1.0])
    np.testing.assert_array_equal(out[:2], np.zeros((2, 8)))
    assert neighbour_aggregates(features.astype(int), np.array([[0], [2]]), np.array([0]), 1).dtype \
        == np.float64


def test_neighbour_aggregates_locate_bad_input():
    features = np.zeros((3, 2))
    with pytest.raises(ValueError, match="edge_type holds 4 at edge 1; must lie in 0..1"):
        neighbour_aggregates(features, np.array([[0, 1], [1, 2]]), np.array([0, 4]), 2)
    with pytest.raises(ValueError, match="edge_index holds 3 at edge 0"):
        neighbour_aggregates(features, np.array([[3, 1], [1, 2]]), np.array([0, 1]), 2)
    with pytest.raises(ValueError, match=r"edge_type must have shape \(2,\)"):
        neighbour_aggregates(features, np.array([[0, 1], [1, 2]]), np.array([0]), 2)


# --------------------------------------------------------------------------------------------------
# baselines


def _data():
    return make_classification(n_samples=150, n_features=6, n_informative=4, n_classes=3,
                               random_state=0)


FAST = {"random_forest": {"n_estimators": 30}, "gradient_boosting": {"max_iter": 30},
        "logistic_regression": {}}


@pytest.mark.parametrize("name", sorted(BASELINES))
def test_baseline_fits_and_is_seeded(name):
    X, y = _data()
    proba = [make_baseline(name, seed=3, **FAST[name]).fit(X, y).predict_proba(X) for _ in range(2)]
    assert proba[0].shape == (150, 3)
    np.testing.assert_allclose(proba[0].sum(axis=1), 1.0)
    np.testing.assert_array_equal(proba[0], proba[1])
    # better than sklearn's DummyClassifier (majority class) on the data it was fitted on
    chance = DummyClassifier().fit(X, y).score(X, y)
    assert (proba[0].argmax(axis=1) == y).mean() > chance + 0.2


def test_baseline_settings():
    forest = make_baseline("random_forest", seed=5)
    assert forest.get_params()["class_weight"] == "balanced" and forest.n_jobs == 1
    assert forest.random_state == 5
    assert make_baseline("gradient_boosting", seed=5).class_weight == "balanced"
    logistic = make_baseline("logistic_regression", seed=5, C=0.5)
    assert isinstance(logistic, Pipeline) and isinstance(logistic.steps[0][1], StandardScaler)
    assert logistic[-1].C == 0.5 and logistic[-1].class_weight == "balanced"
    X, y = _data()
    a = make_baseline("random_forest", seed=1, n_estimators=10).fit(X, y).predict_proba(X)
    b = make_baseline("random_forest", seed=2, n_estimators=10).fit(X, y).predict_proba(X)
    assert not np.array_equal(a, b)  # the seed is actually used


def test_baseline_bad_names():
    with pytest.raises(ValueError, match=r"unknown baseline 'svm'.*gradient_boosting.*logistic"):
        make_baseline("svm", seed=0)
    with pytest.raises(ValueError, match=r"no option\(s\) \['depth'\]"):
        make_baseline("random_forest", seed=0, depth=3)
    with pytest.raises(ValueError, match="model.options.random_state.*config key seed"):
        make_baseline("random_forest", seed=0, random_state=1)
