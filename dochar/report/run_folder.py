"""A finished run's folder: the bundle, its figures, and the fitted model.

Logged to MLflow as the run's artifacts; the same folder stays in the job's output directory.
"""

from __future__ import annotations

import base64
from pathlib import Path
from typing import Any

import joblib
import torch

from dochar.metrics.words import row_normalise
from dochar.report import write_report
from dochar.report.plots import calibration_plot, confusion_panels
from dochar.report.summaries import reliability
from dochar.runs.bundle import RunBundle


def _png(data_uri: str, path: Path) -> None:
    path.write_bytes(base64.b64decode(data_uri.split(",", 1)[1]))


def write_run_files(folder: Path, bundle: RunBundle, model: Any) -> Path:
    """Figures and the model (a GNN as state dict, a baseline with joblib); the bundle itself is
    saved by the caller once tracking has given it a run id."""
    folder.mkdir(parents=True, exist_ok=True)
    confusion = bundle.tables["confusion"]
    labels = list(confusion.index)
    _png(confusion_panels([(bundle.name, labels, confusion.to_numpy(dtype=float))], counts=True),
         folder / "confusion_counts.png")
    _png(confusion_panels([(bundle.name, labels, row_normalise(confusion.to_numpy()))]),
         folder / "confusion_normalised.png")
    _png(calibration_plot([(bundle.name, reliability(bundle))]), folder / "calibration.png")
    # the run on its own page: page overlays with edges, per-layout scores, config
    write_report([bundle], folder / "run_report.html", title=f"dochar run {bundle.name}",
                 overlay_pages=len(bundle.edges[["doc_id", "page"]].drop_duplicates())
                 if bundle.edges is not None else 0)
    model_dir = folder / "model"
    model_dir.mkdir(exist_ok=True)
    if isinstance(model, torch.nn.Module):
        torch.save(model.state_dict(), model_dir / "state_dict.pt")
        (model_dir / "architecture.txt").write_text(str(model))
    else:
        joblib.dump(model, model_dir / "estimator.joblib")
    return folder
