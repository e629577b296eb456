"""Inputs for the training and prediction benchmarks, built the way a run builds them.

One place composes a config (the FUNSD R-GCN preset ``+experiment=funsd_rgcn``: kNN graph k=8,
3 blocks x 128, with geometry, text flags and the char CNN; or the same model on synthetic
certificates), splits, builds graphs and features, and makes the model, so every timing starts
from what a run trains on.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from hydra import compose, initialize_config_dir
from omegaconf import DictConfig, OmegaConf

from dochar.config import CONFIG_DIR
from dochar.models.inputs import PageSet
from dochar.data.word_table import Page, iter_pages
from dochar import graphs
from dochar.splits import PARTS, split_run
from dochar.features import CharCNNEncoder, WordFeaturizer
from dochar.models.gnn import GNNStack
from dochar.data.sources import load_data


# the preset's network and graph on the features the speed targets name (geometry, text flags, char CNN):
# the preset's text embedding and line context would time a pretrained encoder, not dochar
FUNSD_PRESET = ("+experiment=funsd_rgcn", "features.groups=[geometry,text_flags,char_cnn]",
                "features.line_context=false")
SYNTH_PRESET = ("graph=knn", "graph.options.k=8", "features=all", "model=relational",
                "model.hidden_dim=128", "model.depth=3", "model.dropout=0.3", "split=random",
                "train.threads=1", "train.progress=false")


@dataclass
class RunInputs:
    cfg: DictConfig
    sets: dict[str, PageSet]
    featurizer: WordFeaturizer
    labels: list[str]

    def model(self) -> GNNStack:
        m, f = self.cfg.model, self.cfg.features
        encoder = CharCNNEncoder(**OmegaConf.to_container(f.char_cnn))
        return GNNStack(in_dim=len(self.featurizer.feature_names), num_classes=len(self.labels),
                        num_relations=len(self.sets["train"].relations), layer=m.layer,
                        hidden_dim=m.hidden_dim, depth=m.depth, dropout=m.dropout, norm=m.norm,
                        residual=m.residual, char_encoder=encoder,
                        char_dim=int(f.char_cnn.out_dim))


def compose_config(overrides: Sequence[str], datasets: Path | None = None) -> DictConfig:
    with initialize_config_dir(config_dir=str(CONFIG_DIR), version_base="1.3"):
        cfg = compose("config", overrides=["tracking.enabled=false", *overrides])
    if datasets is not None and cfg.data.name == "funsd":
        cfg.data.path = str(datasets / "funsd")
    return cfg


def run_inputs(overrides: Sequence[str], datasets: Path | None = None) -> RunInputs:
    cfg = compose_config(overrides, datasets)
    labels = list(cfg.data.labels)
    table = load_data(cfg.data, strict=False, progress=False).table
    assignment = split_run(table, cfg.split, int(cfg.seed)).assignment
    pages: list[Page] = list(iter_pages(table))
    builder = graphs.from_config(cfg.graph)
    sets = {part: PageSet.build([p for p in pages if p.doc_id in set(getattr(assignment, part))],
                                builder) for part in PARTS}
    groups = list(cfg.features.groups)
    lexicons = OmegaConf.to_container(cfg.data.lexicons) if "text_flags" in groups else None
    featurizer = WordFeaturizer(groups=groups, lexicons=lexicons,
                                max_chars=int(cfg.features.max_chars)).fit(sets["train"].pages)
    return RunInputs(cfg, sets, featurizer, labels)
