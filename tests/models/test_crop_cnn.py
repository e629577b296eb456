"""The crop CNN in the GNN stack: crops travel as a node tensor, gradients reach the encoder,
a saved model rebuilds it, and a baseline gets the handcrafted crop features in its place."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from hydra import compose, initialize_config_dir
from omegaconf import OmegaConf
from PIL import Image
from torch_geometric.data import Batch

from dochar import graphs
from dochar.data.word_table import Page
from dochar.features import CropCNNEncoder, WordFeaturizer
from dochar.features.page_image import CROP_SIZE, PAGE_IMAGE_NAMES
from dochar.models.builders import build_gnn, gnn_arguments
from dochar.models.fit import FittedModel
from dochar.tasks import WordLabels
from dochar.models.gnn import GNNStack
from dochar.models.inputs import PageSet, to_graphs, to_matrix
from dochar.models.saved import load_model, save_model
from dochar.models.objectives import node_inputs
from dochar.models.training import predict_proba
from tests.helpers import CONFIGS

LABELS = ["analyte", "other"]


def config(*overrides: str) -> dict:
    with initialize_config_dir(config_dir=str(CONFIGS), version_base="1.3"):
        return OmegaConf.to_container(compose("config", overrides=list(overrides)), resolve=True)


@pytest.fixture()
def pages(tmp_path, monkeypatch) -> list[Page]:
    """Two drawn pages of four words: dark bars for the analytes, faint ones for the rest."""
    monkeypatch.setenv("DOCHAR_CACHE", str(tmp_path / "cache"))
    boxes = np.array([[10, 10, 50, 20], [60, 10, 90, 20], [10, 40, 50, 50], [60, 40, 90, 50]],
                     dtype=np.float64)
    made = []
    for index in range(2):
        grey = np.full((60, 100), 255, dtype=np.uint8)
        for row, (x0, y0, x1, y1) in enumerate(boxes.astype(int)):
            grey[y0 + 2:y1 - 2, x0 + 2:x1 - 2] = 0 if row % 2 == 0 else 200
        path = tmp_path / f"page{index}.png"
        Image.fromarray(grey).save(path)
        made.append(Page(doc_id=f"coa-{index}", page=1, word_ids=np.arange(4),
                         texts=["Lead", "mg/kg", "Zinc", "ok"], boxes=boxes, width=100.0,
                         height=60.0, labels=["analyte", "other"] * 2, image=str(path)))
    return made


def test_encoder_shape_and_refusal():
    encoder = CropCNNEncoder(channels=4, out_dim=6)
    assert encoder(torch.zeros((5, *CROP_SIZE), dtype=torch.uint8)).shape == (5, 6)
    with pytest.raises(ValueError, match=r"expected crops of shape \(n, 16, 64\)"):
        encoder(torch.zeros((5, 16, 32), dtype=torch.uint8))


def test_crops_reach_the_model_and_its_gradient_reaches_the_encoder(pages):
    featurizer = WordFeaturizer(groups=["geometry", "crop_cnn"], image_cache=None).fit(pages)
    page_set = PageSet.build(pages, graphs.from_config({"name": "knn", "options": {"k": 2}}))
    data = to_graphs(page_set, featurizer, {label: i for i, label in enumerate(LABELS)})
    assert data[0].crops.shape == (4, *CROP_SIZE) and data[0].crops.dtype == torch.uint8
    batch = Batch.from_data_list(data)
    assert batch.crops.shape == (8, *CROP_SIZE)          # node tensors concatenate per batch
    torch.manual_seed(0)
    model = GNNStack(in_dim=len(featurizer.feature_names), num_classes=2,
                     num_relations=len(page_set.relations), hidden_dim=8, norm="none",
                     crop_encoder=CropCNNEncoder(channels=4, out_dim=6), crop_dim=6)
    logits = model(*node_inputs(batch))
    assert logits.shape == (8, 2)
    torch.nn.functional.cross_entropy(logits, batch.y).backward()
    for name, parameter in model.crop_encoder.named_parameters():
        assert parameter.grad is not None and parameter.grad.abs().sum() > 0, name
    with pytest.raises(ValueError, match="needs crops"):
        model(batch.x, batch.edge_index, batch.edge_type)


def test_a_saved_gnn_rebuilds_its_crop_encoder(pages, tmp_path):
    cfg = config("model=attention", "graph=knn", "features=geometry_text_image",
                 "++model.hidden_dim=8", f"data.labels=[{','.join(LABELS)}]")
    page_set = PageSet.build(pages, graphs.from_config(cfg["graph"]))
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    torch.manual_seed(0)
    arguments = gnn_arguments(cfg, featurizer, WordLabels(), 2, len(page_set.relations))
    model = build_gnn(arguments).eval()
    expected = predict_proba(model, to_graphs(page_set, featurizer, {"analyte": 0, "other": 1}))
    loaded = load_model(save_model(tmp_path / "model",
                                   FittedModel(model, arguments, [], {}, featurizer=featurizer),
                                   cfg))
    assert isinstance(loaded.model.crop_encoder, CropCNNEncoder)
    for mine, theirs in zip(loaded.predict_proba(pages), expected):
        np.testing.assert_allclose(mine, theirs, rtol=0, atol=1e-6)


def test_a_baseline_gets_the_crop_features_in_place_of_the_crop_cnn(pages):
    featurizer = WordFeaturizer(groups=["geometry", "crop_cnn"], image_cache=None).fit(pages)
    page_set = PageSet.build(pages, graphs.from_config({"name": "knn", "options": {"k": 2}}))
    matrix = to_matrix(page_set, featurizer, hash_features=0, neighbour_features=False)
    assert matrix.shape[1] == len(featurizer.feature_names) + len(PAGE_IMAGE_NAMES)
    ink = matrix[:, len(featurizer.feature_names) + PAGE_IMAGE_NAMES.index("ink_share")]
    # by hand: each bar is (w - 4) x 6 inside a w x 10 box; the faint bars (grey 200) are
    # above the page's Otsu split between 0 and the rest, so they count no ink
    assert ink[:4] == pytest.approx([36 * 6 / 400, 0.0, 36 * 6 / 400, 0.0])
