"""Edge transforms (dochar/graphs/transforms/): the order they run in, what each adds, the shared
graph config, and the composed builder's promises (relations and attribute names before any page).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import yaml

from dochar import graphs
from dochar.graphs import GraphBuilderError, make_graph_builder
from dochar.graphs.transforms import (TRANSFORMS, EdgeFeatures, PruneGutters, ReverseEdges,
                                      SelfLoops, TransformedBuilder)
from tests.graphs.test_builders import edge_set, make_page, two_column_page
from tests.helpers import REPO


def test_transforms_run_in_registry_order():
    # pruning sees geometry only, mirrors copy what survived, self-loops follow, features last
    assert list(TRANSFORMS) == ["prune_gutters", "reverse_edges", "self_loops", "edge_features"]
    builder = make_graph_builder("knn", k=2, self_loops=True, prune_gutters=True,
                                 edge_features=["distance"], reverse_edges=True)
    assert [type(t) for t in builder.transforms] == [PruneGutters, ReverseEdges, SelfLoops,
                                                      EdgeFeatures]
    assert builder.edge_attr_names == ("distance", "gap")


def test_gutter_sizes_of_the_shared_config_are_the_code_defaults():
    common = yaml.safe_load((REPO / "configs" / "graph" / "common.yaml").read_text())
    defaults = {f.name: f.default for f in dataclasses.fields(PruneGutters)}
    assert common["options"] == defaults == {"gutter_min_width": 0.04, "gutter_min_height": 0.5}
    assert {key: common[key] for key in ("self_loops", "reverse_edges", "prune_gutters")} == \
        dict.fromkeys(("self_loops", "reverse_edges", "prune_gutters"), False)


def test_every_builder_config_starts_from_the_shared_one():
    for path in sorted((REPO / "configs" / "graph").glob("*.yaml")):
        if path.stem == "common":
            continue
        text = yaml.safe_load(path.read_text())
        assert "common" in text["defaults"] or text["defaults"][0] in {
            p.stem for p in path.parent.glob("*.yaml")}, path.name
        shared = {"self_loops", "reverse_edges", "gutter_min_width"}
        assert not shared & set(text.get("options") or {})


def test_pruning_after_edge_features_keeps_attributes_aligned():
    page, _ = two_column_page()
    features = EdgeFeatures(groups=("offsets", "distance"))
    base = graphs.BUILDERS["knn"](k=6)
    late = TransformedBuilder(base, [features, PruneGutters()])(page)
    early = TransformedBuilder(base, [PruneGutters(), features])(page)
    assert late.num_edges < TransformedBuilder(base, [features])(page).num_edges
    assert np.array_equal(late.edge_index, early.edge_index)
    np.testing.assert_array_equal(late.edge_attr, early.edge_attr)


def test_a_transform_that_adds_edges_may_not_follow_edge_features():
    base = graphs.BUILDERS["knn"]()
    for late in (ReverseEdges(), SelfLoops()):
        with pytest.raises(GraphBuilderError, match=f"{late.switch} cannot follow"):
            TransformedBuilder(base, [EdgeFeatures(groups=("offsets",)), late])


def test_from_config_reads_the_edges_section():
    cfg = {"name": "knn", "options": {"k": 2}, "reverse_edges": True}
    page = make_page([(0, 0, 5, 5), (10, 0, 15, 5), (0, 10, 5, 15)])
    plain = graphs.from_config(cfg)
    assert plain.edge_attr_names == () and plain(page).edge_attr is None
    assert graphs.from_config(cfg, {"name": "none", "groups": []}).edge_attr_names == ()
    rich = graphs.from_config(cfg, {"name": "x", "groups": ["direction", "reading_order"]})
    edges = rich(page)
    assert rich.edge_attr_names == edges.edge_attr_names == (
        "direction_sin", "direction_cos", "reading_distance")
    assert edge_set(edges) == edge_set(plain(page))
    assert edges.edge_attr.shape == (edges.num_edges, 3)


def test_gutter_options_are_checked_even_when_pruning_is_off():
    with pytest.raises(GraphBuilderError, match=r"gutter_min_width \(prune_gutters\).*\(0, 1\]"):
        make_graph_builder("knn", gutter_min_width=1.5)
    with pytest.raises(GraphBuilderError, match="reverse_edges must be true or false"):
        make_graph_builder("knn", reverse_edges="no")
