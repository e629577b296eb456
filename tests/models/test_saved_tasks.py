"""A model saved from any run is applied by ``dochar predict`` and gives back the run's own
word predictions: every task whose model labels nodes, every model kind, every feature option;
so does the MLflow model's class (:class:`dochar.runs.pyfunc_model.WordLabeller`) given the same
unit.

Reference: the run itself. Its predictions were made by the live model in the training process;
the saved unit is rebuilt in ``dochar predict`` from the arguments that built the model and the
featurizer, so any argument the unit fails to record changes the words (common practice for a
save/load round trip). Fields are checked against the task's own decoding rule stated in
:mod:`dochar.tasks.entity_tags` (chunks, never ``O`` runs or bare tags).
"""

from __future__ import annotations

from types import SimpleNamespace

import pandas as pd
import pytest
from hydra import compose, initialize_config_dir

from dochar.config import CONFIG_DIR
from dochar.data.sources import load_data
from dochar.data.word_table import REQUIRED_COLUMNS
from dochar.experiment import run_experiment
from dochar.models.saved import save_model
from dochar.predict import main
from dochar.runs.pyfunc_model import UNIT_ARTIFACT, WordLabeller
from dochar.tasks.entity_tags import OUTSIDE

SMALL = ["data.documents=16", "train.max_epochs=2", "train.patience=2",
         "evaluation.bootstrap_resamples=20", "train.progress=false", "tracking.enabled=false",
         "split=random"]
FOREST = ["model=random_forest", "model.options.n_estimators=10"]
GNN = ["model=relational", "model.hidden_dim=16"]
CONTEXT = ["features.line_context=true", "features.pool_words=[mean,max]"]

CASES = {
    "words-gnn": ["task=word_labels", *GNN],
    "words-forest-context": ["task=word_labels", *FOREST, *CONTEXT],
    "words-template": ["task=word_labels", "model=layout_template"],
    "tags-gnn-context": ["task=entity_tags", *GNN, *CONTEXT],
    "tags-forest": ["task=entity_tags", *FOREST],
    "segments-gnn-context": ["task=segment_labels", *GNN, *CONTEXT],
    "segments-forest": ["task=segment_labels", *FOREST],
    # each line settled as item or sub-item, in the run and in predict alike (the mapping of
    # two certificate columns is the test's: it makes the rule change words)
    "words-forest-lines": ["task=word_labels", *FOREST,
                           "+data.record.sub_item_columns={result:analyte,unit:limit}"],
}


def _compose(overrides: list[str]):
    with initialize_config_dir(str(CONFIG_DIR), version_base=None):
        return compose("config", overrides=[*SMALL, *overrides])


@pytest.mark.parametrize("case", sorted(CASES))
def test_predict_with_a_saved_model_gives_the_runs_own_words(case, tmp_path):
    cfg = _compose(CASES[case])
    bundle, fitted = run_experiment(cfg)
    unit = save_model(tmp_path / "model", fitted, bundle.config, name=bundle.name,
                      labels=bundle.labels)
    expected = bundle.tables.get("word_predictions", bundle.predictions)
    expected = expected[["doc_id", "page", "word_id", "predicted"]]
    table = load_data(cfg.data, strict=False).table
    test_words = table[table["doc_id"].astype(str).isin(set(expected["doc_id"]))]
    source = tmp_path / "test_words.csv"
    test_words[[*REQUIRED_COLUMNS, "label", "entity_id"]].to_csv(source, index=False)

    assert main(["--model", str(unit), "--input", str(source), "--out", str(tmp_path / "out")]) == 0
    words = pd.read_csv(tmp_path / "out" / "words.csv", keep_default_na=False)
    keys = ["doc_id", "page", "word_id"]
    merged = expected.astype({"doc_id": str}).merge(
        words.astype({"doc_id": str})[[*keys, "predicted"]], on=keys, suffixes=("_run", ""))
    assert len(merged) == len(expected) == len(words)
    assert (merged["predicted_run"] == merged["predicted"]).all()
    labeller = WordLabeller()   # the logged MLflow model's class, given the unit as MLflow does
    labeller.load_context(SimpleNamespace(artifacts={UNIT_ARTIFACT: str(unit)}))
    served = labeller.predict(None, test_words[[*REQUIRED_COLUMNS, "label", "entity_id"]])
    merged = expected.astype({"doc_id": str}).merge(
        served.astype({"doc_id": str})[[*keys, "predicted"]], on=keys, suffixes=("_run", ""))
    assert len(merged) == len(expected)
    assert (merged["predicted_run"] == merged["predicted"]).all()

    found = pd.read_csv(tmp_path / "out" / "fields.csv", keep_default_na=False)
    ignore = set(cfg.evaluation.entity_ignore)
    assert set(found["label"]) <= set(cfg.data.labels) - ignore   # word labels, never tags
    assert OUTSIDE not in set(found["label"])
    if "tags" in case:   # one field per decoded chunk whose label is scored
        entities = words[(words["entity"] != "") & ~words["predicted"].isin(ignore)]
        assert len(found) == entities.groupby(["doc_id", "page", "entity"]).ngroups


@pytest.mark.parametrize("kind", [GNN, FOREST], ids=["gnn", "forest"])
def test_a_saved_links_model_predicts_the_runs_own_links(kind, tmp_path):
    """The links ``dochar predict`` writes are the test pairs the run itself predicted."""
    cfg = _compose(["task=links", "task.link_kind=same_entity", *kind])
    bundle, fitted = run_experiment(cfg)
    unit = save_model(tmp_path / "model", fitted, bundle.config, name=bundle.name,
                      labels=bundle.labels)
    rows = bundle.predictions
    expected = rows[rows["candidate"] & (rows["predicted"] == "link")]
    table = load_data(cfg.data, strict=False).table
    test_words = table[table["doc_id"].astype(str).isin(set(rows["doc_id"]))]
    source = tmp_path / "test_words.csv"
    test_words[[*REQUIRED_COLUMNS, "label", "entity_id"]].to_csv(source, index=False)

    assert main(["--model", str(unit), "--input", str(source), "--out", str(tmp_path / "out")]) == 0
    found = pd.read_csv(tmp_path / "out" / "links.csv", dtype={"doc_id": str, "source_id": str,
                                                               "target_id": str})
    keys = ["doc_id", "page", "source_id", "target_id"]
    assert len(expected) > 0
    assert (sorted(map(tuple, found[keys].astype(str).to_numpy()))
            == sorted(map(tuple, expected[keys].astype(str).to_numpy())))
