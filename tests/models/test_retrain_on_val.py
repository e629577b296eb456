"""``train.retrain_on_val``: after early stopping, the final model is trained afresh on the
training and validation pages together, for the epochs the first pass kept (Goodfellow, Bengio
and Courville, "Deep Learning", 2016, section 7.8, Algorithm 7.2: "initialize the model again
and retrain on all of the data ... for the same number of steps"; dochar counts passes through
the data, the book's second option). The checks: which pages each pass sees and for how long,
counted from the word table and the split; the learning rates of the second pass against the
cosine schedule worked by hand (Loshchilov and Hutter, ICLR 2017, eq. 5); the validation score
left as the first pass made it; the forest fitted on exactly the training and validation words;
templates adding the validation pages only after scoring them; the saved model recording both
parts, so validation tools refuse it.
"""

from __future__ import annotations

import math

import pytest
from hydra import compose, initialize_config_dir

from dochar.config import CONFIG_DIR
from dochar.data.sources import load_data
from dochar.experiment import run_experiment
from dochar.models import fit as fit_module
from dochar.models.saved import load_model, save_model
from dochar.splits import split_run
from reports.readme_figures import record_levers
from tests.test_combinations import SYNTH, TINY, make_config

SCHEDULE = ["train.max_epochs=5", "train.patience=5", "train.schedule=cosine",
            "train.warmup_epochs=1", "train.learning_rate=0.003"]


def _pages_per_part(cfg) -> dict[str, int]:
    """Pages of each part, counted from the word table and the split directly."""
    table = load_data(cfg.data, progress=False).table
    assignment = split_run(table, cfg.split, int(cfg.seed)).assignment
    return {part: int(table[table["doc_id"].isin(getattr(assignment, part))]
                      .drop_duplicates(["doc_id", "page"]).shape[0])
            for part in ("train", "val")}


def _hand_cosine(epoch: int, peak: float = 0.003, warmup: int = 1, last: int = 5) -> float:
    if epoch <= warmup:
        return peak * epoch / warmup
    return peak * 0.5 * (1 + math.cos(math.pi * (epoch - warmup - 1) / (last - warmup)))


def test_each_member_trains_again_on_train_and_val_for_the_epochs_it_kept(monkeypatch):
    cfg = make_config("knn", "relational", "geometry_text",
                      [*SYNTH, *SCHEDULE, "++model.members=2", "train.retrain_on_val=true"])
    calls = []
    real_train = fit_module.train

    def spy(network, train_graphs, val_graphs, objective, train_cfg, seed, **options):
        history = real_train(network, train_graphs, val_graphs, objective, train_cfg, seed,
                             **options)
        calls.append({"network": network, "train": len(train_graphs), "val": len(val_graphs),
                      "last_epoch": options.get("last_epoch"), "seed": seed,
                      "epochs_run": history.epochs_run,
                      "rates": list(history.learning_rates)})
        return history

    monkeypatch.setattr(fit_module, "train", spy)
    bundle, fitted = run_experiment(cfg)
    pages = _pages_per_part(cfg)
    first, second = calls[:2], calls[2:]
    assert len(calls) == 4
    assert [c["seed"] for c in first] == [c["seed"] for c in second] == [0, 1]
    assert all(c["train"] == pages["train"] and c["val"] == pages["val"] > 0 for c in first)
    for index, call in enumerate(second):
        kept = int(bundle.metrics[f"member/{index}/best_epoch"])
        assert call["train"] == pages["train"] + pages["val"] and call["val"] == 0
        assert call["last_epoch"] == kept and call["epochs_run"] == kept
        assert call["rates"] == pytest.approx([_hand_cosine(e) for e in range(1, kept + 1)],
                                              rel=1e-12)
        # the run's model is the retrained one, member by member
        assert fitted.model.members[index] is call["network"]


def test_the_validation_score_is_the_first_pass_and_the_test_outputs_change():
    plain = make_config("knn", "relational", "geometry_text",
                        [*SYNTH, *SCHEDULE, "++model.members=2"])
    again = make_config("knn", "relational", "geometry_text",
                        [*SYNTH, *SCHEDULE, "++model.members=2", "train.retrain_on_val=true"])
    _, plain_fit = run_experiment(plain)
    _, again_fit = run_experiment(again)
    # the first pass is the same run (seeded, bit-identical): validation scores it alone
    assert again_fit.cost["val_macro_f1"] == plain_fit.cost["val_macro_f1"]
    assert again_fit.cost["best_epoch"] == plain_fit.cost["best_epoch"]
    assert any((a != b).any() for a, b in zip(plain_fit.outputs, again_fit.outputs))


def test_the_forest_fits_again_on_the_training_and_validation_words(monkeypatch):
    cfg = make_config("knn", "random_forest", "geometry_text",
                      [*SYNTH, "train.retrain_on_val=true"])
    fitted_rows = []
    real_build = fit_module.build_baseline

    def build(arguments):
        estimator = real_build(arguments)
        real_fit = estimator.fit

        def fit(rows, targets):
            fitted_rows.append(len(rows))
            return real_fit(rows, targets)

        estimator.fit = fit
        return estimator

    monkeypatch.setattr(fit_module, "build_baseline", build)
    run_experiment(cfg)
    table = load_data(cfg.data, progress=False).table
    assignment = split_run(table, cfg.split, int(cfg.seed)).assignment
    words = {part: int(table["doc_id"].isin(getattr(assignment, part)).sum())
             for part in ("train", "val")}
    assert fitted_rows == [words["train"], words["train"] + words["val"]]



def test_a_saved_model_says_it_learned_from_validation_and_validation_tools_refuse_it(tmp_path):
    cfg = make_config("knn", "relational", "geometry_text",
                      [*SYNTH, "train.retrain_on_val=true"])
    bundle, fitted = run_experiment(cfg)
    folder = save_model(tmp_path / "model", fitted, bundle.config, labels=bundle.labels)
    assert load_model(folder).trained_on == ("train", "val")
    with pytest.raises(SystemExit, match="also learned from the validation documents"):
        record_levers.main(str(folder))
    plain = make_config("knn", "relational", "geometry_text", SYNTH)
    bundle, fitted = run_experiment(plain)
    folder = save_model(tmp_path / "plain", fitted, bundle.config, labels=bundle.labels)
    assert load_model(folder).trained_on == ("train",)


def test_templates_add_the_validation_pages_after_scoring_them(monkeypatch):
    with initialize_config_dir(config_dir=str(CONFIG_DIR), version_base="1.3"):
        plain = compose("config", overrides=[*TINY, *SYNTH, "model=layout_template"])
        cfg = compose("config", overrides=[*TINY, *SYNTH, "model=layout_template",
                                           "train.retrain_on_val=true"])
    _, plain_fit = run_experiment(plain)
    fitted_pages = []
    real_build = fit_module.build_template

    def build(arguments):
        estimator = real_build(arguments)
        real_fit = estimator.fit

        def fit(pages):
            fitted_pages.append(len(pages))
            return real_fit(pages)

        estimator.fit = fit
        return estimator

    monkeypatch.setattr(fit_module, "build_template", build)
    _, fitted = run_experiment(cfg)
    pages = _pages_per_part(cfg)
    assert fitted_pages == [pages["train"], pages["train"] + pages["val"]]
    assert fitted.trained_on == ("train", "val")
    assert fitted.cost["val_macro_f1"] == plain_fit.cost["val_macro_f1"]
