"""What a team lead sees: a sweep's runs in MLflow's own UI, with their dataset, read back.

The store is filled by the real command (`dochar run -m`), MLflow's client reads the dataset
inputs back, and headless Chromium opens the address dochar prints (screenshot in
test-artifacts/mlflow-runs.png).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest
from mlflow import MlflowClient

from dochar.runs.tracking import EXPERIMENT_KIND_TAG, MODEL_DEVELOPMENT, runs_view
from tests.helpers import REPO
from tests.helpers.browser import LAUNCH_ARGS, require_chromium

EXPERIMENT = "lead view"
SYSTEMS = ("random_forest", "logistic_regression")


@pytest.fixture(scope="module")
def swept(tmp_path_factory) -> tuple[Path, str]:
    """A two-run sweep on 16 synthetic certificates, logged to an embedded store."""
    folder = tmp_path_factory.mktemp("lead")
    env = {**os.environ, "MLFLOW_TRACKING_URI": "", "PYTHONPATH": str(REPO)}
    done = subprocess.run([sys.executable, "-m", "dochar.cli", "run", "-m",
                           f"model={','.join(SYSTEMS)}", "data.documents=16",
                           "split=random", "train.progress=false",
                           f"tracking.experiment={EXPERIMENT}"],
                          cwd=folder, env=env, capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-3000:]
    return folder, done.stdout


def test_runs_carry_their_dataset_and_open_as_training_runs(swept):
    folder, printed = swept
    client = MlflowClient(tracking_uri=f"sqlite:///{folder / 'mlflow.db'}")
    experiment = client.get_experiment_by_name(EXPERIMENT)
    assert experiment.tags[EXPERIMENT_KIND_TAG] == MODEL_DEVELOPMENT
    children = [r for r in client.search_runs([experiment.experiment_id])
                if r.data.tags.get("kind") != "sweep"]
    assert sorted(r.data.tags["model"] for r in children) == sorted(SYSTEMS)
    for run in children:
        inputs = run.inputs.dataset_inputs
        assert len(inputs) == 1
        dataset = inputs[0].dataset
        assert dataset.name == run.data.tags["dataset"]
        assert dataset.digest == run.data.tags["data_fingerprint"]
        counts = {tag.key: tag.value for tag in inputs[0].tags}["mlflow.data.context"]
        parts = {p.split()[0]: int(p.split()[1]) for p in counts.split("/")}
        assert parts == {part: int(run.data.metrics[f"split/{part}_documents"])
                         for part in ("train", "val", "test")}
        assert sum(parts.values()) == 16
        assert run.data.tags["version/torch"]
    assert runs_view("sqlite:///x", experiment.experiment_id) in printed


def test_the_sweep_run_encloses_its_jobs_and_each_job_its_training(swept):
    """MLflow's durations are the work's: the sweep's run spans its jobs' runs, each job's run
    spans its training (cost/train_seconds), so no run shows the few ms its logging took."""
    folder, _ = swept
    client = MlflowClient(tracking_uri=f"sqlite:///{folder / 'mlflow.db'}")
    experiment = client.get_experiment_by_name(EXPERIMENT)
    runs = client.search_runs([experiment.experiment_id])
    (parent,) = [r for r in runs if r.data.tags.get("kind") == "sweep"]
    children = [r for r in runs if r is not parent]
    assert len(children) == len(SYSTEMS)
    for child in children:
        assert child.data.tags["mlflow.parentRunId"] == parent.info.run_id
        assert parent.info.start_time <= child.info.start_time
        assert child.info.end_time <= parent.info.end_time
        duration = (child.info.end_time - child.info.start_time) / 1000
        assert duration >= child.data.metrics["cost/train_seconds"]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.browser
def test_the_printed_address_lists_the_sweep_in_the_mlflow_ui(swept):
    chromium = require_chromium()
    from playwright.sync_api import sync_playwright

    folder, printed_text = swept
    port = _free_port()
    server = subprocess.Popen([sys.executable, "-m", "mlflow", "ui", "--backend-store-uri",
                               f"sqlite:///{folder / 'mlflow.db'}", "--host", "127.0.0.1",
                               "--port", str(port), "--workers", "1"],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 180
        while True:
            try:
                urllib.request.urlopen(f"http://127.0.0.1:{port}/health", timeout=2)
                break
            except OSError:
                assert time.monotonic() < deadline, "mlflow ui did not start"
                time.sleep(1)
        client = MlflowClient(tracking_uri=f"sqlite:///{folder / 'mlflow.db'}")
        experiment_id = client.get_experiment_by_name(EXPERIMENT).experiment_id
        # the address dochar printed, on this test's port: the runs view opened on dochar's
        # saved view of the headline scores
        (printed,) = [word for word in printed_text.split() if "/runs" in word]
        address = printed.replace(runs_view("sqlite:///x", experiment_id),
                                  runs_view("sqlite:///x", experiment_id,
                                            ui=f"http://127.0.0.1:{port}"))
        assert "viewStateShareKey=" in address
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=str(chromium), args=LAUNCH_ARGS)
            try:
                page = browser.new_page(viewport={"width": 1920, "height": 900})
                page.goto(address, wait_until="load")   # the UI keeps polling: never idle
                page.wait_for_selector("text=matching runs", timeout=90_000)
                # the heading renders after the runs table on a loaded machine: wait for it
                page.locator("h2, h1", has_text="Training runs").first.wait_for(timeout=60_000)
                title = page.locator("h2, h1").all_inner_texts()
                # the saved view is applied: its name in the views menu, its score columns
                # shown without the user choosing them, rows ranked by the headline score
                page.wait_for_selector("text=dochar: headline scores", timeout=30_000)
                page.wait_for_selector(f"text={SYSTEMS[0]}/", timeout=30_000)
                score_headers = page.locator('[col-id="metrics.`macro_f1`"]').count()
                # scores come before the dataset column, not after it as MLflow's own default
                lefts = [page.locator(f'[role=columnheader][col-id="{key}"]').first
                         .bounding_box()["x"] for key in ("metrics.`macro_f1`",
                                                          "attributes.`Dataset`")]
                names = page.locator('[role=row] [col-id="attributes.`Run Name`"]'
                                     ).all_inner_texts()
                rows = " ".join(page.locator("[role=row]").all_inner_texts())
                shot = REPO / "test-artifacts" / "mlflow-runs.png"
                shot.parent.mkdir(parents=True, exist_ok=True)
                page.screenshot(path=str(shot))
            finally:
                browser.close()
    finally:
        server.terminate()
        server.wait(timeout=30)
    assert any("Training runs" in t for t in title)
    assert score_headers > 0 and lefts[0] < lefts[1]
    assert all(f"{system}/" in rows for system in SYSTEMS)
    # best first, as the store's own scores rank them; the sweep's row (no score) last
    ranked = sorted((r for r in client.search_runs([experiment_id])
                     if r.data.tags.get("kind") != "sweep"),
                    key=lambda r: -r.data.metrics["macro_f1"])
    # a name cell reads "<colour>\n<run name>" (the run's colour picker comes first)
    shown = [n.strip().splitlines()[-1] for n in names if n.strip()]
    shown = [n for n in shown if n != "Run Name"]
    assert [n.split("/")[0] for n in shown[:len(SYSTEMS)]] == [r.data.tags["model"]
                                                              for r in ranked]
    assert shown[-1].startswith("sweep ")
    fingerprint = client.search_runs([experiment_id])[0].data.tags.get("data_fingerprint")
    assert "sweep " in rows and (fingerprint is None or fingerprint in rows)
