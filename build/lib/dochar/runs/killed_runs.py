"""Runs a killed process left RUNNING in the tracking store, found and ended as KILLED.

A SIGKILL (out of memory, a pre-empted job) stops a process between MLflow's create-run and its
end-run, so the store shows the run RUNNING for ever. Every run dochar creates carries the tag
``written_by=<host>:<pid>``. When a run or sweep starts, the RUNNING runs of the same config hash
(or sweep hash) written on this host by a process that no longer runs are ended as KILLED, with
tags saying when they were found (``killed_found_at``, ISO 8601 UTC) and by which process
(``killed_found_by``). Runs written on another host are left alone: their writer cannot be asked.
A pid taken by a process started after the run is not taken for its writer (start time from
/proc). A run stopped while logging by Ctrl-C or by a pre-emption signal whose handler exits
(submitit's re-queue) is ended KILLED by its own process, the same tags naming it.
"""

from __future__ import annotations

import datetime as dt
import os
import socket

from mlflow.tracking import MlflowClient

from dochar.data.files import writer_alive

WRITTEN_BY_TAG = "written_by"
FOUND_AT_TAG = "killed_found_at"
FOUND_BY_TAG = "killed_found_by"
SWEEP_HASH_TAG = "sweep_hash"


def writer() -> str:
    """This process as the tag names it: ``host:pid``."""
    return f"{socket.gethostname()}:{os.getpid()}"


def writer_is_dead(written_by: str | None, started: float) -> bool:
    """True only when the writer ran on this host and no process of its pid that started by
    ``started`` (the run's start, seconds since the epoch) still runs."""
    if not written_by or ":" not in written_by:
        return False
    host, pid = written_by.rsplit(":", 1)
    if host != socket.gethostname() or not pid.isdigit() or int(pid) == os.getpid():
        return False
    return not writer_alive(int(pid), started)


def end_as_killed(client: MlflowClient, run_id: str) -> None:
    """Status KILLED, with when and by which process that was found."""
    now = dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")
    client.set_tag(run_id, FOUND_AT_TAG, now)
    client.set_tag(run_id, FOUND_BY_TAG, writer())
    client.set_terminated(run_id, status="KILLED")


def end_killed_runs(client: MlflowClient, experiment: str, tag: str, value: str) -> list[str]:
    """End as KILLED the RUNNING runs of ``experiment`` with ``tags.<tag> = value`` whose writer
    is dead; return their ids. The caller holds the store's write lock."""
    found = client.get_experiment_by_name(experiment)
    if found is None:
        return []
    runs = client.search_runs([found.experiment_id],
                              filter_string=f"tags.{tag} = '{value}' and "
                                            "attributes.status = 'RUNNING'", max_results=1000)
    ended = []
    for run in runs:
        if not writer_is_dead(run.data.tags.get(WRITTEN_BY_TAG), run.info.start_time / 1000):
            continue
        end_as_killed(client, run.info.run_id)
        ended.append(run.info.run_id)
        print(f"ended run {run.info.run_id[:12]} as KILLED: left RUNNING by "
              f"{run.data.tags[WRITTEN_BY_TAG]}, which no longer runs")
    return ended
