"""Averaged members (dochar/models/members.py, ``model.members``): the average is the mean of the
members' softmax outputs, each member starts from its own seed and trains on its own, a run with
members saves and reloads the average, and options that cannot work are refused by name.

References: the mean of softmax outputs is the deep ensemble's prediction (Lakshminarayanan,
Pritzel and Blundell, NeurIPS 2017; its section 2.4, cited from memory); SciPy's ``softmax``
computes each member's probabilities independently of torch; the seed scheme is worked out by
hand.
"""

from __future__ import annotations

import numpy as np
import pytest
import torch
from scipy.special import softmax

from dochar import graphs, tasks
from dochar.experiment import check_names, run_experiment
from dochar.features import WordFeaturizer
from dochar.models.builders import build_gnn, gnn_arguments
from dochar.models.fit import FittedModel
from dochar.models.inputs import PageSet, to_graphs
from dochar.models.members import MemberAverage, member_seeds
from dochar.models.objectives import node_inputs
from dochar.models.saved import load_model, save_model
from dochar.tasks import WordLabels
from tests.models.test_saved import config, pages  # noqa: F401  (pages is a fixture)
from tests.test_combinations import SYNTH, make_config


def _built(pages, members: int, seeds=None):
    cfg = config("model=relational", "graph=knn", "features=geometry_text",
                 "++model.hidden_dim=8", f"++model.members={members}")
    page_set = PageSet.build(pages, graphs.from_config(cfg["graph"]))
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    arguments = gnn_arguments(cfg, featurizer, WordLabels(), len(cfg["data"]["labels"]),
                              len(page_set.relations))
    index = {label: i for i, label in enumerate(cfg["data"]["labels"])}
    batch = to_graphs(page_set, featurizer, index)
    return cfg, arguments, build_gnn(arguments, seeds).eval(), batch, featurizer


def test_the_average_is_the_mean_of_the_members_softmax(pages):
    _, _, model, batch, _ = _built(pages, 3, [0, 1, 2])
    assert isinstance(model, MemberAverage) and len(model.members) == 3
    for graph in batch:
        inputs = node_inputs(graph)
        with torch.no_grad():
            each = [softmax(member(*inputs).double().numpy(), axis=1) for member in model.members]
        expected = np.mean(each, axis=0)
        np.testing.assert_allclose(model.predict_proba(*inputs).numpy(), expected, atol=1e-6)
        # forward is log p: its softmax gives the mean back, so every caller may treat it as logits
        with torch.no_grad():
            np.testing.assert_allclose(softmax(model(*inputs).double().numpy(), axis=1),
                                       expected, atol=1e-6)
        assert not np.allclose(each[0], each[1], atol=1e-3)   # the members really differ


def test_member_seeds_are_disjoint_between_run_seeds():
    assert member_seeds(0, 3) == [0, 1, 2]
    assert member_seeds(1, 3) == [3, 4, 5]          # worked out by hand: s·m … s·m + m − 1
    drawn = [seed for run in range(5) for seed in member_seeds(run, 4)]
    assert len(drawn) == len(set(drawn)) == 20


def test_each_member_starts_from_its_own_seed(pages):
    _, arguments, model, _, _ = _built(pages, 2, [5, 9])
    single = {**arguments, "members": 1}
    for member, seed in zip(model.members, [5, 9]):
        torch.manual_seed(seed)
        alone = build_gnn(single)
        for name, value in alone.state_dict().items():
            assert torch.equal(member.state_dict()[name], value), name
    with pytest.raises(ValueError, match="1 seeds for 2 members"):
        build_gnn(arguments, [3])


def test_a_saved_average_predicts_as_the_live_one(pages, tmp_path):
    cfg, arguments, model, batch, featurizer = _built(pages, 2, [0, 1])
    expected = [model.predict_proba(*node_inputs(graph)).numpy() for graph in batch]
    folder = save_model(tmp_path / "model",
                        FittedModel(model, arguments, [], {}, featurizer=featurizer), cfg)
    for mine, theirs in zip(load_model(folder).predict_proba(pages), expected):
        np.testing.assert_allclose(mine, theirs, rtol=0, atol=1e-6)


def test_a_run_trains_every_member_and_scores_the_average():
    cfg = make_config("knn", "relational", "geometry_text", [*SYNTH, "++model.members=2"])
    bundle, fitted = run_experiment(cfg)
    assert isinstance(fitted.model, MemberAverage)
    notes = bundle.metrics
    member_scores = [notes[f"member/{i}/val_macro_f1"] for i in range(2)]
    assert all(0 <= s <= 1 for s in member_scores)
    # every member trained: its weights left the ones its seed gave it (seeds 0, 1 for seed 0)
    initial = build_gnn(fitted.arguments, [0, 1])
    for trained, start in zip(fitted.model.members, initial.members):
        before = start.state_dict()
        assert any(not torch.equal(value, before[name])
                   for name, value in trained.state_dict().items())
    assert bundle.name.startswith("relationalx2")


@pytest.mark.parametrize("value, message", [(0, "model.members=0: use a whole number"),
                                            (2, "model.members=2: averaging members labels")])
def test_members_that_cannot_work_are_refused_by_name(value, message):
    task = "task=links" if value == 2 else "task=word_labels"
    cfg = make_config("knn", "relational", "geometry_text", [*SYNTH, task,
                                                             f"++model.members={value}"])
    with pytest.raises(tasks.TaskError, match=message):
        check_names(cfg)
