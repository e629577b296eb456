"""The crash-safety fixes one by one, each with the case that broke before it.

- a partial a killed writer left (any output, not only checkpoints) is removed by the next
  write into its folder; one of a running writer is kept;
- a saved model is staged under a partial name, so a killed save leaves nothing a later save
  does not remove, and the old model is replaced whole;
- a full disk (RLIMIT_FSIZE, POSIX setrlimit) and a folder that cannot be made give one located
  error and leave no partial;
- runs a killed process left RUNNING end as KILLED, with when and by what, and only those;
- a sweep job started again forgets an earlier start's outcome; jobs with no outcome are listed
  as unfinished;
- two sweeps started at once on one SQLite store run each config once: the second waits for
  the first's claim on it, then skips it.
"""

from __future__ import annotations

import json
import os
import resource
import socket
import subprocess
import sys
import time
from pathlib import Path

import mlflow
import pandas as pd
import pytest

from dochar.data.files import (OutputWriteError, atomic_folder, partial_path,
                               remove_stale_partials, write_text_atomic)
from dochar.runs.killed_runs import (FOUND_AT_TAG, FOUND_BY_TAG, WRITTEN_BY_TAG,
                                     end_killed_runs, writer)
from dochar.runs.sweep import FAILURE_FILE, clear_job_outcome, sweep_frame, unfinished_jobs
from tests.helpers import REPO
from tests.helpers.cli import runs_frame


@pytest.fixture(scope="module")
def dead_pid() -> int:
    """The pid of a process that has ended (reaped, so not running)."""
    process = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                             capture_output=True, text=True, check=True)
    return int(process.stdout)


def left_by(pid: int, path: Path, text: str = "half") -> Path:
    """The partial a writer with this pid leaves when killed inside the write."""
    name = partial_path(path).name.replace(f".{os.getpid()}-", f".{pid}-")
    partial = path.with_name(name)
    partial.write_text(text)
    return partial


def test_a_killed_writers_partial_is_removed_by_the_next_write_in_the_folder(tmp_path,
                                                                             dead_pid):
    """The summary of a run folder, not a checkpoint: before the fix only checkpoint partials
    (``*.pt.<pid>.partial``) were ever removed."""
    stale = left_by(dead_pid, tmp_path / "summary.json")
    write_text_atomic(tmp_path / "config.yaml", "a: 1\n")
    assert not stale.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["config.yaml"]


def test_a_running_writers_partial_is_kept(tmp_path):
    live = left_by(os.getppid(), tmp_path / "report.html")     # the test runner's parent runs
    assert remove_stale_partials(tmp_path) == []
    write_text_atomic(tmp_path / "other.txt", "x")
    assert live.exists()


def test_a_partial_whose_pid_a_later_process_took_is_removed(tmp_path):
    """On a busy machine pids wrap within minutes (pid_max 32768): a process started after the
    partial was last written cannot be its writer (start time from /proc, proc(5))."""
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        stale = left_by(sleeper.pid, tmp_path / "sweep_context.json")
        hour_ago = stale.stat().st_mtime - 3600
        os.utime(stale, (hour_ago, hour_ago))
        fresh = left_by(sleeper.pid, tmp_path / "sweep_table.csv")   # written by it just now
        assert remove_stale_partials(tmp_path) == [stale]
        assert fresh.exists()
    finally:
        sleeper.kill()
        sleeper.wait()


def test_a_killed_model_save_leaves_a_folder_the_next_save_removes(tmp_path, dead_pid):
    staging = left_by(dead_pid, tmp_path / "model")
    staging.unlink()
    staging.mkdir()                       # a staging folder, half filled
    (staging / "weights.pt").write_bytes(b"\0" * 10)
    (tmp_path / "model").mkdir()
    (tmp_path / "model" / "manifest.json").write_text("{}")
    with atomic_folder(tmp_path / "model") as folder:
        (folder / "manifest.json").write_text('{"new": true}')
    assert sorted(p.name for p in tmp_path.iterdir()) == ["model"]
    assert json.loads((tmp_path / "model" / "manifest.json").read_text()) == {"new": True}


def test_a_failed_model_save_keeps_the_old_model_whole(tmp_path):
    (tmp_path / "model").mkdir()
    (tmp_path / "model" / "manifest.json").write_text("{}")
    with pytest.raises(RuntimeError), atomic_folder(tmp_path / "model") as folder:
        (folder / "weights.pt").write_bytes(b"x")
        raise RuntimeError("killed by the test")
    assert sorted(p.name for p in tmp_path.rglob("*")) == ["manifest.json", "model"]


FULL_DISK = """
import resource, sys
from dochar.data.files import OutputWriteError, write_text_atomic
resource.setrlimit(resource.RLIMIT_FSIZE, (4096, 4096))
try:
    write_text_atomic(sys.argv[1], "x" * 100_000)
except OutputWriteError as error:
    print(error)
"""


def test_a_full_disk_gives_one_located_error_and_no_partial(tmp_path):
    """RLIMIT_FSIZE makes write() fail with EFBIG past 4 KiB (POSIX setrlimit; CPython ignores
    SIGXFSZ), as a full disk fails with ENOSPC: both take the same path."""
    target = tmp_path / "out" / "words.csv"
    result = subprocess.run([sys.executable, "-c", FULL_DISK, str(target)], capture_output=True,
                            text=True, env={**os.environ, "PYTHONPATH": str(REPO)}, timeout=120)
    assert result.stdout.startswith(f"cannot write {target}: the file size limit is reached")
    assert not target.exists() and not list(target.parent.iterdir())


def test_an_import_onto_a_full_disk_exits_2_with_one_line(tmp_path):
    from data_synth.__main__ import main as synth_main

    assert synth_main(["--documents", "2", "--seed", "3", "--out", str(tmp_path / "t.parquet"),
                       "--render", "pdf", "--render-dir", str(tmp_path / "pages")]) == 0
    out = tmp_path / "imported.csv"

    def limit() -> None:
        resource.setrlimit(resource.RLIMIT_FSIZE, (2048, 2048))

    result = subprocess.run([sys.executable, "-m", "dochar.cli", "import", "pages", "--out",
                             str(out)], cwd=tmp_path, capture_output=True, text=True,
                            env={**os.environ, "PYTHONPATH": str(REPO)}, preexec_fn=limit,
                            timeout=300)
    assert result.returncode == 2, result.stderr[-2000:]
    assert "Traceback" not in result.stderr
    assert f"cannot write {out}: the file size limit is reached" in result.stderr
    assert not out.exists() and not list(tmp_path.glob("*.partial"))


def test_an_output_folder_that_cannot_be_made_is_named(tmp_path):
    (tmp_path / "taken").write_text("a file where a folder should be")
    with pytest.raises(OutputWriteError, match=r"cannot write .*taken"):
        write_text_atomic(tmp_path / "taken" / "report.html", "<html></html>")


@pytest.fixture
def store(tmp_path) -> tuple[mlflow.MlflowClient, str]:
    client = mlflow.MlflowClient(tracking_uri=f"sqlite:///{tmp_path / 'mlflow.db'}")
    return client, client.create_experiment("e")


def running(client, experiment_id, config_hash: str, written_by: str) -> str:
    tags = {"config_hash": config_hash, WRITTEN_BY_TAG: written_by}
    return client.create_run(experiment_id, tags=tags).info.run_id


def test_only_runs_of_the_config_whose_writer_died_here_end_as_killed(store, dead_pid):
    client, experiment_id = store
    host = socket.gethostname()
    dead = running(client, experiment_id, "h1", f"{host}:{dead_pid}")
    alive = running(client, experiment_id, "h1", f"{host}:{os.getppid()}")
    elsewhere = running(client, experiment_id, "h1", f"another-host:{dead_pid}")
    other_config = running(client, experiment_id, "h2", f"{host}:{dead_pid}")
    untagged = client.create_run(experiment_id, tags={"config_hash": "h1"}).info.run_id

    assert end_killed_runs(client, "e", "config_hash", "h1") == [dead]
    status = {run_id: client.get_run(run_id).info.status
              for run_id in (dead, alive, elsewhere, other_config, untagged)}
    assert status == {dead: "KILLED", alive: "RUNNING", elsewhere: "RUNNING",
                      other_config: "RUNNING", untagged: "RUNNING"}
    tags = client.get_run(dead).data.tags
    assert tags[FOUND_BY_TAG] == writer()
    assert pd.Timestamp(tags[FOUND_AT_TAG]).tzname() == "UTC"    # ISO 8601 with its offset


def test_a_job_started_again_forgets_its_earlier_outcome(tmp_path):
    job = tmp_path / "0"
    (job / "run").mkdir(parents=True)
    (job / "run" / "summary.json").write_text("{}")
    (job / FAILURE_FILE).write_text("{}")
    clear_job_outcome(job)
    assert list(job.iterdir()) == []


def test_jobs_without_an_outcome_are_listed_unfinished(tmp_path):
    for job, outcome in (("0", "run/summary.json"), ("1", FAILURE_FILE), ("2", None),
                         ("10", None)):
        (tmp_path / job / ".hydra").mkdir(parents=True)
        if outcome:
            (tmp_path / job / outcome).parent.mkdir(parents=True, exist_ok=True)
            (tmp_path / job / outcome).write_text("{}")
    assert unfinished_jobs(tmp_path) == ["2", "10"]
    frame = sweep_frame([], unfinished=["2", "10"])
    assert list(frame["run"]) == ["job 2", "job 10"]
    assert set(frame["status"]) == {"unfinished"}


TWO_SWEEPS = ["run", "-m", "model=random_forest", "data.documents=16", "features=geometry_text",
              "train.progress=false", "evaluation.bootstrap_resamples=50",
              "tracking.experiment=two"]


def test_two_sweeps_at_once_on_one_sqlite_store_finish_each_job_once(tmp_path):
    """Sweep a is held (kill_points `pause`) after it found the job unfinished, before it
    trains; sweep b, started then, must wait for a's claim on the config and skip the job once
    a finished it. Before the fix b trained too: two FINISHED runs of one config."""
    env = {**os.environ, "PYTHONPATH": str(REPO), "OMP_NUM_THREADS": "1"}

    def start(name: str, *entry: str) -> subprocess.Popen:
        log = (tmp_path / f"{name}.log").open("w")
        return subprocess.Popen([sys.executable, *entry, *TWO_SWEEPS, f"hydra.sweep.dir={name}"],
                                cwd=tmp_path, env=env, stdout=log, stderr=subprocess.STDOUT,
                                text=True)

    held = start("a", "-m", "tests.runs.kill_points", "pause:dochar.experiment.run_experiment:1")
    try:
        wait_for(lambda: (tmp_path / "paused").exists() or held.poll() is not None)
        assert held.poll() is None, (tmp_path / "a.log").read_text()[-3000:]
        second = start("b", "-m", "dochar.cli")
        wait_for(lambda: "waits: another process runs the same config" in
                 (tmp_path / "b.log").read_text() or second.poll() is not None)
        (tmp_path / "release").touch()
        assert held.wait(timeout=900) == 0, (tmp_path / "a.log").read_text()[-3000:]
        assert second.wait(timeout=900) == 0, (tmp_path / "b.log").read_text()[-3000:]
    finally:
        for process in (held, locals().get("second")):
            if process is not None and process.poll() is None:
                process.kill()
                process.wait()
    frame = runs_frame(f"sqlite:///{tmp_path / 'mlflow.db'}", "two")
    jobs = frame[frame["tags.kind"].isna()]
    assert list(jobs["status"]) == ["FINISHED"], jobs[["status", "tags.sweep_id"]]
    assert set(frame["status"]) == {"FINISHED"}
    tables = {name: pd.read_csv(tmp_path / name / "sweep_table.csv") for name in "ab"}
    assert list(tables["a"]["status"]) == ["finished"]
    assert list(tables["b"]["status"]) == ["skipped (done before)"]
    assert tables["a"]["macro_f1"].item() == tables["b"]["macro_f1"].item()
    assert not list(tmp_path.rglob("*.partial"))


def wait_for(condition, seconds: float = 900) -> None:
    deadline = time.monotonic() + seconds
    while not condition():
        assert time.monotonic() < deadline, "timed out"
        time.sleep(0.5)


@pytest.fixture
def small_disk(tmp_path) -> Path:
    """A real 1 MiB file system (tmpfs, mount(8)): writes past it fail with ENOSPC, as on a full
    disk. Mounting needs the right to (root in a container here); without it the test skips and
    the RLIMIT_FSIZE tests above stand in."""
    disk = tmp_path / "disk"
    disk.mkdir()
    mounted = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", str(disk)],
                             capture_output=True, text=True)
    if mounted.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {mounted.stderr.strip()}")
    yield disk
    subprocess.run(["umount", "--lazy", str(disk)], check=True)


def remount(disk: Path, options: str) -> None:
    subprocess.run(["mount", "-o", f"remount,{options}", str(disk)], check=True)


def test_a_full_disk_fails_located_and_the_same_write_succeeds_once_space_is_freed(small_disk):
    target = small_disk / "out" / "words.csv"
    text = "certificate of analysis\n" * 100_000        # 2.4 MB: more than the disk holds
    with pytest.raises(OutputWriteError, match=f"cannot write {target}: the disk is full"):
        write_text_atomic(target, text)
    assert list(target.parent.iterdir()) == []          # nothing half-written
    remount(small_disk, "size=8m")                      # space freed
    write_text_atomic(target, text)
    assert target.read_text() == text


def test_a_read_only_output_folder_is_named_with_its_reason(small_disk):
    """A read-only file system refuses even root, for whom permission bits are no obstacle."""
    remount(small_disk, "ro")
    with pytest.raises(OutputWriteError, match=f"cannot write {small_disk / 'report.html'}: "
                                               "the file system is read-only"):
        write_text_atomic(small_disk / "report.html", "<html></html>")


@pytest.mark.slow
def test_a_run_onto_a_full_disk_exits_2_and_runs_whole_once_space_is_freed(tmp_path, small_disk):
    """The run folder on the full disk, the store beside it: one located line, no partial, no
    run left RUNNING or FINISHED; the same command after the disk grew writes the run whole."""
    command = ["run", "model=random_forest", "data.documents=16", "features=geometry_text",
               "train.progress=false", "evaluation.bootstrap_resamples=50",
               "tracking.experiment=disk", f"hydra.run.dir={small_disk / 'run'}"]
    env = {**os.environ, "PYTHONPATH": str(REPO), "OMP_NUM_THREADS": "1"}

    def dochar() -> subprocess.CompletedProcess:
        return subprocess.run([sys.executable, "-m", "dochar.cli", *command], cwd=tmp_path,
                              env=env, capture_output=True, text=True, timeout=900)

    full = dochar()
    assert full.returncode == 2 and "Traceback" not in full.stderr, full.stderr[-3000:]
    assert "the disk is full" in full.stderr, full.stderr[-3000:]
    assert not list(small_disk.rglob("*.partial"))
    assert not (small_disk / "run" / "run" / "summary.json").exists()
    store = f"sqlite:///{tmp_path / 'mlflow.db'}"
    if (tmp_path / "mlflow.db").exists():
        experiment = mlflow.MlflowClient(tracking_uri=store).get_experiment_by_name("disk")
        assert experiment is None or not mlflow.MlflowClient(tracking_uri=store).search_runs(
            [experiment.experiment_id])
    remount(small_disk, "size=64m")
    freed = dochar()
    assert freed.returncode == 0, freed.stderr[-3000:]
    assert set(runs_frame(store, "disk")["status"]) == {"FINISHED"}
    manifest = json.loads((small_disk / "run" / "run" / "model" / "manifest.json").read_text())
    assert manifest["files"] and (small_disk / "run" / "run" / "summary.json").exists()
    assert not list(small_disk.rglob("*.partial"))


@pytest.mark.parametrize("stop", [SystemExit(144), KeyboardInterrupt()])
def test_a_run_stopped_while_logging_ends_killed_not_failed(tmp_path, monkeypatch, stop):
    """SystemExit(144): what submitit's re-queue handler raises in the frame it interrupts
    (its local executor's requeue code); KeyboardInterrupt: Ctrl-C. Before the fix MLflow's
    run context ended the run FAILED, as if the run itself had failed."""
    from tests.runs.test_tracking import tiny_bundle
    from dochar.runs.tracking import log_run

    def stopped(*args, **kwargs):
        raise stop

    monkeypatch.setattr(mlflow, "log_artifacts", stopped)
    uri = f"sqlite:///{tmp_path / 'mlflow.db'}"
    with pytest.raises(type(stop)):
        log_run(tiny_bundle({"seed": 0}, "dochar run"), tmp_path / "run", uri=uri,
                experiment="stopped")
    (run,) = mlflow.MlflowClient(tracking_uri=uri).search_runs(
        [mlflow.MlflowClient(tracking_uri=uri).get_experiment_by_name("stopped").experiment_id])
    assert run.info.status == "KILLED"
    assert run.data.tags[FOUND_BY_TAG] == writer()
    assert pd.Timestamp(run.data.tags[FOUND_AT_TAG]).tzname() == "UTC"


def test_a_job_lost_under_submitit_is_told_in_one_line():
    """submitit raises UncompletedJobError for a job that left no result (its process killed);
    before the fix it reached the user as a traceback through Hydra and submitit."""
    from submitit.core.utils import FailedJobError, UncompletedJobError

    from dochar.runs.sweep import lost_job_message

    lost = UncompletedJobError("Job 6594 (task: 0) with path /s/6594_0_result.pkl\n"
                               "has not produced any output (state: FINISHED)")
    message = lost_job_message(lost)
    assert message is not None and "\n" not in message
    assert "Job 6594 (task: 0) with path /s/6594_0_result.pkl" in message
    assert "Run the same command again" in message
    assert lost_job_message(FailedJobError("x")) is not None
    assert lost_job_message(RuntimeError("Job 1 has not produced any output")) is None
