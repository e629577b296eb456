"""Kill it anywhere: a sweep, `dochar predict` and `dochar import` killed with SIGKILL at one
instant, then started again with the same command, end as if never interrupted.

A small sweep (an R-GCN and a random forest, synthetic certificates, tiny sizes, an SQLite store)
is killed at instants spread over the whole run (tests/runs/kill_points.py): mid-epoch, inside
checkpoint writes, around every MLflow logging call, while the run folder, its figures, the
report and the saved model are written, and while the sweep table is written. The same command
is then run again to the end, and the invariants are checked (the invariants are the ones the
crash-safety note, docs/crash-safety.md, promises):

1. each job ends FINISHED exactly once in the store, with the scores of an uninterrupted sweep
   (exact float equality: the same machine and thread count);
2. no run is left RUNNING; a run the kill left RUNNING is KILLED with the tags saying when and
   by what it was found;
3. no ``*.partial`` file or folder anywhere under the working folder, no checkpoint left;
4. every run folder, saved model, report and sweep table is whole: its summary or manifest is
   there, the manifest's checksums match, the HTML page is closed;
5. the sweep table lists every job.

The default suite kills at two instants (inside a checkpoint write; inside MLflow's artifact
logging, which leaves a RUNNING run); the slow suite at every instant of KILL_POINTS.

The same sweep on Hydra's submitit_local launcher (one process per job, as on SLURM): a job
pre-empted (SIGUSR2, which submitit turns into a re-queue of the job) at one instant in the
default suite and at five in the slow one; a job killed outright (SIGKILL) and the sweep queued
again at once, in the slow suite.
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from dochar.data.word_table import REQUIRED_COLUMNS
from tests.helpers import REPO
from tests.helpers.cli import runs_frame

KILLED = -signal.SIGKILL
SWEEP = ["-m", "model=relational,random_forest", "data.documents=16", "features=geometry_text",
         "train.max_epochs=3", "train.patience=3", "train.progress=false",
         "evaluation.bootstrap_resamples=50", "hydra.sweep.dir=sweep",
         "train.checkpoint_dir=checkpoints", "tracking.experiment=kill"]
JOBS = 2
TIMINGS = {"train_seconds", "pages_per_second"}

FAST_POINTS = ["write:2:700", "call:mlflow.log_artifacts:1"]
# Instants over the whole sweep, in the order the sweep reaches them. The GNN (job 0) trains 3
# epochs of 2 batches; a count N is the N-th call in the sweep's process (the basic launcher
# runs both jobs in it). MlflowClient.create_run 1 is the sweep's parent run, 2 and 3 the jobs'.
KILL_POINTS = [
    "rename:sweep_context.json:1",                       # the sweep starting
    "after:mlflow.tracking.MlflowClient.create_run:1",   # the parent run RUNNING
    "batch:3",                                           # mid-epoch
    "write:1:64", "write:2:700", "written:3", "saved:1",  # inside / around checkpoint writes
    "trained",                                           # trained, checkpoint still there
    "rename:confusion_counts.png:1",                     # run folder: figures
    "rename:run_report.html:1",                          # the run's report page
    "rename:model:1",                                    # the saved GNN, before its rename
    "after:mlflow.tracking.MlflowClient.create_run:2",   # job 0's run RUNNING, nothing logged
    "call:mlflow.log_params:1", "call:mlflow.log_metrics:1", "call:mlflow.log_input:1",
    "call:mlflow.log_artifacts:1",
    "rename:summary.json:1",                             # job 0's summary, before its rename
    "call:dochar.runs.tracking.log_model:1",
    "after:dochar.runs.tracking.log_model:1",            # model logged, run not ended
    "after:mlflow.tracking.MlflowClient.set_terminated:1",  # job 0 FINISHED, nothing after
    "call:skops.io.dump:1",                              # saving the forest
    "rename:model:2",
    "call:mlflow.log_artifacts:2",                       # job 1's logging
    "rename:summary.json:2",
    "call:dochar.runs.sweep.SweepTable.on_multirun_end:1",  # both jobs done, no table
    "rename:sweep_table.csv:1",
    "call:dochar.runs.sweep.SweepTable._close_parent:1",   # the parent still RUNNING
]


def dochar(cwd: Path, *args: str, kill_at: str | None = None,
           env: dict[str, str] | None = None) -> subprocess.CompletedProcess:
    entry = ["-m", "tests.runs.kill_points", kill_at] if kill_at else ["-m", "dochar.cli"]
    env = {**os.environ, "PYTHONPATH": str(REPO), "OMP_NUM_THREADS": "1", **(env or {})}
    return subprocess.run([sys.executable, *entry, *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=1800)


def scores(summary: dict) -> dict:
    return {"metrics": summary["metrics"],
            "cost": {k: v for k, v in summary["cost"].items() if k not in TIMINGS}}


def job_scores(cwd: Path) -> dict[int, dict]:
    return {job: scores(json.loads((cwd / "sweep" / str(job) / "run" / "summary.json")
                                   .read_text())) for job in range(JOBS)}


@pytest.fixture(scope="module")
def uninterrupted(tmp_path_factory) -> dict[int, dict]:
    cwd = tmp_path_factory.mktemp("uninterrupted")
    result = dochar(cwd, "run", *SWEEP)
    assert result.returncode == 0, result.stderr[-3000:]
    return job_scores(cwd)


def whole_model(folder: Path) -> None:
    """A saved model: its manifest is there and every file's checksum matches it."""
    manifest = json.loads((folder / "manifest.json").read_text())
    for name, digest in manifest["files"].items():
        assert hashlib.sha256((folder / name).read_bytes()).hexdigest() == digest, folder / name


def check_invariants(cwd: Path, expected: dict[int, dict], point: str) -> None:
    frame = runs_frame(f"sqlite:///{cwd / 'mlflow.db'}", "kill")
    assert not (frame["status"] == "RUNNING").any(), f"{point}: a run left RUNNING"     # 2
    assert not (frame["status"] == "FAILED").any(), f"{point}: a stopped run shown FAILED"
    killed = frame[frame["status"] == "KILLED"]
    for tag in ("tags.killed_found_at", "tags.killed_found_by"):
        assert killed.empty or (tag in killed and killed[tag].notna().all()), point
    jobs = frame[frame["tags.kind"].isna() & (frame["status"] == "FINISHED")]
    assert sorted(jobs["tags.model"].value_counts().to_dict().items()) == [
        ("random_forest", 1), ("relational", 1)], f"{point}: not FINISHED exactly once"  # 1
    assert job_scores(cwd) == expected, point
    assert not list(cwd.rglob("*.partial")), f"{point}: partial files left"           # 3
    assert not list((cwd / "checkpoints").glob("*")), f"{point}: checkpoint left"
    for job in range(JOBS):                                                           # 4
        run = cwd / "sweep" / str(job) / "run"
        if (run / "model").exists():   # a skipped job's folder comes from the store without it
            whole_model(run / "model")
        assert (run / "run_report.html").read_text().rstrip().endswith("</html>"), point
    table = pd.read_csv(cwd / "sweep" / "sweep_table.csv")                            # 5
    assert len(table) == JOBS and set(table["status"]) <= {"finished",
                                                          "skipped (done before)"}, point


def kill_then_rerun(cwd: Path, point: str, expected: dict[int, dict]) -> None:
    killed = dochar(cwd, "run", *SWEEP, kill_at=point)
    assert killed.returncode == KILLED, f"{point}: not reached\n{killed.stderr[-3000:]}"
    rerun = dochar(cwd, "run", *SWEEP)
    assert rerun.returncode == 0, f"{point}\n{rerun.stdout[-2000:]}{rerun.stderr[-3000:]}"
    check_invariants(cwd, expected, point)


@pytest.mark.parametrize("point", FAST_POINTS)
def test_a_sweep_killed_at_an_instant_ends_as_if_never_killed(tmp_path, uninterrupted, point):
    kill_then_rerun(tmp_path, point, uninterrupted)


@pytest.mark.slow
@pytest.mark.parametrize("point", [p for p in KILL_POINTS if p not in FAST_POINTS])
def test_a_sweep_killed_anywhere_ends_as_if_never_killed(tmp_path, uninterrupted, point):
    kill_then_rerun(tmp_path, point, uninterrupted)


# Hydra's submitit_local launcher runs each job in a process of its own, as SLURM does on its
# nodes (submitit's local executor). SLURM warns a job it is pre-empted or about to time out with
# SIGUSR2; submitit then saves the job's call and re-queues it, and the job starts again from the
# beginning in a new process (submitit's checkpointing documentation; Hydra's launcher returns
# the same call). A point below fires in the first job process to reach it (kill_points `once`).
SUBMITIT = [*SWEEP, "hydra/launcher=submitit_local"]
IN_JOB = str(Path(__file__).parent / "in_job")     # its sitecustomize arms the point in a job
REQUEUE_FAST = ["saved:1"]
REQUEUE_SLOW = ["batch:3", "trained", "call:mlflow.log_artifacts:1", "rename:summary.json:1",
                "after:mlflow.tracking.MlflowClient.set_terminated:1"]


def job_signal(cwd: Path, point: str, signal_name: str) -> dict[str, str]:
    return {"PYTHONPATH": f"{REPO}{os.pathsep}{IN_JOB}", "DOCHAR_JOB_KILL_POINT": point,
            "DOCHAR_JOB_KILL_SIGNAL": signal_name, "DOCHAR_JOB_KILL_ONCE": str(cwd / "fired")}


def requeue_then_check(cwd: Path, point: str, expected: dict[int, dict]) -> None:
    preempted = dochar(cwd, "run", *SUBMITIT, env=job_signal(cwd, point, "SIGUSR2"))
    assert (cwd / "fired").exists(), f"{point}: not reached"
    assert preempted.returncode == 0, f"{point}\n{preempted.stdout[-2000:]}" \
                                      f"{preempted.stderr[-3000:]}"
    logs = "".join(p.read_text() for p in (cwd / "sweep" / ".submitit").rglob("*_log.out"))
    assert "Requeued job" in logs, f"{point}: submitit did not re-queue the job"
    check_invariants(cwd, expected, point)


@pytest.mark.parametrize("point", REQUEUE_FAST)
def test_a_preempted_submitit_job_is_requeued_and_ends_as_if_never_interrupted(
        tmp_path, uninterrupted, point):
    requeue_then_check(tmp_path, point, uninterrupted)


@pytest.mark.slow
@pytest.mark.parametrize("point", REQUEUE_SLOW)
def test_a_submitit_job_preempted_anywhere_is_requeued_and_ends_as_if_never_interrupted(
        tmp_path, uninterrupted, point):
    requeue_then_check(tmp_path, point, uninterrupted)


@pytest.mark.slow
@pytest.mark.parametrize("point", ["saved:1", "call:mlflow.log_artifacts:1"])
def test_a_submitit_job_killed_outright_then_the_sweep_queued_again_ends_as_if_never_killed(
        tmp_path, uninterrupted, point):
    """SIGKILL, as SLURM sends once a pre-empted job's grace time is over (or the out-of-memory
    killer): the job leaves no result, the sweep says so in one line, and the same command,
    queued again at once (the other job may still be running), ends the sweep whole."""
    killed = dochar(tmp_path, "run", *SUBMITIT, env=job_signal(tmp_path, point, "SIGKILL"))
    assert (tmp_path / "fired").exists(), f"{point}: not reached"
    assert killed.returncode == 2 and "Traceback" not in killed.stderr, killed.stderr[-3000:]
    assert "ended without a result" in killed.stderr, killed.stderr[-3000:]
    rerun = dochar(tmp_path, "run", *SUBMITIT)
    assert rerun.returncode == 0, f"{point}\n{rerun.stdout[-2000:]}{rerun.stderr[-3000:]}"
    check_invariants(tmp_path, uninterrupted, point)


@pytest.fixture(scope="module")
def forest_input(tmp_path_factory) -> dict:
    """A forest trained by an uninterrupted single run, and its test words as a word table."""
    cwd = tmp_path_factory.mktemp("forest")
    result = dochar(cwd, "run", *[a for a in SWEEP if a not in {"-m"} and not a.startswith(
        ("model=", "hydra.sweep"))], "model=random_forest", "hydra.run.dir=single")
    assert result.returncode == 0, result.stderr[-3000:]
    words = pd.read_parquet(cwd / "single" / "run" / "predictions.parquet")
    table = cwd / "words.csv"
    words[[*REQUIRED_COLUMNS, "label"]].to_csv(table, index=False)
    return {"model": cwd / "single" / "run", "table": table}


PREDICT_OUTPUTS = ("words.csv", "fields.csv", "fields.json")


@pytest.mark.parametrize("point", ["rename:fields.json:1", pytest.param(
    "rename:words.csv:1", marks=pytest.mark.slow)])
def test_predict_killed_while_writing_then_rerun_writes_whole_outputs(tmp_path, forest_input,
                                                                     point):
    command = ["predict", "--model", str(forest_input["model"]), "--input",
               str(forest_input["table"]), "--out", "labelled"]
    reference = dochar(tmp_path, *[c if c != "labelled" else "reference" for c in command])
    assert reference.returncode == 0, reference.stderr[-3000:]
    killed = dochar(tmp_path, *command, kill_at=point)
    assert killed.returncode == KILLED, killed.stderr[-3000:]
    written = [n for n in PREDICT_OUTPUTS if (tmp_path / "labelled" / n).exists()]
    for name in written:     # absent or whole: a file in place is the reference's
        assert (tmp_path / "labelled" / name).read_bytes() == \
            (tmp_path / "reference" / name).read_bytes(), (point, name)
    assert list((tmp_path / "labelled").glob("*.partial")), "the kill was inside a write"
    rerun = dochar(tmp_path, *command)
    assert rerun.returncode == 0, rerun.stderr[-3000:]
    for name in PREDICT_OUTPUTS:
        assert (tmp_path / "labelled" / name).read_bytes() == \
            (tmp_path / "reference" / name).read_bytes(), name
    assert not list(tmp_path.rglob("*.partial"))


def test_import_killed_while_writing_then_rerun_writes_the_whole_table(tmp_path):
    from data_synth.__main__ import main as synth_main

    assert synth_main(["--documents", "2", "--seed", "3", "--out", str(tmp_path / "t.parquet"),
                       "--render", "pdf", "--render-dir", str(tmp_path / "pages")]) == 0
    command = ["import", "pages", "--out", "imported.csv"]
    reference = dochar(tmp_path, *[c if c != "imported.csv" else "reference.csv"
                                   for c in command])
    assert reference.returncode == 0, reference.stderr[-3000:]
    killed = dochar(tmp_path, *command, kill_at="rename:imported.csv:1")
    assert killed.returncode == KILLED, killed.stderr[-3000:]
    assert not (tmp_path / "imported.csv").exists()
    assert len(list(tmp_path.glob("imported.csv.*.partial"))) == 1
    rerun = dochar(tmp_path, *command)
    assert rerun.returncode == 0, rerun.stderr[-3000:]
    assert (tmp_path / "imported.csv").read_bytes() == (tmp_path / "reference.csv").read_bytes()
    assert not list(tmp_path.rglob("*.partial"))


@pytest.mark.slow
def test_two_sweeps_at_once_on_one_sqlite_store_both_end_correct(tmp_path, uninterrupted):
    """Two sweeps of the same jobs started together, one store, one checkpoint folder: both
    finish, nothing is left RUNNING or partial, each job is FINISHED once (the second sweep to
    reach a job waits for the first's claim on it, then skips it) with the uninterrupted
    scores."""
    env = {**os.environ, "PYTHONPATH": str(REPO), "OMP_NUM_THREADS": "1"}
    sweeps = [subprocess.Popen([sys.executable, "-m", "dochar.cli", "run", *SWEEP,
                                f"hydra.sweep.dir={name}"], cwd=tmp_path, env=env,
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
              for name in ("sweep_a", "sweep_b")]
    for process in sweeps:
        out, err = process.communicate(timeout=1800)
        assert process.returncode == 0, out[-2000:] + err[-3000:]
    frame = runs_frame(f"sqlite:///{tmp_path / 'mlflow.db'}", "kill")
    assert set(frame["status"]) == {"FINISHED"}
    jobs = frame[frame["tags.kind"].isna()]
    assert sorted(jobs["tags.model"]) == ["random_forest", "relational"]
    expected = {uninterrupted[job]["metrics"]["macro_f1"] for job in range(JOBS)}
    assert set(jobs["metrics.macro_f1"]) == expected
    for name in ("sweep_a", "sweep_b"):
        assert len(pd.read_csv(tmp_path / name / "sweep_table.csv")) == JOBS
        for job in range(JOBS):
            summary = json.loads((tmp_path / name / str(job) / "run" / "summary.json")
                                 .read_text())
            assert scores(summary) == uninterrupted[job], (name, job)
    assert not list(tmp_path.rglob("*.partial"))
    assert not list((tmp_path / "checkpoints").glob("*"))
