"""Per-epoch training curves: logged with step=epoch, read back through MLflow's client, and
drawn in the report with the kept epoch marked."""

from __future__ import annotations

from mlflow import MlflowClient

from dochar.experiment import run_experiment
from dochar.report import write_report
from dochar.runs.tracking import log_run
from tests.helpers import CONFIGS


def _config(*overrides: str):
    from hydra import compose, initialize_config_dir

    with initialize_config_dir(str(CONFIGS), version_base="1.3"):
        return compose("config", overrides=[
            "data.documents=16", "split=random", "model.hidden_dim=16", "train.max_epochs=6",
            "train.patience=6", "train.progress=false", "evaluation.bootstrap_resamples=50",
            "train.checkpoint_dir=null", *overrides])


def test_epoch_curves_reach_mlflow_and_the_report(tmp_path):
    bundle, _ = run_experiment(_config())
    uri = f"sqlite:///{tmp_path / 'm.db'}"
    run_id = log_run(bundle, tmp_path / "run", uri=uri, experiment="curves")
    client = MlflowClient(tracking_uri=uri)
    loss = sorted(client.get_metric_history(run_id, "train/loss"), key=lambda m: m.step)
    score = sorted(client.get_metric_history(run_id, "val/macro_f1"), key=lambda m: m.step)
    rate = client.get_metric_history(run_id, "train/learning_rate")
    epochs = int(bundle.cost["epochs_run"])
    assert [m.step for m in loss] == list(range(1, epochs + 1)) == [m.step for m in score]
    assert {m.value for m in rate} == {0.003}           # configs/train/standard.yaml, no schedule
    assert all(m.value > 0 for m in loss)
    # early stopping keeps the first epoch with the best validation score, read from the store
    values = [m.value for m in score]
    kept = values.index(max(values)) + 1
    assert client.get_run(run_id).data.metrics["cost/best_epoch"] == kept
    curve = bundle.tables["training_curve"]
    assert list(curve.index[curve["kept"]]) == [kept]
    html = write_report([bundle], tmp_path / "r.html", overlay_pages=0).read_text()
    start = html.index('id="training"')
    assert "How the top runs trained, epoch by epoch" in html[start:start + 400]
    assert "data:image/png;base64," in html[start:]
