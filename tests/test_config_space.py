"""The comparison space as config values: every config file composes, every option names
something the code registers, and a wrong name fails early with a message that lists the choices.

Config groups mirror code modules: ``configs/graph/X.yaml`` names a builder in
``dochar.graphs.BUILDERS``, ``configs/model/X.yaml`` a layer in ``dochar.models.layers.LAYERS``
or a baseline in ``dochar.models.baselines.BASELINES``, ``configs/features/X.yaml`` groups of
``dochar.features.FEATURE_GROUPS`` (or ``IMAGE_GROUPS``, which read page images, or
``OPTIONAL_GROUPS``, which need an extra), ``configs/edges/X.yaml`` groups of
``dochar.graphs.transforms.EDGE_FEATURE_GROUPS`` (dochar/graphs/transforms/edge_features.py).
A variant file is named ``<registered name>_<variant>``.
"""

from __future__ import annotations

import copy
import functools
import itertools
import subprocess
import sys

import pytest
import torch
from hydra import compose, initialize_config_dir
from hydra.errors import MissingConfigException
from omegaconf import DictConfig, OmegaConf

from dochar import graphs
from dochar.features import (
    FEATURE_GROUPS,
    IMAGE_GROUPS,
    OPTIONAL_GROUPS,
    CharCNNEncoder,
    CropCNNEncoder,
    WordFeaturizer,
)
from dochar.features.text_embedding import embedding_available
from dochar.graphs import BUILDERS, GraphBuilderError, builder_options
from dochar.graphs.transforms import EDGE_FEATURE_GROUPS
from dochar.models.baselines import BASELINES, TEMPLATE_BASELINES, make_baseline, make_template
from dochar.models.gnn import NORMS, GNNStack
from dochar.models.layers import LAYERS, layer_options
from tests.helpers import REPO

CONFIGS = REPO / "configs"
GROUPS = ("data", "graph", "edges", "features", "model", "split", "train")
SHAPE_KEYS = ("hidden_dim", "depth", "dropout", "norm", "residual")


def options(group: str) -> list[str]:
    return sorted(p.stem for p in (CONFIGS / group).glob("*.yaml") if p.stem != "common")


@functools.lru_cache(maxsize=None)
def _composed(overrides: tuple[str, ...]) -> DictConfig:
    with initialize_config_dir(config_dir=str(CONFIGS), version_base="1.3"):
        return compose("config", overrides=list(overrides))


def composed(*overrides: str) -> DictConfig:
    """A fresh copy of the composed config (composing is the slow part, so it is cached)."""
    return copy.deepcopy(_composed(overrides))


def mirrors(stem: str, registered: str) -> bool:
    return stem == registered or stem.startswith(f"{registered}_")


def gnn_stack(model_cfg, num_relations: int = 4) -> GNNStack:
    return GNNStack(in_dim=5, num_classes=3, num_relations=num_relations, layer=model_cfg.layer,
                    hidden_dim=model_cfg.hidden_dim, depth=model_cfg.depth,
                    dropout=model_cfg.dropout, norm=model_cfg.norm, residual=model_cfg.residual,
                    layer_options=dict(model_cfg.layer_options or {}))


@pytest.mark.parametrize("group,option",
                         [(g, o) for g in GROUPS for o in options(g)])
def test_every_config_file_composes(group, option) -> None:
    cfg = composed(f"{group}={option}")
    assert OmegaConf.select(cfg, group) is not None
    OmegaConf.to_container(cfg[group], resolve=group != "data")   # data/word_table needs a path


@pytest.mark.parametrize("option", options("graph"))
def test_graph_config_names_a_registered_builder(option) -> None:
    graph = composed(f"graph={option}").graph
    assert graph.name in BUILDERS, f"configs/graph/{option}.yaml: name {graph.name!r}"
    assert mirrors(option, graph.name)
    assert set(graph.options or {}) <= set(builder_options(graph.name))
    builder = graphs.from_config(composed(f"graph={option}").graph)   # options accepted as given
    assert builder.relations and len(set(builder.relations)) == len(builder.relations)


def test_every_registered_builder_has_its_config() -> None:
    assert set(BUILDERS) <= set(options("graph"))


@pytest.mark.parametrize("option", options("edges"))
def test_edges_config_names_registered_feature_groups(option) -> None:
    cfg = composed(f"edges={option}")
    assert cfg.edges.name == option and set(cfg.edges.groups) <= set(EDGE_FEATURE_GROUPS)
    builder = graphs.from_config(cfg.graph, cfg.edges)
    assert len(builder.edge_attr_names) == sum(len(EDGE_FEATURE_GROUPS[g])
                                               for g in cfg.edges.groups)


def test_edges_default_to_none_and_every_group_has_a_set() -> None:
    assert composed().edges.groups == [] and graphs.from_config(
        composed().graph, composed().edges).edge_attr_names == ()
    chosen = {g for o in options("edges") for g in composed(f"edges={o}").edges.groups}
    assert chosen == set(EDGE_FEATURE_GROUPS)


def test_graph_options_combine_into_typed_relations() -> None:
    """reverse_edges adds '<r>_rev' per base relation, self_loops one 'self' (edge_options)."""
    for option in options("graph"):
        base = graphs.from_config(composed(f"graph={option}").graph).relations
        both = graphs.from_config(composed(f"graph={option}", "graph.reverse_edges=true",
                                            "graph.self_loops=true").graph).relations
        assert both == (*base, *(f"{r}_rev" for r in base), "self")


@pytest.mark.parametrize("option", options("model"))
def test_model_config_names_a_registered_layer_or_baseline(option) -> None:
    model = composed(f"model={option}").model
    if model.kind == "gnn":
        assert model.layer in LAYERS and mirrors(option, model.layer)
        assert set(model.layer_options or {}) <= set(layer_options(model.layer))
        assert set(SHAPE_KEYS) <= set(model) and model.norm in NORMS
        stack = gnn_stack(model)
        assert len(stack.blocks) == model.depth
    elif model.kind == "template":   # reads whole pages: no neighbour-feature variant
        assert model.estimator in TEMPLATE_BASELINES and mirrors(option, model.estimator)
        make_template(model.estimator, dict(model.options or {}), ["other"], {})
    else:
        assert model.kind == "baseline"
        assert model.estimator in BASELINES and mirrors(option, model.estimator)
        assert isinstance(model.neighbour_features, bool)
        assert option.endswith("_neighbours") == model.neighbour_features
        make_baseline(model.estimator, 0, **dict(model.options or {}))


def test_every_layer_and_baseline_has_its_configs() -> None:
    models = {o: composed(f"model={o}").model for o in options("model")}
    layers = {m.layer for m in models.values() if m.kind == "gnn"}
    assert layers == set(LAYERS)
    for name in BASELINES:   # (a) per-word features, (b) plus neighbour aggregates
        assert not models[name].neighbour_features
        assert models[f"{name}_neighbours"].neighbour_features
        assert models[f"{name}_neighbours"].estimator == name
    bases = [m for m in models.values()
             if m.kind == "gnn" and (m.layer_options or {}).get("num_bases")]
    assert bases, "a relational config with basis decomposition (num_bases)"


def test_model_shape_keys_reach_the_network() -> None:
    cfg = composed("model=relational", "model.depth=3", "model.hidden_dim=8",
                   "model.norm=layer", "model.residual=false", "model.dropout=0.1")
    stack = gnn_stack(cfg.model)
    assert len(stack.blocks) == 3 and stack.input_projection.out_features == 8
    assert all(isinstance(b.norm, torch.nn.LayerNorm) and not b.residual
               and b.dropout.p == 0.1 for b in stack.blocks)


@pytest.mark.parametrize("option", options("features"))
def test_feature_config_names_registered_groups(option) -> None:
    features = composed(f"features={option}").features
    assert features.groups and set(features.groups) <= set(FEATURE_GROUPS + IMAGE_GROUPS
                                                           + OPTIONAL_GROUPS)
    if not set(features.groups) & set(OPTIONAL_GROUPS) or embedding_available():
        WordFeaturizer(groups=list(features.groups))
    encoder = CharCNNEncoder(**OmegaConf.to_container(features.char_cnn))
    chars = torch.zeros((3, int(features.max_chars)), dtype=torch.long)
    assert encoder(chars).shape == (3, features.char_cnn.out_dim)
    crops = CropCNNEncoder(**OmegaConf.to_container(features.crop_cnn))
    assert crops(torch.zeros((3, 16, 64), dtype=torch.uint8)).shape == (3, features.crop_cnn.out_dim)


def test_every_combination_of_feature_groups_has_a_config() -> None:
    chosen = [frozenset(composed(f"features={o}").features.groups) for o in options("features")]
    chosen = [c for c in chosen if c <= set(FEATURE_GROUPS)]   # the core groups, each subset
    every = {frozenset(c) for r in range(1, len(FEATURE_GROUPS) + 1)
             for c in itertools.combinations(FEATURE_GROUPS, r)}
    assert len(chosen) == len(set(chosen)) and set(chosen) == every


@pytest.mark.parametrize("option", options("experiment"))
def test_experiment_presets_name_registered_parts(option) -> None:
    cfg = composed(f"+experiment={option}")
    assert set(cfg.graph.options or {}) <= set(builder_options(cfg.graph.name))
    graphs.from_config(cfg.graph, cfg.edges)
    assert set(cfg.features.groups) <= set(FEATURE_GROUPS + OPTIONAL_GROUPS)
    if cfg.model.kind == "gnn":
        gnn_stack(cfg.model)
    else:
        make_baseline(cfg.model.estimator, 0, **dict(cfg.model.options or {}))


@pytest.mark.parametrize("group", ["graph", "edges", "model", "features"])
def test_unknown_config_file_lists_the_choices(group) -> None:
    with pytest.raises(MissingConfigException) as caught:
        composed(f"{group}=no_such_option")
    for option in options(group):
        assert option in str(caught.value)


def test_unknown_names_inside_a_config_fail_with_the_valid_names() -> None:
    with pytest.raises(GraphBuilderError, match=r"unknown graph builder 'hexagon'.*'sector'"):
        graphs.from_config(composed("graph.name=hexagon").graph)
    with pytest.raises(GraphBuilderError, match=r"unknown option\(s\) \['radius'\]"):
        graphs.from_config(composed("+graph.options.radius=3").graph)
    with pytest.raises(ValueError, match=r"unknown layer 'chebyshev'.*'relational'"):
        gnn_stack(composed("model.layer=chebyshev").model)
    with pytest.raises(ValueError, match=r"has no option\(s\) \['temperature'\]"):
        gnn_stack(composed("model=attention", "+model.layer_options.temperature=2").model)
    model = composed("model=random_forest", "model.estimator=svm").model
    with pytest.raises(ValueError, match=r"unknown baseline 'svm'.*'random_forest'"):
        make_baseline(model.estimator, 0)
    features = composed("features.groups=[geometry,layout_vision]").features
    with pytest.raises(ValueError, match=r"\['layout_vision'\].*'geometry'"):
        WordFeaturizer(groups=list(features.groups))


def test_command_line_refuses_an_unknown_option_by_group() -> None:
    done = subprocess.run([sys.executable, "-m", "dochar.cli", "run", "graph=hexagon"],
                          cwd=REPO, capture_output=True, text=True, timeout=120)
    assert done.returncode != 0
    message = done.stdout + done.stderr
    assert "graph=hexagon" in message and "sector" in message and "Traceback" not in message
