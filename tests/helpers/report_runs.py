"""Real runs for the report tests: small scikit-learn models on FUNSD forms and on synthetic
certificates, scored with the references the tests compare against."""


from __future__ import annotations

import json
import re
import subprocess
import time
from html import unescape
from html.parser import HTMLParser
from pathlib import Path

import matplotlib.image
import numpy as np
import pandas as pd
from seqeval.metrics import f1_score as entity_f1_score
from sklearn.base import clone
from sklearn.ensemble import RandomForestClassifier
from sklearn.metrics import confusion_matrix, f1_score
from sklearn.neighbors import NearestNeighbors
from sklearn.tree import DecisionTreeClassifier

import data_synth
from dochar.data.word_table import table_fingerprint, validate_word_table
from dochar.runs.bundle import PREDICTION_COLUMNS, PROBABILITY_PREFIX, RunBundle

FUNSD_LABELS = ["header", "question", "answer", "other"]
HOSTILE = "<script>alert(1)</script> & co"


# ---------------------------------------------------------------- real runs on FUNSD forms

def read_forms(folder: Path, n_forms: int) -> pd.DataFrame:
    """The first ``n_forms`` forms of a FUNSD split as a word table (format in its README)."""
    rows = []
    for path in sorted((folder / "annotations").glob("*.json"))[:n_forms]:
        image = folder / "images" / f"{path.stem}.png"
        width, height = matplotlib.image.imread(image).shape[1::-1]
        word_id = 0
        for entity in json.loads(path.read_text())["form"]:
            for word in entity["words"]:
                x0, y0, x1, y1 = word["box"]
                rows.append(dict(doc_id=path.stem, page=1, word_id=word_id, text=word["text"],
                                 x0=x0, y0=y0, x1=x1, y1=y1, page_width=width,
                                 page_height=height, label=entity["label"],
                                 entity_id=f"{path.stem}:{entity['id']}", layout_id=""))
                word_id += 1
    report = validate_word_table(pd.DataFrame(rows), FUNSD_LABELS)
    return report.table


def word_features(table: pd.DataFrame) -> np.ndarray:
    width, height = table["page_width"], table["page_height"]
    text = table["text"].astype(str)
    return np.column_stack([
        table["x0"] / width, table["y0"] / height, table["x1"] / width, table["y1"] / height,
        (table["x1"] - table["x0"]) / width, (table["y1"] - table["y0"]) / height,
        text.str.len(), text.str.endswith(":"), text.str.isupper(),
        text.str.count(r"\d") / text.str.len().clip(lower=1),
    ]).astype(float)


def bio_tags(frame: pd.DataFrame, column: str) -> list[list[str]]:
    """BIO tags per page: true spans follow entity ids, predicted spans runs of one class."""
    sequences = []
    for _, page in frame.sort_values(["doc_id", "page", "word_id"]).groupby(["doc_id", "page"]):
        tags, previous = [], None
        for label, entity in zip(page[column], page["entity_id"]):
            group = entity if column == "label" else label
            tags.append(("I-" if group == previous else "B-") + label)
            previous = group
        sequences.append(tags)
    return sequences


def knn_edges(frame: pd.DataFrame, k: int = 2) -> pd.DataFrame:
    """Each word linked to its k nearest neighbours by box centre (relation 'near')."""
    parts = []
    for (doc_id, page), words in frame.groupby(["doc_id", "page"]):
        centres = np.column_stack([words["x0"] + words["x1"], words["y0"] + words["y1"]]) / 2
        _, index = NearestNeighbors(n_neighbors=k + 1).fit(centres).kneighbors(centres)
        ids = words["word_id"].to_numpy()
        parts.append(pd.DataFrame({"doc_id": doc_id, "page": page,
                                   "source": np.repeat(ids, k), "target": ids[index[:, 1:]].ravel(),
                                   "relation": "near"}))
    return pd.concat(parts, ignore_index=True)


def document_counts(frame: pd.DataFrame, labels: list[str]) -> np.ndarray:
    """Confusion counts per document (sklearn.metrics.confusion_matrix), shape (D, L, L)."""
    return np.stack([confusion_matrix(g["label"], g["predicted"], labels=labels)
                     for _, g in frame.groupby("doc_id")]).astype(float)


def macro_f1_of_counts(counts: np.ndarray) -> np.ndarray:
    """F1 = 2TP / (2TP + FP + FN) per class, averaged over the classes present, as
    sklearn's f1_score(average="macro") does without ``labels=``; vectorised over axis 0."""
    true_positive = np.diagonal(counts, axis1=-2, axis2=-1)
    denominator = counts.sum(axis=-1) + counts.sum(axis=-2)
    present = denominator > 0
    f1 = np.divide(2 * true_positive, denominator, out=np.zeros_like(denominator), where=present)
    return (f1 * present).sum(axis=-1) / present.sum(axis=-1)


def document_draws(n_documents: int, n_resamples: int = 200, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).integers(0, n_documents, (n_resamples, n_documents))


def document_bootstrap(frame: pd.DataFrame, labels: list[str] = FUNSD_LABELS
                       ) -> tuple[float, float]:
    """Percentile bootstrap of macro-F1 over documents (Efron & Tibshirani 1993, ch. 13)."""
    counts = document_counts(frame, labels)
    scores = macro_f1_of_counts(counts[document_draws(len(counts))].sum(axis=1))
    low, high = np.percentile(scores, [2.5, 97.5])
    return float(low), float(high)


def fit_run(name: str, model, train: pd.DataFrame, test: pd.DataFrame, tags: dict[str, str],
            curve_sizes: tuple[int, ...] = (), labels: list[str] = FUNSD_LABELS) -> RunBundle:
    start = time.perf_counter()
    model.fit(word_features(train), train["label"])
    train_seconds = time.perf_counter() - start
    start = time.perf_counter()
    probabilities = model.predict_proba(word_features(test))
    predict_seconds = time.perf_counter() - start
    classes = list(model.classes_)
    predictions = test.copy()
    predictions["predicted"] = [classes[i] for i in probabilities.argmax(axis=1)]
    predictions["confidence"] = probabilities.max(axis=1)
    for label in labels:
        predictions[PROBABILITY_PREFIX + label] = probabilities[:, classes.index(label)] \
            if label in classes else 0.0
    predictions = predictions[[*PREDICTION_COLUMNS,
                               *(PROBABILITY_PREFIX + label for label in labels)]]
    truth, predicted = predictions["label"], predictions["predicted"]
    low, high = document_bootstrap(predictions, labels)
    metrics = {"macro_f1": f1_score(truth, predicted, average="macro"),
               "macro_f1_low": low, "macro_f1_high": high,
               "entity_f1": entity_f1_score(bio_tags(predictions, "label"),
                                            bio_tags(predictions, "predicted"))}
    per_class = f1_score(truth, predicted, labels=labels, average=None, zero_division=0)
    metrics.update({f"f1/{label}": value for label, value in zip(labels, per_class)})
    for n_docs in curve_sizes:
        docs = sorted(train["doc_id"].unique())[:n_docs]
        part = train[train["doc_id"].isin(docs)]
        small = clone(model).fit(word_features(part), part["label"])
        metrics[f"curve/{n_docs}/macro_f1"] = f1_score(truth, small.predict(word_features(test)),
                                                       average="macro")
    n_pages = predictions.groupby(["doc_id", "page"]).ngroups
    estimators = getattr(model, "estimators_", [model])
    return RunBundle(
        name=name, labels=list(labels), metrics={k: float(v) for k, v in metrics.items()},
        predictions=predictions, edges=knn_edges(predictions),
        config={"model": {"kind": type(model).__name__, **model.get_params()},
                "data": {"note": "<b>bold</b> & raw"}},
        cost={"train_seconds": train_seconds, "pages_per_second": n_pages / predict_seconds,
              "parameters": float(sum(e.tree_.node_count for e in estimators))},
        tags=tags, command=f"python -m dochar train model={tags['model']} name='{name}' && echo")


def run_tags(dataset: str, protocol: str, table: pd.DataFrame) -> dict[str, str]:
    """The provenance tags a dochar run records (dochar/experiment.py, dochar/tracking.py)."""
    commit = subprocess.run(["git", "rev-parse", "HEAD"], capture_output=True, text=True,
                            cwd=Path(__file__).parent).stdout.strip() or "unknown"
    return {"dataset": dataset, "split_protocol": protocol,
            "data_fingerprint": table_fingerprint(table), "git_commit": commit}


def funsd_runs(funsd_root: Path) -> list[RunBundle]:
    train = read_forms(funsd_root / "training_data", 10)
    test = read_forms(funsd_root / "testing_data", 5)
    first = test.groupby("doc_id")["word_id"].idxmin()
    test.loc[first, "text"] = HOSTILE   # one hostile word per test page, to prove escaping
    # FUNSD's own training/testing folders: the "fixed" protocol.
    common = run_tags("funsd", "fixed", pd.concat([train, test], ignore_index=True))
    tree = {"model": "decision_tree", **common}
    forest = RandomForestClassifier(n_estimators=40, min_samples_leaf=2, random_state=0)
    return [fit_run("shallow tree", DecisionTreeClassifier(max_depth=3, random_state=0), train,
                    test, tree),
            fit_run("deep tree", DecisionTreeClassifier(max_depth=12, random_state=0), train,
                    test, tree),
            fit_run("forest & friends", forest, train, test, {"model": "random_forest", **common},
                    curve_sizes=(2, 5, 10))]


def synthetic_runs(n_runs: int) -> list[RunBundle]:
    """Trees of growing depth on generated certificates, the last two layout families held out
    of training (16 documents train, 4 test)."""
    table = data_synth.generate(n_documents=20, seed=0)
    table = validate_word_table(table, list(data_synth.LABELS), strict=True).table
    held_out = table["layout_id"].isin(data_synth.LAYOUT_IDS[-2:])
    train, test = table[~held_out], table[held_out]
    tags = {"model": "decision_tree", **run_tags("synth", "layout_held_out", table)}
    return [fit_run(f"tree depth {depth}", DecisionTreeClassifier(max_depth=depth, random_state=0),
                    train, test, tags, labels=list(data_synth.LABELS))
            for depth in range(2, 2 + 2 * n_runs, 2)]


# ---------------------------------------------------------------- reading the page back

class StartTags(HTMLParser):
    """Every start tag with its attributes (html.parser from the standard library)."""

    def __init__(self, html: str) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str]]] = []
        self.feed(html)

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, {k: v or "" for k, v in attrs}))


def table_cells(html: str, table_id: str) -> tuple[list[str], list[list[str]]]:
    """Header and body cell texts of the table with ``table_id`` (cells hold plain text and
    ``<wbr>`` line-break chances)."""
    table = re.search(rf'<table id="{table_id}">(.*?)</table>', html, flags=re.S).group(1)
    rows = [[unescape(c.replace("<wbr>", ""))
             for c in re.findall(r"<t[hd][^>]*>(.*?)</t[hd]>", row, flags=re.S)]
            for row in re.findall(r"<tr[^>]*>(.*?)</tr>", table, flags=re.S)]
    return rows[0], rows[1:]
