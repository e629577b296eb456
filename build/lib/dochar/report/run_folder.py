"""A finished run's folder: the bundle, its figures, and the fitted model.

Logged to MLflow as the run's artifacts (``model/`` as an MLflow model); the same folder stays in
the job's output directory.
"""

from __future__ import annotations

import base64
from pathlib import Path

from dochar.data.files import make_folder, write_bytes_atomic
from dochar.metrics.words import row_normalise
from dochar.models.fit import FittedModel
from dochar.models.saved import save_model
from dochar.report import write_report
from dochar.report.plots import calibration_plot, confusion_panels
from dochar.report.summaries import reliability
from dochar.runs.bundle import RunBundle


def _png(data_uri: str, path: Path) -> None:
    write_bytes_atomic(path, base64.b64decode(data_uri.split(",", 1)[1]))


def write_run_files(folder: Path, bundle: RunBundle, fitted: FittedModel) -> Path:
    """Figures and the model as one loadable unit in ``model/`` (:mod:`dochar.models.saved`);
    the bundle itself is saved by the caller once tracking has given it a run id."""
    make_folder(folder)
    confusion = bundle.tables["confusion"]
    labels = list(confusion.index)
    _png(confusion_panels([(bundle.name, labels, confusion.to_numpy(dtype=float))], counts=True),
         folder / "confusion_counts.png")
    _png(confusion_panels([(bundle.name, labels, row_normalise(confusion.to_numpy()))]),
         folder / "confusion_normalised.png")
    _png(calibration_plot([(bundle.name, reliability(bundle))]), folder / "calibration.png")
    # the run on its own page: the pages it kept drawn over their pictures, with edges, per-layout scores, config
    write_report([bundle], folder / "run_report.html", title=f"dochar run {bundle.name}",
                 overlay_pages=int(bundle.config.get("overlay_pages", 3)))
    save_model(folder / "model", fitted, bundle.config, name=bundle.name, labels=bundle.labels)
    return folder
