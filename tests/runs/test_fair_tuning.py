"""Fair tuning: a GNN and the forest each get the same Optuna trial budget, every trial is scored
on validation words only, every trial is logged, and the report says which budget each had."""

from __future__ import annotations

import math

import pytest
import yaml

from dochar.report import write_report
from dochar.runs.store import RunStore
from tests.helpers.cli import TINY, dochar, job_runs, runs_frame
from tests.helpers.report_runs import table_cells

BUDGET = 3
SYSTEMS = {"relational": ["train.max_epochs=1", "train.patience=1"], "random_forest": []}
LINKS = ["task=links", "task.link_kind=same_entity"]


@pytest.fixture(scope="module")
def tuned(tmp_path_factory):
    cwd = tmp_path_factory.mktemp("tuning")
    results = {}
    for system, extra in SYSTEMS.items():
        dochar(cwd, "run", "-m", f"+tuning={system}", f"tuning.budget={BUDGET}", *TINY, *extra,
               "tracking.experiment=tuning")
        (sweep_dir,) = sorted((cwd / "outputs" / "sweeps").iterdir())[-1:]
        results[system] = yaml.safe_load((sweep_dir / "optimization_results.yaml").read_text())
    return cwd, results


def test_each_system_gets_the_same_budget_and_every_trial_is_logged(tuned):
    cwd, _ = tuned
    jobs = job_runs(runs_frame(f"sqlite:///{cwd / 'mlflow.db'}", "tuning"))
    for system in SYSTEMS:
        trials = jobs[jobs["tags.model"] == system]
        assert len(trials) == BUDGET and (trials["status"] == "FINISHED").all()
        assert set(trials["tags.tuning_budget"]) == {str(BUDGET)}
        assert set(trials["tags.tuning_score"]) == {"val_score"}


def test_trials_are_chosen_by_validation_score_only(tuned):
    """Optuna's best trial is the one with the highest validation macro-F1 that dochar logged;
    for the GNN that is its early-stopping score (best validation epoch)."""
    cwd, results = tuned
    jobs = job_runs(runs_frame(f"sqlite:///{cwd / 'mlflow.db'}", "tuning"))
    for system in SYSTEMS:
        trials = jobs[jobs["tags.model"] == system]
        best = trials.loc[trials["metrics.cost/val_score"].idxmax()]
        assert math.isclose(results[system]["best_value"], best["metrics.cost/val_score"],
                            rel_tol=0, abs_tol=1e-12)
        for key, value in results[system]["best_params"].items():
            assert float(best[f"params.{key}"]) == pytest.approx(float(value))
    # a word-label run's validation score is its validation macro-F1
    assert (jobs["metrics.cost/val_score"] == jobs["metrics.cost/val_macro_f1"]).all()


@pytest.mark.parametrize("system", sorted(SYSTEMS))
def test_a_links_sweep_returns_finite_validation_scores_to_optuna(system, tmp_path):
    """Every trial of a links system returns its validation link F1 (a number, never NaN)."""
    dochar(tmp_path, "run", "-m", f"+tuning={system}", "tuning.budget=2", *TINY, *LINKS,
           *SYSTEMS[system], "tracking.experiment=links-tuning")
    (sweep_dir,) = sorted((tmp_path / "outputs" / "sweeps").iterdir())[-1:]
    result = yaml.safe_load((sweep_dir / "optimization_results.yaml").read_text())
    jobs = job_runs(runs_frame(f"sqlite:///{tmp_path / 'mlflow.db'}", "links-tuning"))
    assert len(jobs) == 2 and jobs["metrics.cost/val_score"].notna().all()
    assert (jobs["metrics.cost/val_score"] == jobs["metrics.cost/val_link_f1"]).all()
    assert math.isfinite(result["best_value"])
    assert result["best_value"] == pytest.approx(jobs["metrics.cost/val_score"].max(), abs=1e-12)


def test_the_report_says_which_budget_each_system_had(tuned, tmp_path):
    cwd, _ = tuned
    bundles = RunStore(f"sqlite:///{cwd / 'mlflow.db'}").bundles("tuning")
    assert len(bundles) == 2 * BUDGET
    html = write_report(bundles, tmp_path / "report.html", title="tuning").read_text()
    headers, rows = table_cells(html, "leaderboard-table")
    column = headers.index("tuning budget")
    assert [row[column] for row in rows] == [f"{BUDGET} trials"] * len(rows)
