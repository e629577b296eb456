"""Numbers the report shows that are not already in a run's metrics, computed from predictions.

Macro-F1 here averages over the classes present in the truth or the predictions of the words
scored (scikit-learn's ``f1_score(average="macro")`` without ``labels=``), the same convention as
the run metrics, so a layout that lacks a class is not penalised for it.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn.metrics import confusion_matrix

from dochar.errors import DocharError
from dochar.metrics.calibration import expected_calibration_error, reliability_curve
from dochar.metrics.words import per_group_scores
from dochar.runs.bundle import PREDICTION_COLUMNS, RunBundle
from dochar.splits.protocols import LAYOUT_PROTOCOLS

# protocols under which no test family has training documents
HELD_OUT_PROTOCOLS = LAYOUT_PROTOCOLS - {"seen_and_unseen_layouts"}

NEEDED_COLUMNS: tuple[str, ...] = ("doc_id", "page", "word_id", "text", "x0", "y0", "x1", "y1",
                                   "page_width", "page_height", "label", "predicted",
                                   "confidence")


class ReportInputError(DocharError):
    """A run that cannot be reported as given (names the run and what is wrong)."""


def _first_bad(bundle: RunBundle, column: str, bad: np.ndarray, rule: str) -> None:
    rows = np.flatnonzero(bad)
    if len(rows):
        raise ReportInputError(f"run '{bundle.name}': column '{column}' must be {rule}; "
                               f"{len(rows)} prediction row(s) are not (first row {rows[0]})")


def check_bundle(bundle: RunBundle) -> None:
    """Refuse, up front and by name, a run whose predictions the report cannot draw."""
    missing = [c for c in NEEDED_COLUMNS if c not in bundle.predictions.columns]
    if missing:
        raise ReportInputError(f"run '{bundle.name}': predictions lack column(s) {missing}; "
                               f"expected {list(PREDICTION_COLUMNS)}")
    if bundle.predictions.empty:
        raise ReportInputError(f"run '{bundle.name}': predictions are empty")
    for column in ("x0", "y0", "x1", "y1", "confidence"):
        values = pd.to_numeric(bundle.predictions[column], errors="coerce").to_numpy(dtype=float)
        _first_bad(bundle, column, ~np.isfinite(values), "a finite number")
    confidence = bundle.predictions["confidence"].to_numpy(dtype=float)
    _first_bad(bundle, "confidence", (confidence < 0) | (confidence > 1), "within [0, 1]")


def display_names(bundles: Sequence[RunBundle]) -> list[str]:
    """Run names made unique (a repeated name gets its run id or position appended)."""
    seen: dict[str, int] = {}
    for b in bundles:
        seen[b.name] = seen.get(b.name, 0) + 1
    names = []
    for position, b in enumerate(bundles, start=1):
        if seen[b.name] == 1:
            names.append(b.name)
        else:
            names.append(f"{b.name} ({b.run_id[:8] if b.run_id else f'#{position}'})")
    return names


# What a reader calls each system (tag ``model``: a GNN layer or an estimator); the exact run
# name stays beside it wherever the page names a run.
SYSTEM_WORDS = {"relational": "R-GCN", "attention": "GATv2", "gcn": "GCN",
                "max": "GraphSAGE (max)", "none": "no-graph network",
                "random_forest": "random forest", "gradient_boosting": "gradient boosting",
                "logistic_regression": "logistic regression", "decision_tree": "decision tree",
                "layout_template": "per-layout templates"}
# What a run's recorded size (cost ``parameters``) counts, by estimator, else by model kind.
SIZE_UNITS = {"gnn": "network weights", "random_forest": "tree nodes",
              "gradient_boosting": "tree nodes", "decision_tree": "tree nodes",
              "logistic_regression": "coefficients", "layout_template": "template words",
              "template": "template words"}
OTHER_SIZE = "as recorded"


def system_words(bundle: RunBundle) -> str:
    """'R-GCN' for a run of the relational layer; the tag itself when the system is unknown."""
    model = bundle.tags.get("model", "")
    return SYSTEM_WORDS.get(model, model.replace("_", " ") or bundle.name)


def described(bundle: RunBundle, name: str) -> str:
    """'R-GCN (relational/sector/all)': the system in words beside the run's exact name."""
    system = system_words(bundle)
    return name if system in (name, "") else f"{system} ({name})"


def size_unit(bundle: RunBundle) -> str:
    """What the run's size counts: network weights, tree nodes, template words, ..."""
    return SIZE_UNITS.get(bundle.tags.get("model", ""),
                          SIZE_UNITS.get(bundle.tags.get("model_kind", ""), OTHER_SIZE))


def document_sides(bundle: RunBundle) -> pd.DataFrame:
    """One row per test document: its layout family and side (``seen``: the family has
    training documents, ``unseen``: held out whole, ``""``: not known).

    The side is the run's own record (prediction column ``layout_side``); a run without it
    under a protocol that holds every test family out is all unseen.
    """
    frame = bundle.predictions
    layouts = (frame["layout_id"] if "layout_id" in frame else pd.Series("", index=frame.index))
    layouts = layouts.fillna("").astype(str).str.strip()
    if "layout_side" in frame:
        sides = frame["layout_side"].fillna("").astype(str)
    elif bundle.tags.get("split_protocol") in HELD_OUT_PROTOCOLS:
        sides = pd.Series("unseen", index=frame.index).where(layouts != "", "")
    else:
        sides = pd.Series("", index=frame.index)
    docs = pd.DataFrame({"doc_id": frame["doc_id"].astype(str), "layout_id": layouts,
                         "side": sides})
    return docs.groupby("doc_id", sort=True).first()


SCORE_WORDS = {"macro_f1": "word macro-F1", "micro_f1": "word micro-F1",
               "entity_f1": "entity F1"}


def score_words(key: str) -> str:
    """A metric key as the page says it: 'macro_f1' -> 'word macro-F1'."""
    return SCORE_WORDS.get(key, key.replace("/", " ").replace("_", " "))


def metric(bundle: RunBundle, key: str) -> float | None:
    value = bundle.metrics.get(key)
    if value is None or not math.isfinite(float(value)):
        return None
    return float(value)


def ranking(bundles: Sequence[RunBundle], score: str) -> list[int]:
    """Indices best first; runs without the score go last, ties keep input order."""
    def key(i: int) -> tuple[int, float, int]:
        value = metric(bundles[i], score)
        return (1, 0.0, i) if value is None else (0, -value, i)

    return sorted(range(len(bundles)), key=key)


def class_order(bundles: Sequence[RunBundle]) -> list[str]:
    """Union of the runs' label sets, in order of first appearance."""
    order: list[str] = []
    for b in bundles:
        order.extend(label for label in b.labels if label not in order)
    return order


def truth_and_prediction(bundle: RunBundle) -> tuple[np.ndarray, np.ndarray]:
    frame = bundle.predictions
    return frame["label"].astype(str).to_numpy(), frame["predicted"].astype(str).to_numpy()


def confusion_rows(bundle: RunBundle) -> tuple[list[str], np.ndarray]:
    """Row-normalised confusion (rows true, columns predicted); rows without support are NaN.

    Labels seen in the predictions but missing from ``bundle.labels`` are appended, not dropped.
    """
    truth, predicted = truth_and_prediction(bundle)
    labels = list(bundle.labels)
    labels += sorted(set(truth) - set(labels)) + sorted(set(predicted) - set(truth) - set(labels))
    logged = bundle.tables.get("confusion")
    if logged is not None and list(logged.index) == labels == list(logged.columns):
        counts = logged.to_numpy(dtype=float)   # the run's own table, as scored
    else:   # a bundle without one, or with labels its table does not list
        counts = confusion_matrix(truth, predicted, labels=labels).astype(float)
    totals = counts.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        return labels, np.where(totals > 0, counts / totals, np.nan)


def has_layouts(bundle: RunBundle) -> bool:
    if "layout_id" not in bundle.predictions.columns:
        return False
    values = bundle.predictions["layout_id"].fillna("").astype(str).str.strip()
    return bool((values != "").any())


def layout_scores(bundles: Sequence[RunBundle], names: Sequence[str]) -> pd.DataFrame:
    """Macro-F1 per layout (rows) and run (columns), plus the test word count of each layout.

    Words without a layout id are grouped under "(none)" rather than left out.
    """
    columns: dict[str, pd.Series] = {}
    words: pd.Series | None = None
    for bundle, name in zip(bundles, names):
        frame = bundle.predictions
        layout = frame["layout_id"].fillna("").astype(str).str.strip().replace("", "(none)")
        per_layout = per_group_scores(frame.assign(layout_id=layout), bundle.labels)
        columns[name] = per_layout["macro_f1"].astype(float)
        if words is None:
            words = layout.value_counts()
    result = pd.DataFrame(columns)
    result.insert(0, "words", words.reindex(result.index).fillna(0).astype(int))
    result.index.name = "layout"
    return result.sort_index()


@dataclass(frozen=True)
class Reliability:
    """Equal-width confidence bins: mean confidence, accuracy and word count of each bin."""

    confidence: np.ndarray
    accuracy: np.ndarray
    counts: np.ndarray
    expected_calibration_error: float   # Guo et al., ICML 2017, eq. 3, on the same bins


CALIBRATION_BINS = 15   # runs that do not record evaluation.calibration_bins


def calibration_bins(bundle: RunBundle) -> int:
    """The bins the run's logged ECE used, so the report's curve and figure agree with it."""
    return int((bundle.config.get("evaluation") or {}).get("calibration_bins", CALIBRATION_BINS))


def reliability(bundle: RunBundle) -> Reliability:
    """Reliability curve of the top-class confidence (checked by check_bundle) on the run's own
    calibration bins; empty bins are left out."""
    bins = calibration_bins(bundle)
    truth, predicted = truth_and_prediction(bundle)
    confidence = bundle.predictions["confidence"].to_numpy(dtype=float)
    curve = reliability_curve(confidence, truth == predicted, n_bins=bins)
    used = curve[curve["count"] > 0]
    return Reliability(used["mean_confidence"].to_numpy(), used["accuracy"].to_numpy(),
                       used["count"].to_numpy(),
                       expected_calibration_error(confidence, truth == predicted, n_bins=bins))


def learning_curve(bundle: RunBundle, score: str) -> list[tuple[float, float]]:
    """Points (training documents, score) from metric keys ``curve/<n_docs>/<score>``."""
    pattern = re.compile(rf"curve/(\d+(?:\.\d+)?)/{re.escape(score)}")
    points = []
    for key, value in bundle.metrics.items():
        match = pattern.fullmatch(key)
        if match and math.isfinite(float(value)):
            points.append((float(match.group(1)), float(value)))
    return sorted(points)
