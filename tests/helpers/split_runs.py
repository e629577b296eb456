"""Real dochar runs on generated certificates under each split protocol, for the report's
headline: a random forest (the default reference) and per-layout templates, small and fast."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

import data_synth
from dochar.runs.bundle import RunBundle
from dochar.splits.protocols import PROTOCOLS

DOCUMENTS = 40
QUICK = ["train.progress=false", "tracking.enabled=false",
         "evaluation.bootstrap_resamples=50", "features=geometry_text"]
MODELS = {"random_forest": ["model=random_forest", "model.options.n_estimators=20"],
          "layout_template": ["model=layout_template"]}


def fixed_table(folder: Path) -> list[str]:
    """The same certificates written as a word table with its own ``split`` column (the fixed
    protocol reads it): every fourth document tests, every fifth of the rest validates."""
    table = data_synth.generate(n_documents=DOCUMENTS, seed=0)
    order = {doc: n for n, doc in enumerate(sorted(table["doc_id"].unique()))}
    position = table["doc_id"].map(order)
    table["split"] = "train"
    table.loc[position % 5 == 1, "split"] = "val"
    table.loc[position % 4 == 0, "split"] = "test"
    path = folder / "certificates.parquet"
    table.to_parquet(path, index=False)
    return ["data=word_table", f"data.path={path}",
            f"data.labels=[{','.join(data_synth.LABELS)}]"]


# protocol -> the overrides that choose it (inferred: layout families from page signatures)
SPLITS = {"random": ["split=random"], "fixed": ["split=fixed"],
          "layout_held_out": ["split=layout_held_out"],
          "layout_kfold": ["split=layout_kfold", "split.n_folds=3"],
          "leave_one_layout_out": ["split=leave_one_layout_out"],
          "seen_and_unseen_layouts": ["split=seen_and_unseen_layouts"],
          "inferred_layouts": ["split=inferred_layouts"]}
assert set(PROTOCOLS) <= set(SPLITS), "a split protocol without a headline test"


def protocol_runs(split: str, folder: Path) -> list[RunBundle]:
    """Both systems run under ``split`` on the same documents (``dochar.experiment``)."""
    from hydra import compose, initialize_config_dir

    from dochar.config import CONFIG_DIR
    from dochar.experiment import run_experiment

    data = fixed_table(folder) if split == "fixed" else [f"data.documents={DOCUMENTS}"]
    bundles = []
    with initialize_config_dir(str(CONFIG_DIR), version_base=None):
        for model in MODELS.values():
            cfg = compose("config", overrides=[*QUICK, *data, *SPLITS[split], *model])
            bundles.append(run_experiment(cfg)[0])
    return bundles


DEMO_MODELS = {"relational": ["model=relational", "model.hidden_dim=16", "model.depth=1",
                              "train.max_epochs=3", "train.patience=3"],
               **MODELS}


def demo_runs() -> list[RunBundle]:
    """What `make demo` runs (R-GCN, random forest, per-layout templates on seen and unseen
    layouts), on few documents and epochs."""
    from hydra import compose, initialize_config_dir

    from dochar.config import CONFIG_DIR
    from dochar.experiment import run_experiment

    with initialize_config_dir(str(CONFIG_DIR), version_base=None):
        return [run_experiment(compose("config", overrides=[
            *QUICK, f"data.documents={DOCUMENTS}", *SPLITS["seen_and_unseen_layouts"],
            *model]))[0] for model in DEMO_MODELS.values()]


def expected_sides(bundle: RunBundle) -> pd.DataFrame:
    """Each test document's family and side, worked out from the run's own split table
    (``documents``: part and layout of every document): a test family is seen when some
    training document has it. Written here from the table alone, not with dochar's code."""
    documents = bundle.tables["documents"]
    trained = set(documents.loc[documents["part"] == "train", "layout_id"]) - {"", "nan"}
    test = documents[documents["part"] == "test"].copy()
    test["side"] = ["seen" if layout in trained else "unseen" for layout in test["layout_id"]]
    return test
