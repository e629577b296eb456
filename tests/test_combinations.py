"""Every graph builder × model × feature set runs end to end on synthetic certificates and FUNSD.

The option lists are read from ``configs/`` itself, so a new config file is covered as soon as it
exists. The default suite runs a covering set (every builder, layer, baseline and feature set at
least once, on each dataset); the full cartesian product is marked ``slow``. Feature sets that
need an optional extra (the pretrained text embedding) get a covering set of their own, marked
``slow`` too (the model takes seconds to load), and skip when the extra is not installed.

Runs are composed with Hydra's compose API from the repository's configs and shrunk (few pages,
two epochs, narrow models) so that they test the wiring, not the accuracy.
"""

from __future__ import annotations

import itertools
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import torch
from hydra import compose, initialize_config_dir
from omegaconf import DictConfig, OmegaConf, open_dict
from threadpoolctl import threadpool_limits

from dochar import graphs
from dochar.data.sources import load_data
from dochar.data.word_table import iter_pages
from dochar.experiment import run_experiment
from dochar.features import FEATURE_GROUPS, WordFeaturizer
from dochar.features.page_image import PAGE_IMAGE_NAMES, PageImageError
from dochar.features.text_embedding import embedding_available
from dochar.models.gnn import GNNStack, count_parameters
from dochar.models.inputs import PageSet, to_graphs
from dochar.runs.bundle import PROBABILITY_PREFIX
from tests.helpers import REPO, require_dataset, split_documents

CONFIGS = REPO / "configs"
pytestmark = pytest.mark.filterwarnings("ignore:WordFeaturizer. lexicon columns:UserWarning")
TINY = ["train.max_epochs=2", "train.threads=1", "train.patience=2", "train.progress=false",
        "evaluation.bootstrap_resamples=20", "tracking.enabled=false",
        "features.char_cnn.channels=8", "features.char_cnn.out_dim=8",
        "features.hash_features=32"]
SYNTH = ["data.documents=16"]
# Shrunk only for speed: option names exist in configs/model/*.yaml.
SMALL_MODEL = {"gnn": {"hidden_dim": 16},
               "random_forest": {"n_estimators": 8},
               "gradient_boosting": {"max_iter": 8, "max_bins": 8},
               "logistic_regression": {"max_iter": 200}}
FUNSD_FORMS = {"training_data": 5, "testing_data": 2}


def options(group: str) -> list[str]:
    return sorted(p.stem for p in (CONFIGS / group).glob("*.yaml") if p.stem != "common")


def models(kind: str) -> list[str]:
    """Model configs of one kind, composed so that a file inheriting its kind counts too."""
    with initialize_config_dir(config_dir=str(CONFIGS), version_base="1.3"):
        return [m for m in options("model")
                if compose("config", overrides=[f"model={m}"]).model.kind == kind]


def feature_sets(core: bool) -> list[str]:
    """Feature configs built from the core groups only (core=True), or needing an extra."""
    chosen = []
    for name in options("features"):
        groups = set(OmegaConf.load(CONFIGS / "features" / f"{name}.yaml").groups)
        if (groups <= set(FEATURE_GROUPS)) == core:
            chosen.append(name)
    return chosen


GRAPHS, FEATURES, EXTRA_FEATURES = options("graph"), feature_sets(True), feature_sets(False)
GNNS, BASELINES = models("gnn"), models("baseline")


def covering(models_: list[str], first_features: str | None = None,
             features: list[str] = FEATURES) -> list[tuple[str, str, str]]:
    """(graph, model, features) triples in which every option of each list appears at least once."""
    if first_features is not None:
        start = features.index(first_features)
        features = features[start:] + features[:start]
    count = max(len(GRAPHS), len(models_), len(features))
    return [(GRAPHS[i % len(GRAPHS)], models_[i % len(models_)], features[i % len(features)])
            for i in range(count)]


# The baselines' cycle starts at char_cnn alone: zero dense columns, only hashed n-grams.
FAST = covering(GNNS) + covering(BASELINES, first_features="char_cnn")
FULL = list(itertools.product(GRAPHS, GNNS + BASELINES, FEATURES))
EXTRA = covering(GNNS + BASELINES, features=EXTRA_FEATURES) if EXTRA_FEATURES else []


@pytest.fixture(autouse=True)
def one_thread():
    """One OpenMP/BLAS thread, as train.threads=1 gives torch: on a shared machine idle
    OpenMP workers spin and slow tiny runs many times over."""
    with threadpool_limits(1):
        yield


@pytest.fixture(scope="session")
def funsd_small(tmp_path_factory) -> Path:
    """A FUNSD-shaped folder holding the first few forms of each official part (symlinks)."""
    root = require_dataset("funsd")
    small = tmp_path_factory.mktemp("funsd_small")
    for part, count in FUNSD_FORMS.items():
        for sub in ("annotations", "images"):
            (small / part / sub).mkdir(parents=True)
        for annotation in sorted((root / part / "annotations").glob("*.json"))[:count]:
            (small / part / "annotations" / annotation.name).symlink_to(annotation)
            image = root / part / "images" / f"{annotation.stem}.png"
            if image.exists():
                (small / part / "images" / image.name).symlink_to(image)
    return small


def dataset_overrides(dataset: str, request: pytest.FixtureRequest) -> list[str]:
    if dataset == "synth":
        return SYNTH
    return ["data=funsd", f"data.path={request.getfixturevalue('funsd_small')}", "split=fixed"]


def make_config(graph: str, model: str, features: str, extra: list[str] = ()) -> DictConfig:
    with initialize_config_dir(config_dir=str(CONFIGS), version_base="1.3"):
        cfg = compose("config", overrides=[f"graph={graph}", f"model={model}",
                                           f"features={features}", *TINY, *extra])
    if "text_embedding" in cfg.features.groups and not embedding_available():
        pytest.skip("optional extra 'embed' not installed (pip install 'dochar[embed]')")
    key = "gnn" if cfg.model.kind == "gnn" else str(cfg.model.estimator)
    with open_dict(cfg):
        target = cfg.model if key == "gnn" else cfg.model.options
        for name, value in SMALL_MODEL[key].items():
            target[name] = value
    return cfg


def expected_baseline_width(cfg: DictConfig, relations: int) -> int:
    """Columns of a baseline's matrix: dense features (+ hashed n-grams), then, with neighbour
    features, a mean and a max block per relation (dochar.models.baselines.neighbour_aggregates)."""
    featurizer = WordFeaturizer(groups=list(cfg.features.groups),
                                lexicons=OmegaConf.to_container(cfg.data.lexicons))
    width = len(featurizer.feature_names)
    if featurizer.uses_char_cnn:
        width += int(cfg.features.hash_features)
    if featurizer.uses_crop_cnn and "page_image" not in featurizer.groups:
        width += len(PAGE_IMAGE_NAMES)     # the crop CNN's stand-in for a baseline
    return width * (1 + 2 * relations) if cfg.model.neighbour_features else width


def check_run(cfg: DictConfig, bundle, fitted) -> None:
    model = fitted.model
    labels = list(cfg.data.labels)
    metrics = bundle.metrics
    scores = {k: v for k, v in metrics.items()
              if k in {"macro_f1", "micro_f1", "entity_f1"} or k.startswith("f1/")}
    assert {"macro_f1", "micro_f1"} <= set(scores)
    for key, value in scores.items():   # F1 is a ratio of counts: in [0, 1] (common practice)
        assert math.isfinite(value) and 0.0 <= value <= 1.0, (key, value)
    for key in ("macro_f1", "micro_f1"):
        assert metrics[f"{key}_low"] - 1e-9 <= metrics[f"{key}_high"], key

    predictions = bundle.predictions
    columns = [f"{PROBABILITY_PREFIX}{label}" for label in labels]
    proba = predictions[columns].to_numpy()
    assert np.isfinite(proba).all() and (proba >= 0).all()
    np.testing.assert_allclose(proba.sum(axis=1), 1.0, atol=1e-5)
    assert set(predictions["predicted"]) <= set(labels)
    np.testing.assert_array_equal(predictions["predicted"].to_numpy(),
                                  np.asarray(labels)[proba.argmax(axis=1)])

    builder = graphs.from_config(cfg.graph)
    relations = len(builder.relations)
    assert bundle.tags["graph_builder"] == cfg.graph.name
    assert metrics["graph/nodes"] == len(predictions)   # diagnostics cover the test pages
    assert set(bundle.edges["relation"]) <= set(builder.relations)
    if cfg.model.kind == "gnn":
        assert isinstance(model, GNNStack)
        assert bundle.cost["parameters"] == count_parameters(model)
        bases = (cfg.model.layer_options or {}).get("num_bases")
        for block in model.blocks:
            assert block.layer.num_relations == relations
            if cfg.model.layer != "relational":
                continue
            conv = block.layer.conv
            if bases is None:   # one matrix per relation (Schlichtkrull et al. 2018, eq. 2)
                assert conv.weight.shape[0] == relations and conv.comp is None
            else:               # W_r = sum_b a_rb V_b (eq. 3)
                assert conv.weight.shape[0] == bases
                assert tuple(conv.comp.shape) == (relations, bases)
        assert (model.char_encoder is not None) == ("char_cnn" in cfg.features.groups)
        assert (model.crop_encoder is not None) == ("crop_cnn" in cfg.features.groups)
    else:
        assert bundle.cost["parameters"] > 0
        assert model.n_features_in_ == expected_baseline_width(cfg, relations)


@pytest.mark.parametrize("dataset", ["synth", "funsd"])
@pytest.mark.parametrize("graph,model,features", FAST)
def test_covering_combination_runs(dataset, graph, model, features, request) -> None:
    cfg = make_config(graph, model, features, dataset_overrides(dataset, request))
    bundle, fitted = run_experiment(cfg)
    check_run(cfg, bundle, fitted)


def test_covering_set_covers_every_option() -> None:
    used = [set(column) for column in zip(*FAST)]
    assert used[0] == set(GRAPHS)
    assert used[1] == set(GNNS + BASELINES)
    assert used[2] == set(FEATURES)
    assert not EXTRA or {f for _, _, f in EXTRA} == set(EXTRA_FEATURES)
    assert {"gcn", "none", "relational", "attention", "max"} <= {
        OmegaConf.load(CONFIGS / "model" / f"{m}.yaml").get("layer") for m in GNNS}


@pytest.mark.parametrize("dataset", ["synth", "funsd"])
def test_typed_self_loops_and_reverse_edges_reach_the_model(dataset, request) -> None:
    extra = ["graph.self_loops=true", "graph.reverse_edges=true",
             *dataset_overrides(dataset, request)]
    for model in ("relational", "random_forest_neighbours"):
        cfg = make_config("sector", model, "geometry_text", extra)
        bundle, fitted = run_experiment(cfg)
        # 4 directions, their 4 mirrors, and 'self' (dochar.graphs.edge_options)
        assert len(graphs.from_config(cfg.graph).relations) == 9
        assert {"self", "above_rev"} <= set(bundle.edges["relation"])
        check_run(cfg, bundle, fitted)


def _test_graphs(cfg: DictConfig):
    data = load_data(cfg.data)
    test_docs = set(split_documents(data.table, cfg).test)
    pages = [p for p in iter_pages(data.table) if p.doc_id in test_docs]
    page_set = PageSet.build(pages, graphs.from_config(cfg.graph))
    featurizer = WordFeaturizer(groups=list(cfg.features.groups),
                                lexicons=OmegaConf.to_container(cfg.data.lexicons),
                                max_chars=int(cfg.features.max_chars)).fit(pages)
    index = {label: i for i, label in enumerate(cfg.data.labels)}
    return to_graphs(page_set, featurizer, index)


def _rewired(edge_index: torch.Tensor, edge_type: torch.Tensor, nodes: int, seed: int
             ) -> tuple[torch.Tensor, torch.Tensor]:
    """Random endpoints and shuffled types, same edge count."""
    generator = torch.Generator().manual_seed(seed)
    return (torch.randint(0, nodes, edge_index.shape, generator=generator),
            edge_type[torch.randperm(len(edge_type), generator=generator)])


@pytest.mark.parametrize("layer,blind", [("none", True), ("relational", False), ("max", False)])
def test_only_the_no_graph_layer_ignores_the_edges(layer, blind) -> None:
    """Rewire every edge at random: the no-graph ablation must not notice, a GNN must."""
    cfg = make_config("sector", layer, "geometry_text", SYNTH)
    model = run_experiment(cfg)[1].model
    changed = []
    for seed, graph in enumerate(_test_graphs(cfg)):
        before = model.predict_proba(graph.x, graph.edge_index, graph.edge_type)
        after = model.predict_proba(graph.x, *_rewired(graph.edge_index, graph.edge_type,
                                                       graph.num_nodes, seed))
        changed.append(not torch.allclose(before, after, atol=1e-6))
    assert not any(changed) if blind else all(changed)


def test_no_graph_layer_scores_the_same_under_any_builder() -> None:
    """Same seed, same pages, different graphs: without message passing nothing may differ."""
    frames = []
    for graph in ("sector", "reading_order"):
        bundle, _ = run_experiment(make_config(graph, "none", "geometry_text", SYNTH))
        frames.append(bundle.predictions.filter(like=PROBABILITY_PREFIX))
    pd.testing.assert_frame_equal(frames[0], frames[1])
    bundle, _ = run_experiment(make_config("reading_order", "relational", "geometry_text", SYNTH))
    assert not np.allclose(bundle.predictions.filter(like=PROBABILITY_PREFIX), frames[0])


@pytest.mark.slow
@pytest.mark.parametrize("dataset", ["synth", "funsd"])
@pytest.mark.parametrize("graph,model,features", FULL)
def test_every_combination_runs(dataset, graph, model, features, request) -> None:
    cfg = make_config(graph, model, features, dataset_overrides(dataset, request))
    bundle, fitted = run_experiment(cfg)
    check_run(cfg, bundle, fitted)


@pytest.mark.slow
@pytest.mark.parametrize("dataset", ["synth", "funsd"])
@pytest.mark.parametrize("graph,model,features", EXTRA)
def test_optional_feature_sets_run(dataset, graph, model, features, request) -> None:
    cfg = make_config(graph, model, features, dataset_overrides(dataset, request))
    bundle, fitted = run_experiment(cfg)
    check_run(cfg, bundle, fitted)
    if set(cfg.features.groups) & {"page_image", "crop_cnn"}:
        # FUNSD names a scan for every form; generated certificates have none, every page counts
        missing = bundle.metrics["data/page_images_missing"]
        assert missing == 0 if dataset == "funsd" else missing > 0


def test_strict_mode_stops_at_a_page_without_image() -> None:
    cfg = make_config("knn", "relational", "page_image", [*SYNTH, "strict=true"])
    with pytest.raises(PageImageError, match=r"page coa-\d+#p1: page image missing"):
        run_experiment(cfg)


@pytest.mark.slow
def test_one_command_sweeps_every_layer_and_baseline(tmp_path) -> None:
    """`dochar run -m model=...` over every model config on one builder: one table, every run."""
    every = GNNS + BASELINES
    command = [sys.executable, "-m", "dochar.cli", "run", "-m", f"model={','.join(every)}",
               "graph=sector", *TINY, *SYNTH, f"hydra.sweep.dir={tmp_path}"]
    done = subprocess.run(command, cwd=REPO, capture_output=True, text=True, timeout=1800)
    assert done.returncode == 0, done.stderr[-3000:]
    table = pd.read_csv(tmp_path / "sweep_table.csv")
    assert len(table) == len(every)
    assert table["macro_f1"].is_monotonic_decreasing
    assert table["macro_f1"].between(0, 1).all()
    assert "runs ranked by macro-F1" in done.stdout
