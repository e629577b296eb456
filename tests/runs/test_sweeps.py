"""Sweeps beyond one process: a failing job never stops the others, on every launcher; parallel
jobs on the embedded SQLite store lose nothing; a second run of a sweep skips what is done.

Each sweep below has one bad value among good ones (a forest with -1 trees, which
scikit-learn's own parameter validation rejects), run through the real `dochar` command.
"""

from __future__ import annotations

import json

import pandas as pd
import pytest

from dochar.runs.sweep import SOME_JOBS_FAILED
from tests.helpers.cli import TINY_FOREST, dochar, job_runs, runs_frame

GOOD_AND_BAD = "model.options.n_estimators=5,-1"


def only_sweep(cwd):
    (sweep_dir,) = sorted((cwd / "outputs" / "sweeps").iterdir())[-1:]
    return sweep_dir, pd.read_csv(sweep_dir / "sweep_table.csv")


def assert_one_failed_one_finished(table: pd.DataFrame) -> None:
    assert sorted(table["status"]) == ["failed", "finished"]
    failed = table[table["status"] == "failed"].iloc[0]
    assert "n_estimators" in failed["reason"] and "-1" in failed["system"]
    finished = table[table["status"] == "finished"].iloc[0]
    assert 0 < finished["macro_f1"] <= 1


@pytest.mark.parametrize("launcher", ["basic", "submitit_local"])
def test_a_failing_job_does_not_stop_the_sweep(tmp_path, launcher):
    """basic: jobs one after another in this process; submitit_local: each job in a process of
    its own, as on a SLURM cluster (submitit's local executor)."""
    result = dochar(tmp_path, "run", "-m", *TINY_FOREST, GOOD_AND_BAD, "tracking.enabled=false",
                    f"hydra/launcher={launcher}", expect=SOME_JOBS_FAILED)
    sweep_dir, table = only_sweep(tmp_path)
    assert_one_failed_one_finished(table)
    assert "1 failed job(s)" in result.stdout
    failure = json.loads(next(sweep_dir.glob("*/failure.json")).read_text())
    # scikit-learn's own parameter rule, applied before the job loads any data
    assert "EstimatorOptionError" in failure["reason"] and "n_estimators" in failure["reason"]


@pytest.fixture(scope="module")
def parallel_sqlite(tmp_path_factory):
    """Four jobs on two joblib workers, all logging to one SQLite store; one of them fails."""
    cwd = tmp_path_factory.mktemp("parallel")
    arguments = ["run", "-m", *TINY_FOREST, "model.options.n_estimators=5,6,7,-1",
                 "hydra/launcher=joblib", "hydra.launcher.n_jobs=2", "tracking.experiment=par"]
    first = dochar(cwd, *arguments, expect=SOME_JOBS_FAILED)
    frame_after_first = runs_frame(f"sqlite:///{cwd / 'mlflow.db'}", "par")
    second = dochar(cwd, *arguments, expect=SOME_JOBS_FAILED)
    return cwd, first, frame_after_first, second


def test_parallel_jobs_on_sqlite_lose_no_run_and_report_the_failure(parallel_sqlite):
    cwd, first, frame, _ = parallel_sqlite
    jobs = job_runs(frame)
    assert sorted(jobs["params.model.options.n_estimators"]) == ["5", "6", "7"]
    assert (jobs["status"] == "FINISHED").all()
    assert jobs["metrics.macro_f1"].between(0, 1).all()
    assert jobs["metrics.cost/val_macro_f1"].between(0, 1).all()
    failed = frame[frame["tags.kind"] == "failed_job"]
    assert len(failed) == 1 and failed["status"].item() == "FAILED"
    assert "n_estimators" in failed["tags.failure"].item()
    parent = frame[frame["tags.kind"] == "sweep"].iloc[0]
    assert parent["status"] == "FAILED" and parent["tags.jobs_failed"] == "1"
    sweep_ids = set(jobs["tags.sweep_id"]) | set(failed["tags.sweep_id"])
    assert sweep_ids == {parent["tags.sweep_id"]}
    assert set(jobs["tags.mlflow.parentRunId"]) == {parent["run_id"]}
    assert "database is locked" not in first.stderr


def test_the_failed_job_s_run_starts_when_the_job_did(parallel_sqlite):
    """Its MLflow start is the job's start, before the failure was written to the job folder
    (failure.json), not the moment the failure was logged afterwards."""
    import mlflow

    cwd, _, frame, _ = parallel_sqlite
    (run_id,) = frame.loc[frame["tags.kind"] == "failed_job", "run_id"]
    run = mlflow.MlflowClient(tracking_uri=f"sqlite:///{cwd / 'mlflow.db'}").get_run(run_id)
    first_sweep = sorted((cwd / "outputs" / "sweeps").iterdir())[0]
    (failure,) = first_sweep.glob("*/failure.json")
    assert run.info.start_time / 1000 <= failure.stat().st_mtime <= run.info.end_time / 1000


def test_a_second_run_of_the_sweep_skips_finished_jobs_and_says_so(parallel_sqlite):
    cwd, _, frame_before, second = parallel_sqlite
    assert second.stdout.count("already finished as run") == 3
    frame = runs_frame(f"sqlite:///{cwd / 'mlflow.db'}", "par")
    assert set(job_runs(frame)["run_id"]) == set(job_runs(frame_before)["run_id"])  # none new
    _, table = only_sweep(cwd)
    assert sorted(table["status"]) == ["failed"] + ["skipped (done before)"] * 3
    forced = dochar(cwd, "run", "-m", *TINY_FOREST, "model.options.n_estimators=5",
                    "tracking.experiment=par", "tracking.skip_finished=false")
    assert "already finished" not in forced.stdout
    assert len(job_runs(runs_frame(f"sqlite:///{cwd / 'mlflow.db'}", "par"))) == 4
