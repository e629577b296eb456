"""Split protocols end to end: official FUNSD folders, k-fold and leave-one-out over layouts,
inferred layout families (recovery on synthetic layouts, leakage on FUNSD), fold aggregation."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hydra import compose, initialize_config_dir
from scipy.spatial.distance import cosine
from sklearn.metrics import adjusted_rand_score

import data_synth
from dochar.data.importers.form_json import import_form_json
from dochar.runs.aggregate import AggregateError, aggregate_runs
from dochar.runs.numbers import mean_std
from dochar.splits.layout_families import LayoutFamilyError, assign_inferred_layouts
from dochar.splits.protocols import SplitError, documents_of, make_splits
from tests.helpers import CONFIGS, split_documents


def _config(*overrides: str):
    with initialize_config_dir(str(CONFIGS), version_base="1.3"):
        return compose("config", overrides=list(overrides))


@pytest.fixture(scope="module")
def funsd(funsd_root):
    table, _ = import_form_json([funsd_root], empty_text="drop")
    return table


@pytest.fixture(scope="module")
def synth():
    return data_synth.generate(60, seed=3)


def _stems(folder: Path) -> set[str]:
    return {path.stem for path in folder.glob("*.json")}


def _layout_sides(table: pd.DataFrame, assignment) -> dict[str, set[str]]:
    layout = documents_of(table).set_index("doc_id")["layout_id"]
    return {part: set(layout[getattr(assignment, part)]) for part in ("train", "val", "test")}


def _disjoint(sides: dict[str, set[str]]) -> bool:
    return not (sides["train"] & sides["test"] or sides["val"] & sides["test"]
                or sides["train"] & sides["val"])


# ---------------------------------------------------------------- fixed (official FUNSD split)

def test_fixed_split_keeps_the_official_funsd_folders(funsd, funsd_root):
    # FUNSD README / Jaume et al. 2019: 149 training forms, 50 test forms; validation is carved
    # out of training_data only
    train_files = _stems(funsd_root / "training_data" / "annotations")
    test_files = _stems(funsd_root / "testing_data" / "annotations")
    assert (len(train_files), len(test_files)) == (149, 50)
    cfg = _config("data=funsd", "split=fixed")
    assignment = split_documents(funsd, cfg)
    assert set(assignment.test) == test_files
    assert set(assignment.train) | set(assignment.val) == train_files
    assert not set(assignment.train) & set(assignment.val)
    # val_size 0.15 of 149 documents, rounded (splits module rule)
    assert len(assignment.val) == round(0.15 * 149)


# ---------------------------------------------------------------- k-fold and leave-one-out

def test_layout_kfold_folds_partition_the_layouts(synth):
    cfg = _config("split=layout_kfold")
    layouts = set(synth["layout_id"])
    folds = [split_documents(synth, _config("split=layout_kfold", f"split.fold={k}"))
             for k in range(cfg.split.n_folds)]
    tested = [set(fold.test_layouts) for fold in folds]
    # every layout is tested in exactly one fold (a partition of the layouts)
    assert set().union(*tested) == layouts
    assert sum(len(t) for t in tested) == len(layouts)
    docs = [d for fold in folds for d in fold.test]
    assert sorted(docs) == sorted(synth["doc_id"].unique())
    for fold in folds:
        assert _disjoint(_layout_sides(synth, fold))


def test_leave_one_layout_out_makes_one_fold_per_layout(synth):
    cfg = _config("split=leave_one_layout_out")
    docs = documents_of(synth)
    folds = make_splits(docs, cfg.split.protocol, seed=0, val_size=cfg.split.val_size)
    layouts = sorted(docs["layout_id"].unique())
    assert len(folds) == len(layouts) == len(data_synth.LAYOUT_IDS)
    assert sorted(layout for fold in folds for layout in fold.test_layouts) == layouts
    for fold in folds:
        (held_out,) = fold.test_layouts
        assert set(fold.test) == set(docs.loc[docs["layout_id"] == held_out, "doc_id"])
        assert _disjoint(_layout_sides(synth, fold))
    with pytest.raises(ValueError, match=r"split.fold=10: protocol 'leave_one_layout_out' "
                                         r"made 10 fold\(s\)"):
        split_documents(synth, _config("split=leave_one_layout_out", "split.fold=10"))


# ---------------------------------------------------------------- inferred layout families

def test_inferred_families_recover_synthetic_layouts(synth):
    cfg = _config("split=inferred_layouts")
    filled, inference = assign_inferred_layouts(synth, cfg.split)
    truth = synth.groupby("doc_id")["layout_id"].first()
    inferred = filled.groupby("doc_id")["layout_id"].first().reindex(truth.index)
    ari = adjusted_rand_score(truth, inferred)      # sklearn.metrics.adjusted_rand_score
    assert inference.notes["split/family_ari"] == pytest.approx(ari)
    # baseline: the same family sizes dealt out at random. ARI is 0 in expectation for a
    # random partition (Hubert & Arabie 1985); the inferred families must be far above that.
    rng = np.random.default_rng(0)
    shuffled = [adjusted_rand_score(truth, rng.permutation(inferred.to_numpy()))
                for _ in range(50)]
    assert abs(np.mean(shuffled)) < 0.05
    assert ari > max(shuffled) + 0.5
    assert inference.notes["split/inferred_families"] == inferred.nunique()


@pytest.mark.parametrize("protocol", ["inferred_layouts", "inferred_layout_kfold"])
def test_inferred_grouping_never_splits_a_family(funsd, protocol):
    cfg = _config("data=funsd", f"split={protocol}")
    filled, _ = assign_inferred_layouts(funsd, cfg.split)
    assert (filled["layout_id"] != "").all()
    n_folds = cfg.split.n_folds if protocol == "inferred_layout_kfold" else 1
    tested = []
    for fold in range(n_folds):
        assignment = split_documents(filled, _config("data=funsd", f"split={protocol}",
                                                     f"split.fold={fold}"))
        assert _disjoint(_layout_sides(filled, assignment))
        tested += assignment.test
    if n_folds > 1:
        assert sorted(tested) == sorted(funsd["doc_id"].unique())


def test_leakage_report_on_the_official_funsd_split(funsd):
    cfg = _config("data=funsd", "split=fixed")
    table, inference = assign_inferred_layouts(funsd, cfg.split)
    assert table is funsd                     # infer_layouts is off: layout ids untouched
    assignment = split_documents(funsd, cfg)
    report, counts = inference.leakage(assignment)
    # brute-force oracle: every seen/test pair, scipy.spatial.distance.cosine
    threshold = cfg.split.leakage_threshold
    signatures = inference.signatures
    expected = {(s, t) for s in assignment.train + assignment.val for t in assignment.test
                if cosine(signatures[s], signatures[t]) < threshold}
    assert set(zip(report["seen_doc"], report["test_doc"])) == expected
    assert counts["split/leakage_pairs"] == len(expected)
    assert counts["split/leakage_test_documents"] == len({t for _, t in expected})
    part = dict.fromkeys(assignment.train, "train") | dict.fromkeys(assignment.val, "val")
    assert report["seen_part"].tolist() == [part[s] for s in report["seen_doc"]]
    # test form 82254765 and training form 91903177 are the same printed "special event
    # request form" filled in differently (checked by eye on the FUNSD page images)
    assert "82254765" in set(report["test_doc"])


def test_inference_config_errors_are_clear(synth):
    cfg = _config("split=inferred_layouts", "split.family_threshold=null")
    with pytest.raises(LayoutFamilyError, match="family_threshold is not set"):
        assign_inferred_layouts(synth, cfg.split)
    cfg = _config("split=inferred_layouts", "+split.signature.cells=3")
    with pytest.raises(LayoutFamilyError, match=r"unknown key\(s\) \['cells'\]"):
        assign_inferred_layouts(synth, cfg.split)
    cfg = _config("split=fixed", "split.leakage_threshold=3")
    with pytest.raises(LayoutFamilyError, match=r"leakage_threshold is a cosine distance"):
        assign_inferred_layouts(synth, cfg.split)
    off = _config("split=fixed", "split.leakage_threshold=null")
    table, inference = assign_inferred_layouts(synth, off.split)
    assert table is synth and inference.leakage(split_documents(synth, _config()))[1] == {}


# ---------------------------------------------------------------- mean ± std over folds

def test_aggregate_runs_by_hand():
    runs = pd.DataFrame({"system": ["gnn"] * 3 + ["forest"] * 2,
                         "fold": [0, 1, 2, 0, 1],
                         "macro_f1": [0.5, 0.6, 0.7, 0.4, 0.5],
                         "entity_f1": [0.2, np.nan, 0.4, 0.1, 0.1]})
    table = aggregate_runs(runs, ["system"], ["macro_f1", "entity_f1"]).set_index("system")
    # by hand: gnn mean (0.5+0.6+0.7)/3 = 0.6, sample std sqrt((0.01+0+0.01)/2) = 0.1;
    # forest mean 0.45, std sqrt((0.0025+0.0025)/1) = 0.0707107
    assert table.loc["gnn", "macro_f1_mean"] == pytest.approx(0.6)
    assert table.loc["gnn", "macro_f1_std"] == pytest.approx(0.1)
    assert table.loc["forest", "macro_f1_std"] == pytest.approx(np.sqrt(0.005))
    # a missing value is left out: gnn entity_f1 rests on 0.2 and 0.4 (pandas skipna)
    assert table.loc["gnn", "entity_f1_mean"] == pytest.approx(0.3)
    assert table.loc["gnn", "entity_f1_std"] == pytest.approx(np.std([0.2, 0.4], ddof=1))
    assert table.loc["gnn", "entity_f1_n"] == 2 and table.loc["gnn", "n"] == 3
    assert table.loc["forest", "entity_f1_std"] == 0.0
    assert "macro_f1_n" not in table.columns
    assert mean_std(0.6, 0.1) == "0.600 ± 0.100"
    assert mean_std(0.6, np.nan) == "0.600"
    with pytest.raises(AggregateError, match=r"no column\(s\) \['seed'\]"):
        aggregate_runs(runs, ["seed"], ["macro_f1"])


PRESETS = sorted(path.stem for path in (CONFIGS / "experiment").glob("funsd_*.yaml"))


@pytest.mark.parametrize("preset", PRESETS)
def test_funsd_presets_use_the_official_split(preset):
    # FUNSD README: the official protocol trains on training_data and reports on testing_data
    cfg = _config(f"+experiment={preset}")
    assert (cfg.data.name, cfg.split.protocol) == ("funsd", "fixed")
    assert cfg.split.train_documents is None
    assert cfg.tracking.experiment == "funsd-benchmark"


# --------------------------------------------- fixed and random cuts of small lists, by hand
# A `split` column names each document's part (validation, valid and dev, in any case, all
# mean val); a missing validation part is cut from training at round(val_size * n) documents,
# at least 1, leaving at least 1, and needs 2 documents to cut from; val_size 0 cuts nothing
# (rules of dochar/splits/protocols.py).

def _listed(splits: list[str]) -> pd.DataFrame:
    return pd.DataFrame({"doc_id": [f"coa-{i}" for i in range(len(splits))],
                         "layout_id": [f"L{i % 2}" for i in range(len(splits))],
                         "split": splits})


def test_every_spelling_of_validation_names_the_val_part():
    (split,) = make_splits(_listed(["train", "train", "Validation", "valid", "DEV", "test"]),
                           "fixed", seed=0)
    assert (split.train, split.val, split.test) == (["coa-0", "coa-1"],
                                                    ["coa-2", "coa-3", "coa-4"], ["coa-5"])


def test_without_a_val_part_validation_is_cut_from_training():
    # 2 training documents, val_size 0.15: min(max(1, round(0.3)), 2 - 1) = 1 cut, 1 kept
    (split,) = make_splits(_listed(["train", "train", "test"]), "fixed", seed=0, val_size=0.15)
    assert (len(split.train), len(split.val), split.test) == (1, 1, ["coa-2"])
    assert sorted(split.train + split.val) == ["coa-0", "coa-1"]
    # val_size 0: no validation, every training document stays
    (none,) = make_splits(_listed(["train", "train", "train", "test"]), "fixed", seed=0,
                          val_size=0.0)
    assert (none.train, none.val) == (["coa-0", "coa-1", "coa-2"], [])


def test_one_training_document_cannot_give_a_validation_part():
    with pytest.raises(SplitError, match=r"^cannot carve a validation set from 1 document\(s\); "
                                         r"need at least 2$"):
        make_splits(_listed(["train", "test"]), "fixed", seed=0, val_size=0.15)


def test_random_split_of_three_documents_gives_one_to_each_part():
    # test: min(max(1, round(0.75)), 3 - 2) = 1; validation of the 2 left:
    # min(max(1, round(0.3)), 2 - 1) = 1
    (split,) = make_splits(_listed(["", "", ""]), "random", seed=0, test_size=0.25,
                           val_size=0.15)
    assert (len(split.train), len(split.val), len(split.test)) == (1, 1, 1)
    assert sorted(split.train + split.val + split.test) == ["coa-0", "coa-1", "coa-2"]


def test_fixed_split_refusals_name_the_documents_and_values():
    blanks = ["train", *[""] * 6, "test"]
    with pytest.raises(SplitError, match=r"^protocol 'fixed' needs a split value for every "
                                         r"document; 6 of 8 have none \(e\.g\. \['coa-1', "
                                         r"'coa-2', 'coa-3', 'coa-4', 'coa-5'\]\)$"):
        make_splits(_listed(blanks), "fixed", seed=0)
    with pytest.raises(SplitError, match=r"^unknown split value\(s\) \['holdout'\]; use "
                                         r"\['train', 'val', 'test'\]$"):
        make_splits(_listed(["train", "holdout", "test"]), "fixed", seed=0)
    with pytest.raises(SplitError, match=r"^protocol 'fixed' found no 'test' documents in the "
                                         r"split column$"):
        make_splits(_listed(["train", "train", "val"]), "fixed", seed=0)
    (split,) = make_splits(_listed(["train", "val", "test"]), "fixed", seed=0)
    assert split.protocol == "fixed"


def test_a_fold_whose_training_pool_has_one_layout_cannot_give_validation():
    # 3 layouts of 2 documents in 2 folds: GroupKFold puts 2 layouts in one test fold, so that
    # fold trains on 1 layout, and validation by layout needs 2
    docs = pd.DataFrame({"doc_id": [f"coa-{i}" for i in range(6)],
                         "layout_id": [f"L{i // 2}" for i in range(6)]})
    with pytest.raises(SplitError, match=r"^cannot carve a validation set by layout from the "
                                         r"training pool of fold \d with 1 layout\(s\); need at "
                                         r"least 2 \(use more layouts, fewer folds, or "
                                         r"val_size=0\)$"):
        make_splits(docs, "layout_kfold", seed=0, n_folds=2, val_size=0.15)


def test_layout_protocols_name_the_documents_without_a_layout():
    docs = pd.DataFrame({"doc_id": [f"coa-{i}" for i in range(9)],
                         "layout_id": ["L0", "", "", "L1", "", "", "", "L2", ""]})
    with pytest.raises(SplitError, match=r"^protocol 'layout_held_out' needs a layout_id for "
                                         r"every document; 6 of 9 have none \(e\.g\. \['coa-1', "
                                         r"'coa-2', 'coa-4', 'coa-5', 'coa-6'\]\)\. Fill the "
                                         r"column with inferred layout families"):
        make_splits(docs, "layout_held_out", seed=0)


def test_random_split_is_a_function_of_the_seed():
    # 20 documents: 5 to test, 2 of the 15 left to validation (round(0.15 * 15)); an unseeded
    # draw would repeat itself once in thousands of calls
    docs = _listed([""] * 20)
    first, again = (make_splits(docs, "random", seed=7)[0] for _ in range(2))
    assert (first.train, first.val, first.test) == (again.train, again.val, again.test)
    assert (len(first.train), len(first.val), len(first.test)) == (13, 2, 5)


def test_random_test_cut_leaves_a_document_for_training_and_one_for_validation():
    # test_size 0.9 of 3: min(max(1, round(2.7)), 3 - 2) = 1; validation of the 2 left:
    # min(max(1, round(0.3)), 2 - 1) = 1
    (split,) = make_splits(_listed(["", "", ""]), "random", seed=0, test_size=0.9,
                           val_size=0.15)
    assert (len(split.train), len(split.val), len(split.test)) == (1, 1, 1)
    assert split.protocol == "random"


def test_leave_one_layout_out_works_from_two_layouts():
    # without validation, train and test need one layout each (scikit-learn LeaveOneGroupOut)
    folds = make_splits(_listed([""] * 4), "leave_one_layout_out", seed=0, val_size=0)
    assert [(fold.test_layouts, fold.test) for fold in folds] == [
        (["L0"], ["coa-0", "coa-2"]), (["L1"], ["coa-1", "coa-3"])]


def test_layout_kfold_makes_five_folds_by_default():
    # six layouts: five folds plus one for validation; GroupKFold(5) tests each layout once
    docs = pd.DataFrame({"doc_id": [f"coa-{i}" for i in range(12)],
                         "layout_id": [f"L{i % 6}" for i in range(12)]})
    folds = make_splits(docs, "layout_kfold", seed=0)
    assert len(folds) == 5
    assert sorted(layout for fold in folds for layout in fold.test_layouts) == [
        f"L{i}" for i in range(6)]


def test_layout_kfold_validation_is_a_function_of_the_seed():
    # 12 layouts in 3 folds: each training pool has 8 layouts, of which round(0.3 * 8) = 2 go
    # to validation; an unseeded draw would repeat all three folds once in 28^3 calls
    docs = pd.DataFrame({"doc_id": [f"coa-{i}" for i in range(24)],
                         "layout_id": [f"L{i % 12}" for i in range(24)]})
    first, again = (make_splits(docs, "layout_kfold", seed=3, n_folds=3, val_size=0.3)
                    for _ in range(2))
    assert [(f.train, f.val, f.test) for f in first] == [(f.train, f.val, f.test) for f in again]
    assert [len(f.val) for f in first] == [4, 4, 4]
