"""``dochar predict`` labels all pages in one pass (:func:`dochar.predict.label_table`): the words
and fields it gives must be those of labelling each page alone, and each word's label and
probability those of the live model's own probabilities.

References: the live model applied through the training-time inputs (``to_graphs`` and
``predict_proba``), with the top label worked out by ``numpy.argmax``; one-page-at-a-time
labelling as the oracle for the batched path (each page's graph and features do not depend on
the other pages, so only float summation order may differ: 1e-6). The pieces computed for all
pages at once (lines, reading order) are checked page by page against the rules read off their
definitions: every pair of a page compared, a plain sort.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import torch
from hydra import compose, initialize_config_dir
from omegaconf import OmegaConf
from torch_geometric.data import Batch
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components
from scipy.stats import rankdata

import data_synth
from dochar import graphs
from dochar.data import lines
from dochar.data.sources import load_data
from dochar.data.word_table import Page, iter_pages, validate_word_table
from dochar.features import WordFeaturizer
from dochar.features.geometry import GEOMETRY_NAMES
from dochar.graphs import knn as knn_module
from dochar.metrics.entities import reading_order as entity_reading_order
from dochar.models.builders import build_gnn, gnn_arguments
from dochar.models.fit import FittedModel
from dochar.models.inputs import PageSet, stacked_graph, to_graphs
from dochar.models.saved import load_model, save_model
from dochar.models.training import predict_proba
from dochar.predict import fields, label_table
from dochar.records.shape import RecordShape
from dochar.tasks import WordLabels
from tests.helpers import CONFIGS


@pytest.fixture(scope="module")
def labelled(tmp_path_factory):
    """An R-GCN (kNN graph, every feature group with the char CNN) saved, loaded, and the live
    model's probabilities on six synthetic certificates."""
    with initialize_config_dir(config_dir=str(CONFIGS), version_base="1.3"):
        cfg = OmegaConf.to_container(compose("config", overrides=[
            "model=relational", "graph=knn", "features=all", "++model.hidden_dim=16"]),
            resolve=True)
    table = validate_word_table(data_synth.generate(6, seed=5), list(data_synth.LABELS)).table
    pages = list(iter_pages(table))
    page_set = PageSet.build(pages, graphs.from_config(cfg["graph"]))
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    torch.manual_seed(3)
    arguments = gnn_arguments(cfg, featurizer, WordLabels(), len(cfg["data"]["labels"]),
                              len(page_set.relations))
    model = build_gnn(arguments).eval()
    live = predict_proba(model, to_graphs(page_set, featurizer, None))
    folder = save_model(tmp_path_factory.mktemp("rgcn") / "model",
                        FittedModel(model, arguments, [], {}, featurizer=featurizer), cfg)
    return load_model(folder), table, pages, live, list(cfg["data"]["labels"])


def test_each_word_gets_the_live_models_top_label_and_probability(labelled):
    saved, table, pages, live, labels = labelled
    words, _ = label_table(saved, table)
    proba = np.concatenate(live)
    keys = pd.DataFrame({"doc_id": [p.doc_id for p in pages for _ in range(len(p))],
                         "page": [p.page for p in pages for _ in range(len(p))],
                         "word_id": np.concatenate([p.word_ids for p in pages])})
    got = keys.merge(words, on=["doc_id", "page", "word_id"], how="left")
    assert got["predicted"].tolist() == [labels[i] for i in proba.argmax(axis=1)]
    np.testing.assert_allclose(got["probability"], proba.max(axis=1), rtol=0, atol=1e-6)
    second = np.sort(proba, axis=1)[:, -2]
    np.testing.assert_allclose(got["top2_probability"], second, rtol=0, atol=1e-6)


def test_all_pages_at_once_give_the_words_and_fields_of_each_page_alone(labelled):
    saved, table, pages, _, _ = labelled
    words, found = label_table(saved, table)
    alone = [label_table(saved, part) for _, part in table.groupby(["doc_id", "page"])]
    by_page = pd.concat([w for w, _ in alone], ignore_index=True)
    fields_by_page = pd.concat([f for _, f in alone], ignore_index=True)
    order = ["doc_id", "page", "word_id"]
    words = words.sort_values(order).reset_index(drop=True)
    by_page = by_page.sort_values(order).reset_index(drop=True)
    assert len(words) == sum(len(p) for p in pages) and list(words.columns) == list(
        by_page.columns)
    numbers = [c for c in words.columns if c.endswith("probability")]
    pd.testing.assert_frame_equal(words.drop(columns=numbers), by_page.drop(columns=numbers))
    np.testing.assert_allclose(words[numbers], by_page[numbers], rtol=0, atol=1e-6)
    assert len(found) > len(pages)   # several fields a page: the runs were cut, not merged
    fields_order = ["doc_id", "page", "word_ids"]
    found = found.sort_values(fields_order).reset_index(drop=True)
    fields_by_page = fields_by_page.sort_values(fields_order).reset_index(drop=True)
    pd.testing.assert_frame_equal(found.drop(columns="probability"),
                                  fields_by_page.drop(columns="probability"))
    np.testing.assert_allclose(found["probability"], fields_by_page["probability"], rtol=0,
                               atol=1e-4)


def test_a_run_of_one_label_stops_at_the_end_of_a_page_and_of_a_document():
    """Worked by hand: the label ``cert_no`` goes on across a page break and a document break;
    each page keeps its own field."""
    rows = [  # doc, page, word, text, x0, y0, x1, y1, predicted, probability
        ("d", 1, 0, "Lot", 10, 10, 30, 20, "key", 0.9),
        ("d", 1, 1, "A-12", 40, 10, 70, 20, "cert_no", 0.8),
        ("d", 2, 0, "B7", 10, 10, 20, 20, "cert_no", 0.6),
        ("d", 2, 1, "C9", 30, 10, 40, 20, "cert_no", 0.7),
        ("e", 1, 0, "D1", 10, 10, 20, 20, "cert_no", 0.5),
    ]
    words = pd.DataFrame(rows, columns=["doc_id", "page", "word_id", "text", "x0", "y0", "x1",
                                        "y1", "predicted", "probability"])
    found = fields(words, ignore=["other"])
    assert found[["doc_id", "page", "label", "text", "word_ids", "probability"]].values.tolist(
        ) == [["d", 1, "key", "Lot", "0", 0.9], ["d", 1, "cert_no", "A-12", "1", 0.8],
              ["d", 2, "cert_no", "B7 C9", "0 1", 0.6], ["e", 1, "cert_no", "D1", "0", 0.5]]


# --- the per-page pieces, batched over all pages, on FUNSD forms -------------------------------

@pytest.fixture(scope="module")
def funsd_pages(funsd_root) -> list[Page]:
    """FUNSD forms (Jaume et al., ICDAR-OST 2019) as the bench reads them."""
    with initialize_config_dir(config_dir=str(CONFIGS), version_base="1.3"):
        cfg = compose("config", overrides=["data=funsd", f"data.path={funsd_root}"])
    return list(iter_pages(load_data(cfg.data, strict=False, progress=False).table))[:80]


def _lines_by_every_pair(boxes: np.ndarray) -> np.ndarray:
    """The line rule read off its definition: every pair of the page compared (y-ranges overlap
    by at least half the smaller height), components numbered by their first box."""
    y0, y1 = boxes[:, 1], boxes[:, 3]
    height = y1 - y0
    overlap = np.minimum.outer(y1, y1) - np.maximum.outer(y0, y0)
    joined = (overlap >= 0) & (overlap >= 0.5 * np.minimum.outer(height, height))
    _, label = connected_components(csr_matrix(joined), directed=False)
    first_seen = {}
    return np.array([first_seen.setdefault(value, len(first_seen)) for value in label])


def _reading_order_by_hand(boxes: np.ndarray, word_ids: np.ndarray) -> list[int]:
    """Lines top to bottom by the mean y of their centres (then their smallest word id), words
    left to right by centre x, then by word id: the rule as a plain sort."""
    line = _lines_by_every_pair(boxes)
    centre_x, centre_y = (boxes[:, 0] + boxes[:, 2]) / 2, (boxes[:, 1] + boxes[:, 3]) / 2
    members = {value: [i for i in range(len(boxes)) if line[i] == value] for value in set(line)}
    line_y = {value: sum(float(centre_y[i]) for i in rows) / len(rows)
              for value, rows in members.items()}
    first_id = {value: min(int(word_ids[i]) for i in rows) for value, rows in members.items()}
    return sorted(range(len(boxes)), key=lambda i: (line_y[line[i]], first_id[line[i]],
                                                    centre_x[i], int(word_ids[i])))


@pytest.mark.parametrize("pair_cells", [lines.PAIR_CELLS, 97])   # 97: many small blocks
def test_lines_of_all_pages_at_once_are_those_of_every_pair_of_each_page(
        funsd_pages, monkeypatch, pair_cells):
    monkeypatch.setattr(lines, "PAIR_CELLS", pair_cells)
    boxes = np.concatenate([p.boxes for p in funsd_pages])
    code = np.repeat(np.arange(len(funsd_pages)), [len(p) for p in funsd_pages])
    together = lines.line_ids(boxes, page=code)
    for page, start in zip(funsd_pages, np.cumsum([0] + [len(p) for p in funsd_pages])):
        alone = _lines_by_every_pair(page.boxes)
        np.testing.assert_array_equal(lines.line_ids(page.boxes), alone)
        mine = together[start:start + len(page)]   # the same partition, numbered further on
        np.testing.assert_array_equal(mine - mine.min(), alone)


def test_reading_order_of_all_pages_at_once_reads_each_page_by_the_rule(funsd_pages):
    pages = funsd_pages[:30]
    sizes = [len(p) for p in pages]
    starts = np.cumsum([0] + sizes)
    code = np.repeat(np.arange(len(pages))[::-1], sizes)   # pages read in ascending code
    together = lines.reading_order(np.concatenate([p.boxes for p in pages]),
                                   np.concatenate([p.word_ids for p in pages]), page=code)
    expected = [starts[i] + position for i in reversed(range(len(pages)))
                for position in _reading_order_by_hand(pages[i].boxes, pages[i].word_ids)]
    assert together.tolist() == expected
    for page in pages[:5]:
        assert lines.reading_order(page.boxes, page.word_ids).tolist() == \
            _reading_order_by_hand(page.boxes, page.word_ids)


def test_a_flat_box_on_the_bottom_edge_of_a_word_shares_its_line():
    """Worked by hand: y-ranges [0, 10] and [10, 10] overlap by 0, half the smaller height (0);
    [12, 20] meets neither. The second page repeats the first: its own lines, numbered on."""
    boxes = np.array([[0, 0, 5, 10], [6, 10, 9, 10], [0, 12, 5, 20]] * 2, dtype=float)
    assert lines.line_ids(boxes[:3]).tolist() == [0, 0, 1]
    assert lines.line_ids(boxes, page=np.array([0, 0, 0, 1, 1, 1])).tolist() == [0, 0, 1,
                                                                                  2, 2, 3]


@pytest.mark.parametrize("dense_up_to", [0, 200, knn_module.DENSE_UP_TO])
@pytest.mark.parametrize("k", [1, 8, 30])
def test_nearest_words_of_all_pages_at_once_are_those_of_each_page_alone(funsd_pages, k,
                                                                         dense_up_to,
                                                                         monkeypatch):
    """Oracle: the builder page by page (itself checked against a brute-force ranking in
    tests/graphs). Pages of one, two and three words, and a page of one box repeated (ties
    everywhere), sit among the forms. Every page takes the stacked grid search (0), the forms
    split between it and the compiled all-pairs ranking (200), or all take the latter."""
    monkeypatch.setattr(knn_module, "DENSE_UP_TO", dense_up_to)
    tiny = [Page("tiny", n, np.arange(n), ["w"] * n, funsd_pages[0].boxes[:n].copy(), 1000.0,
                 1000.0) for n in (1, 2, 3)]
    repeated = Page("same", 1, np.arange(12)[::-1].copy(), ["w"] * 12,
                    np.tile([[10.0, 10.0, 40.0, 20.0]], (12, 1)), 100.0, 100.0)
    pages = [tiny[0], *funsd_pages[:25], tiny[1], repeated, tiny[2], *funsd_pages[25:40]]
    builder = graphs.from_config({"name": "knn", "options": {"k": k}, "reverse_edges": True,
                                  "self_loops": True})
    together = builder.build_all(pages)
    assert len(together) == len(pages)
    for page, edges in zip(pages, together):
        alone = builder(page)
        np.testing.assert_array_equal(edges.edge_index, alone.edge_index)
        np.testing.assert_array_equal(edges.edge_type, alone.edge_type)
        assert edges.edge_index.dtype == alone.edge_index.dtype == np.int64


def test_a_bad_box_among_many_pages_is_reported_with_its_page_and_word(funsd_pages):
    bad = funsd_pages[3].boxes.copy()
    bad[5, 2] = bad[5, 0] - 1.0                       # x1 < x0
    page = Page(funsd_pages[3].doc_id, 1, funsd_pages[3].word_ids, funsd_pages[3].texts, bad,
                funsd_pages[3].width, funsd_pages[3].height)
    builder = graphs.from_config({"name": "knn", "options": {"k": 8}})
    with pytest.raises(graphs.GraphBuilderError,
                       match=rf"page {funsd_pages[3].doc_id}.*word_id "
                             rf"{funsd_pages[3].word_ids[5]} has box"):
        builder.build_all([*funsd_pages[:3], page])


def test_features_of_all_pages_at_once_are_each_pages_own(funsd_pages):
    """The page-level geometry columns (text block extent, rank, median word height) worked per
    page with scipy.stats.rankdata and numpy.median; every column against page by page."""
    # by hand: two pages of two words, the first page's right centre (x 20) the second's left
    # one, and heights 10 and 20 (an even count: median 15)
    touching = [Page(name, 1, np.array([0, 1]), ["Lot", "7"], np.array(boxes, dtype=float),
                     100.0, 50.0)
                for name, boxes in (("a", [[5, 0, 15, 10], [15, 0, 25, 20]]),
                                    ("b", [[15, 30, 25, 40], [25, 30, 35, 42]]))]
    pages = [*funsd_pages[:20], Page("one", 1, np.array([4]), ["Lot:"],
                                     np.array([[5.0, 5.0, 30.0, 15.0]]), 100.0, 50.0),
             *touching, *funsd_pages[20:30]]
    featurizer = WordFeaturizer(["geometry", "text_flags", "char_cnn"],
                                lexicons={"units": ["mg/kg", "date"]}, line_context=True,
                                standardize=True).fit(pages[:10])
    together = featurizer.transform_all(pages)
    assert [len(block) for block in together] == [len(page) for page in pages]
    for page, block in zip(pages, together):
        np.testing.assert_array_equal(block, featurizer.transform(page))
    plain = WordFeaturizer(["geometry"]).fit(pages)
    names = list(GEOMETRY_NAMES)
    for page, block in zip(pages, plain.transform_all(pages)):
        x0, y0, x1, y1 = np.clip(page.boxes, 0, [page.width, page.height] * 2).T
        cx, cy, height = (x0 + x1) / 2, (y0 + y1) / 2, y1 - y0
        real = height[height > 1e-3 * page.height]           # SIZE_FLOOR of the page height
        median = np.median(real) if len(real) else 1e-3 * page.height
        n = len(page)
        expected = {
            "block_x": (cx - x0.min()) / max(x1.max() - x0.min(), 1e-3 * page.width),
            "rank_x": (rankdata(cx) - 1) / (n - 1) if n > 1 else [0.5],
            "rank_y": (rankdata(cy) - 1) / (n - 1) if n > 1 else [0.5],
            "log_rel_height": np.clip(np.log(np.maximum(height, 1e-3 * page.height) / median),
                                      -6, 6)}
        for name, values in expected.items():
            np.testing.assert_allclose(block[:, names.index(name)], values, rtol=1e-6,
                                       atol=1e-7, err_msg=f"{page.key} {name}")
    chars = featurizer.char_ids_all(pages)
    for page, ids in zip(pages, chars):
        np.testing.assert_array_equal(ids, featurizer.char_ids(page))


def test_a_run_of_one_label_stops_where_the_document_changes_on_the_same_page_number():
    """Worked by hand: two documents' first pages, one ``cert_no`` word each: two fields."""
    words = pd.DataFrame([("d", 1, 0, "B7", 10, 10, 20, 20, "cert_no", 0.6),
                          ("e", 1, 0, "C9", 10, 10, 20, 20, "cert_no", 0.7)],
                         columns=["doc_id", "page", "word_id", "text", "x0", "y0", "x1", "y1",
                                  "predicted", "probability"])
    found = fields(words, ignore=["other"])
    assert found[["doc_id", "text", "word_ids"]].values.tolist() == [["d", "B7", "0"],
                                                                     ["e", "C9", "0"]]


def test_the_reading_order_of_a_frame_goes_document_by_document_page_by_page():
    """Worked by hand: rows of (b, 2), (a, 10), (b, 1), (a, 9) and one row without a document
    (not read); each page one word, so the order is that of the sorted (doc_id, page) keys."""
    frame = pd.DataFrame({"doc_id": ["b", "a", "b", "a", None], "page": [2, 10, 1, 9, 1],
                          "x0": 0.0, "y0": 0.0, "x1": 5.0, "y1": 5.0})
    assert entity_reading_order(frame).tolist() == [3, 1, 2, 0]


def test_the_stacked_graph_holds_the_tensors_of_the_batched_page_graphs(funsd_pages):
    """Oracle: torch-geometric's ``Batch.from_data_list`` over the per-page graphs (node ids
    offset page by page), with edge attributes and char ids present."""
    pages = funsd_pages[:12]
    builder = graphs.from_config({"name": "knn", "options": {"k": 4}, "self_loops": True},
                                 {"groups": ["offsets", "distance"]})
    page_set = PageSet.build(pages, builder)
    featurizer = WordFeaturizer(["geometry", "text_flags", "char_cnn"]).fit(pages)
    batch = Batch.from_data_list(to_graphs(page_set, featurizer, None))
    stacked = stacked_graph(page_set, featurizer)
    assert stacked.num_nodes == batch.num_nodes == sum(len(p) for p in pages)
    for name in ("x", "edge_index", "edge_type", "chars", "edge_attr"):
        assert torch.equal(getattr(stacked, name), getattr(batch, name)), name


def test_a_shape_with_sub_item_columns_settles_each_line_before_labels_are_given(labelled):
    """With the untrained model's two most frequent best labels mapped as an item column and its
    sub-item form (the mapping is the test's, not the data's): a word whose live best label is
    neither keeps label and probability; one whose best is either is labelled one of the two,
    with the probability of both together (docs/records.md, the line status rule)."""
    saved, table, pages, live, labels = labelled
    proba = np.concatenate(live)
    best = proba.argmax(axis=1)
    pair = np.bincount(best, minlength=len(labels)).argsort()[::-1][:2].tolist()
    sub, item = labels[pair[0]], labels[pair[1]]
    others = tuple(label for label in labels if label not in (sub, item))
    shape = RecordShape(header_fields=others, item_columns=(item, sub),
                        sub_item_columns=((sub, item),))
    words, _ = label_table(saved, table, shape)
    keys = pd.DataFrame({"doc_id": [p.doc_id for p in pages for _ in range(len(p))],
                         "page": [p.page for p in pages for _ in range(len(p))],
                         "word_id": np.concatenate([p.word_ids for p in pages])})
    got = keys.merge(words, on=["doc_id", "page", "word_id"], how="left")
    settled = np.isin(best, pair)
    assert 0 < settled.sum() < len(best)
    assert got.loc[~settled, "predicted"].tolist() == [labels[i] for i in best[~settled]]
    np.testing.assert_allclose(got.loc[~settled, "probability"], proba[~settled].max(axis=1),
                               rtol=0, atol=1e-6)
    assert set(got.loc[settled, "predicted"]) <= {sub, item}
    np.testing.assert_allclose(got.loc[settled, "probability"], proba[settled][:, pair].sum(axis=1),
                               rtol=0, atol=1e-6)
