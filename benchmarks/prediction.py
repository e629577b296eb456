"""Prediction figures: pages per second from a word table to labels and fields, the code path of
``dochar predict`` (:func:`dochar.predict.label_table`): graphs, features, the model on all
pages at once, labels, fields. The relational GNN of the bench preset and the random forest
(same features) are saved and loaded as ``dochar predict`` loads them; the GNN's weights are
untrained (its time does not depend on their values), the forest is fitted on the run's words.
Reading the table from disk and writing the outputs are left out (file formats, not prediction).
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from omegaconf import OmegaConf

from benchmarks.inputs import RunInputs
from benchmarks.report import Figure, timed
from benchmarks.training import fitted_forest
from dochar import tasks
from dochar.data.word_table import Page, validate_word_table
from dochar.models.builders import gnn_arguments
from dochar.models.fit import FittedModel
from dochar.models.saved import SavedModel, load_model, save_model
from dochar.predict import label_table

TARGET_PAGES_PER_SECOND = 300


def word_table(pages: list[Page]) -> pd.DataFrame:
    """The word table the pages were cut from, validated as ``dochar predict`` validates it."""
    table = pd.DataFrame({
        "doc_id": np.repeat([p.doc_id for p in pages], [len(p) for p in pages]),
        "page": np.repeat([p.page for p in pages], [len(p) for p in pages]),
        "word_id": np.concatenate([p.word_ids for p in pages]),
        "text": [t for p in pages for t in p.texts],
        **{name: np.concatenate([p.boxes[:, i] for p in pages])
           for i, name in enumerate(("x0", "y0", "x1", "y1"))},
        "page_width": np.repeat([p.width for p in pages], [len(p) for p in pages]),
        "page_height": np.repeat([p.height for p in pages], [len(p) for p in pages]),
        "label": [label for p in pages for label in p.labels]})
    return validate_word_table(table, source="bench test pages").table


def saved_models(inputs: RunInputs, folder: Path, trees: int) -> dict[str, SavedModel]:
    """The bench preset's GNN and a random forest, written and loaded as model units."""
    config = OmegaConf.to_container(inputs.cfg, resolve=True)
    arguments = gnn_arguments(inputs.cfg, inputs.featurizer, tasks.from_config(inputs.cfg.task),
                              len(inputs.labels), len(inputs.sets["train"].relations))
    gnn = FittedModel(inputs.model().eval(), arguments, [], {}, featurizer=inputs.featurizer)
    forest, _ = fitted_forest(inputs, {label: i for i, label in enumerate(inputs.labels)}, trees)
    forest_arguments = {"kind": "baseline", "estimator": "random_forest", "seed": 0,
                        "options": {"n_estimators": trees, "min_samples_leaf": 1}}
    forest_config = {**config, "model": {"kind": "baseline", "estimator": "random_forest",
                                         "neighbour_features": False,
                                         "options": forest_arguments["options"]}}
    forest_fit = FittedModel(forest, forest_arguments, [], {}, featurizer=inputs.featurizer)
    return {"gnn": load_model(save_model(folder / "gnn", gnn, config)),
            "forest": load_model(save_model(folder / "forest", forest_fit, forest_config))}


def prediction_figures(inputs: RunInputs, repeats: int, judged: bool, trees: int = 300
                       ) -> list[Figure]:
    """Pages per second of ``dochar predict``'s labelling, GNN against the forest."""
    pages = inputs.sets["test"].pages
    table = word_table(pages)
    with tempfile.TemporaryDirectory(prefix="dochar-bench-") as folder:
        models = saved_models(inputs, Path(folder), trees)
    seconds = {name: timed(lambda m=model: label_table(m, table), repeats)
               for name, model in models.items()}
    alone = [part for _, part in table.groupby(["doc_id", "page"], sort=False)][:10]
    one_page = timed(lambda: [label_table(models["gnn"], part) for part in alone],
                     repeats) / len(alone)
    rates = {name: len(pages) / value for name, value in seconds.items()}
    words = len(table) / len(pages)
    return [
        Figure(f"prediction end to end (graph, features, model, labels, fields), relational "
               f"GNN, {len(pages)} pages of {words:.0f} words, pages/s",
               f"{rates['gnn']:.0f} pages/s", comparison=">=",
               threshold=TARGET_PAGES_PER_SECOND, judged=judged, number=rates["gnn"]),
        Figure("prediction end to end, random forest (same features, same path), pages/s",
               f"{rates['forest']:.0f} pages/s", number=rates["forest"]),
        Figure("prediction of one page alone (a table of one page), relational GNN, pages/s",
               f"{1 / one_page:.0f} pages/s", number=1 / one_page),
    ]
