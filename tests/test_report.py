"""The HTML report, built from real runs: scikit-learn trees trained on FUNSD word boxes.

The runs are genuine (FUNSD forms, Jaume et al., ICDAR-OST 2019; models fitted here), so every
number the report shows can be recomputed independently with scikit-learn and compared.
"""

from __future__ import annotations

import base64
import io
import json
import re
import time
from html import unescape
from html.parser import HTMLParser
from pathlib import Path

import data_synth
import matplotlib.image
import numpy as np
import pandas as pd
import pytest
from seqeval.metrics import f1_score as entity_f1_score
from sklearn.base import clone
from sklearn.calibration import calibration_curve
from sklearn.ensemble import RandomForestClassifier
from sklearn.metrics import confusion_matrix, f1_score
from sklearn.neighbors import NearestNeighbors
from sklearn.tree import DecisionTreeClassifier

from dochar.document import validate_word_table
from dochar.report import ReportInputError, write_report
from dochar.report.sources import load_bundles_from_mlflow
from dochar.report.summaries import confusion_rows, display_names, reliability
from dochar.results import PREDICTION_COLUMNS, PROBABILITY_PREFIX, RunBundle

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


def funsd_runs(funsd_root: Path) -> list[RunBundle]:
    train = read_forms(funsd_root / "training_data", 10)
    test = read_forms(funsd_root / "testing_data", 5)
    first = test.groupby("doc_id")["word_id"].idxmin()
    test.loc[first, "text"] = HOSTILE   # one hostile word per test page, to prove escaping
    tree = {"model": "decision_tree"}
    forest = RandomForestClassifier(n_estimators=40, min_samples_leaf=2, random_state=0)
    return [fit_run("shallow tree", DecisionTreeClassifier(max_depth=3, random_state=0), train,
                    test, tree),
            fit_run("deep tree", DecisionTreeClassifier(max_depth=12, random_state=0), train,
                    test, tree),
            fit_run("forest & friends", forest, train, test, {"model": "random_forest"},
                    curve_sizes=(2, 5, 10))]


def synthetic_runs(n_runs: int) -> list[RunBundle]:
    """Trees of growing depth on generated certificates (8 documents train, 4 test)."""
    table = data_synth.generate(n_documents=12, seed=0)
    table = validate_word_table(table, list(data_synth.LABELS), strict=True).table
    docs = sorted(table["doc_id"].unique())
    train, test = table[table["doc_id"].isin(docs[:8])], table[table["doc_id"].isin(docs[8:])]
    return [fit_run(f"tree depth {depth}", DecisionTreeClassifier(max_depth=depth, random_state=0),
                    train, test, {"model": "decision_tree"}, labels=list(data_synth.LABELS))
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
    """Header and body cell texts of the table with ``table_id`` (cells hold plain text)."""
    table = re.search(rf'<table id="{table_id}">(.*?)</table>', html, flags=re.S).group(1)
    rows = [[unescape(c) for c in re.findall(r"<t[hd][^>]*>(.*?)</t[hd]>", row, flags=re.S)]
            for row in re.findall(r"<tr[^>]*>(.*?)</tr>", table, flags=re.S)]
    return rows[0], rows[1:]


@pytest.fixture(scope="module")
def runs(funsd_root) -> list[RunBundle]:
    return funsd_runs(funsd_root)


@pytest.fixture(scope="module")
def report(runs, tmp_path_factory) -> str:
    path = write_report(runs, tmp_path_factory.mktemp("report") / "report.html",
                        title="FUNSD trees & <forests>")
    return path.read_text(encoding="utf-8")


# ---------------------------------------------------------------- the checks

def test_leaderboard_is_first_and_ranked_by_recomputed_score(runs, report):
    # Each run's macro-F1 recomputed with sklearn.metrics.f1_score(average="macro").
    recomputed = {r.name: f1_score(r.predictions["label"], r.predictions["predicted"],
                                   average="macro") for r in runs}
    header, rows = table_cells(report, "leaderboard-table")
    assert [row[1] for row in rows] == sorted(recomputed, key=recomputed.get, reverse=True)
    score_col = header.index("macro_f1")
    assert [row[score_col] for row in rows] == [f"{recomputed[row[1]]:.3f}" for row in rows]
    by_name = {r.name: r for r in runs}
    for row in rows:
        metrics = by_name[row[1]].metrics
        low, high = metrics["macro_f1_low"], metrics["macro_f1_high"]
        assert row[score_col + 1] == f"[{low:.3f}, {high:.3f}]"
        assert row[header.index("entity F1")] == f"{metrics['entity_f1']:.3f}"
    sections = re.findall(r'<section id="([^"]+)"', report)
    assert sections == ["leaderboard", "per-class", "confusion", "per-layout", "calibration",
                        "learning-curves", "pages", "runs"]
    # FUNSD has no layout families: the section says so instead of showing an empty table.
    layouts = re.search(r'<section id="per-layout">.*?</section>', report, flags=re.S).group(0)
    assert "no layout ids" in layouts and "<table" not in layouts


def test_images_are_embedded_png(report):
    sources = [a["src"] for tag, a in StartTags(report).tags if tag == "img"]
    assert len(sources) == 4   # per-class, confusion, calibration, learning curves
    for source in sources:
        assert source.startswith("data:image/png;base64,")
        picture = matplotlib.image.imread(io.BytesIO(base64.b64decode(source.split(",", 1)[1])),
                                          format="png")
        assert picture.shape[0] > 50 and picture.shape[1] > 50


def test_nothing_is_fetched_from_outside(report):
    elements = StartTags(report).tags
    assert not [tag for tag, _ in elements if tag in ("script", "link", "iframe", "object")]
    for _, attributes in elements:
        for name in ("src", "href", "srcset", "action", "poster", "data"):
            value = attributes.get(name, "").strip().lower()
            assert not value.startswith(("http:", "https:", "//", "ftp:")), (name, value)
    assert not re.search(r"url\(\s*['\"]?(https?:)?//", report)
    assert "@import" not in report


def test_document_text_and_config_are_escaped(runs, report):
    assert "<script>" not in report
    assert "&lt;script&gt;alert(1)&lt;/script&gt; &amp; co" in report   # word text
    assert "&lt;b&gt;bold&lt;/b&gt; &amp; raw" in report    # config value
    assert "forest &amp; friends" in report                 # run name
    assert "<title>FUNSD trees &amp; &lt;forests&gt;</title>" in report
    assert "<b>" not in report


def test_overlays_have_one_box_per_word_on_the_most_wrong_pages(runs, report):
    best = max(runs, key=lambda r: r.metrics["macro_f1"])
    frame = best.predictions
    wrong = (frame["label"] != frame["predicted"]).groupby([frame["doc_id"], frame["page"]]).sum()
    # Brute-force order: most wrong words first, then document id, then page.
    expected = sorted(wrong.items(), key=lambda item: (-item[1], item[0][0], item[0][1]))[:3]
    blocks = re.findall(r'<div class="overlay" data-doc="([^"]*)" data-page="(\d+)">'
                        r"(<svg.*?</svg>)", report, flags=re.S)
    assert [(doc, int(page)) for doc, page, _ in blocks] == [key for key, _ in expected]
    for (doc, page, svg), (_, n_wrong) in zip(blocks, expected):
        words = frame[(frame["doc_id"] == doc) & (frame["page"] == int(page))]
        boxes = re.findall(r'<rect class="w c\d+( err)?"', svg)
        assert len(boxes) == len(words)
        assert sum(1 for b in boxes if b) == n_wrong
        assert svg.count("<title>") == len(words)
        assert "<path class=\"edge\"" in svg


def test_paired_column_shows_what_the_given_comparison_returns(runs, tmp_path):
    results = {}

    def paired(frame_a, frame_b):
        # Paired bootstrap over documents (Koehn 2004): the same draws for both systems; the
        # two-sided p-value from the null-shifted differences (Berg-Kirkpatrick et al. 2012).
        counts_a, counts_b = (document_counts(f, FUNSD_LABELS) for f in (frame_a, frame_b))
        draws = document_draws(len(counts_a))
        observed = macro_f1_of_counts(counts_a.sum(0)) - macro_f1_of_counts(counts_b.sum(0))
        deltas = (macro_f1_of_counts(counts_a[draws].sum(1))
                  - macro_f1_of_counts(counts_b[draws].sum(1)))
        low, high = np.percentile(deltas, [2.5, 97.5])
        p = (1 + np.sum(np.abs(deltas - observed) >= abs(observed))) / (1 + len(deltas))
        result = type("Paired", (), dict(difference=observed, low=low, high=high, p_value=p))
        results[id(frame_a)] = result
        return result

    html = write_report(runs, tmp_path / "r.html", reference="deep tree",
                        paired=paired).read_text()
    header, rows = table_cells(html, "leaderboard-table")
    column = header.index("vs reference")
    reference = next(r for r in runs if r.name == "deep tree")
    for row in rows:
        run = next(r for r in runs if r.name == row[1])
        if run is reference:
            assert row[column:column + 3] == ["reference", "", ""]
            continue
        result = results[id(run.predictions)]
        assert np.isclose(result.difference,
                          run.metrics["macro_f1"] - reference.metrics["macro_f1"])
        assert row[column:column + 3] == [f"{result.difference:+.3f}",
                                          f"[{result.low:.3f}, {result.high:.3f}]",
                                          "< 0.001" if result.p_value < 0.0005
                                          else f"{result.p_value:.3f}"]
    assert len(results) == len(runs) - 1


def test_default_reference_is_the_random_forest_with_the_project_comparison(runs, report,
                                                                           tmp_path):
    # The project's paired bootstrap scores word macro-F1 over present classes, the same
    # number as sklearn's f1_score(average="macro"); its difference must match.
    header, rows = table_cells(report, "leaderboard-table")
    column = header.index("vs reference")
    forest = next(r for r in runs if r.tags["model"] == "random_forest").metrics["macro_f1"]
    for row in rows:
        run = next(r for r in runs if r.name == row[1])
        expected = "reference" if run.tags["model"] == "random_forest" else \
            f"{run.metrics['macro_f1'] - forest:+.3f}"
        assert row[column] == expected
    # A run tested on fewer documents cannot be paired: the cell says so and a note says why.
    frame = runs[0].predictions
    partial = RunBundle(name="partial", labels=FUNSD_LABELS, metrics={"macro_f1": 0.0},
                        predictions=frame[frame["doc_id"] != frame["doc_id"].iloc[0]])
    html = write_report([*runs, partial], tmp_path / "partial.html").read_text()
    header, rows = table_cells(html, "leaderboard-table")
    assert rows[-1][1] == "partial" and rows[-1][column] == "n/a"
    assert "No paired difference for partial: " in html


def test_confusion_rows_match_scikit_learn(runs):
    run = runs[0]
    labels, matrix = confusion_rows(run)
    reference = confusion_matrix(run.predictions["label"], run.predictions["predicted"],
                                 labels=labels, normalize="true")
    present = ~np.isnan(matrix).all(axis=1)
    np.testing.assert_allclose(matrix[present], reference[present])


def test_reliability_matches_scikit_learn_calibration_curve(runs):
    for run in runs:
        curve = reliability(run)
        correct = (run.predictions["label"] == run.predictions["predicted"]).astype(int)
        # sklearn.calibration.calibration_curve, strategy="uniform", 10 bins.
        accuracy, confidence = calibration_curve(correct, run.predictions["confidence"],
                                                 n_bins=10, strategy="uniform")
        np.testing.assert_allclose(curve.accuracy, accuracy)
        np.testing.assert_allclose(curve.confidence, confidence)
        assert curve.counts.sum() == len(run.predictions)
        # ECE = sum_b n_b/N |acc_b - conf_b| (Guo et al., ICML 2017, eq. 3).
        weights = curve.counts / len(run.predictions)
        assert np.isclose(curve.expected_calibration_error,
                          np.sum(weights * np.abs(accuracy - confidence)))


def test_per_layout_scores_match_scikit_learn_on_generated_certificates(tmp_path):
    runs = synthetic_runs(5)
    path = write_report(runs, tmp_path / "synthetic.html", overlay_pages=1)
    html = path.read_text(encoding="utf-8")
    header, body = table_cells(html, "layout-table")
    frame = runs[0].predictions
    assert [row[0] for row in body] == sorted(frame["layout_id"].unique())
    for row in body:
        for run in runs:
            words = run.predictions[run.predictions["layout_id"] == row[0]]
            # sklearn.metrics.f1_score(average="macro") over the classes present in the layout.
            expected = f1_score(words["label"], words["predicted"], average="macro")
            assert row[header.index(run.name)] == f"{expected:.3f}"
        assert row[1] == f"{(frame['layout_id'] == row[0]).sum():,}"
    # Five runs with fourteen classes stay well inside a mail attachment (common practice).
    assert path.stat().st_size < 3_000_000
    assert "learning-curves" not in html   # no curve/<n>/macro_f1 metrics in these runs
    assert html.count('<div class="overlay"') == 1
    assert ">vs reference<" not in html and "no reference run was named" in html


def test_report_stays_small_and_is_deterministic(runs, report, tmp_path):
    again = write_report(runs, tmp_path / "again.html", title="FUNSD trees & <forests>")
    assert again.read_text(encoding="utf-8") == report
    assert again.stat().st_size < 3_000_000


def test_repeated_run_names_are_told_apart(runs):
    first, second, third = (RunBundle(name="rerun", labels=FUNSD_LABELS, metrics={},
                                      predictions=runs[0].predictions, run_id=run_id)
                            for run_id in ("0123456789abcdef", "fedcba9876543210", None))
    assert display_names([first, second, third, runs[0]]) == [
        "rerun (01234567)", "rerun (fedcba98)", "rerun (#3)", runs[0].name]


def test_bad_input_is_refused_with_the_run_named(runs, tmp_path):
    broken = RunBundle(name="no confidence", labels=FUNSD_LABELS, metrics={"macro_f1": 0.5},
                       predictions=runs[0].predictions.drop(columns="confidence"))
    with pytest.raises(ReportInputError, match="no confidence.*confidence"):
        write_report([runs[0], broken], tmp_path / "x.html")
    overconfident = RunBundle(name="overconfident", labels=FUNSD_LABELS, metrics={"macro_f1": 0.5},
                              predictions=runs[0].predictions.assign(confidence=1.5))
    with pytest.raises(ReportInputError, match=r"overconfident.*confidence.*\[0, 1\].*row 0"):
        write_report([overconfident], tmp_path / "x.html")
    with pytest.raises(ReportInputError, match="reference run 'nobody'"):
        write_report(runs, tmp_path / "x.html", reference="nobody")
    with pytest.raises(ReportInputError, match="no run has the score 'weighted_f9'"):
        write_report(runs, tmp_path / "x.html", score="weighted_f9")
    with pytest.raises(ReportInputError, match="no runs"):
        write_report([], tmp_path / "x.html")


@pytest.mark.slow   # creating an MLflow SQLite store runs its schema migrations (seconds)
def test_runs_come_back_from_a_local_mlflow_store(runs, tmp_path):
    import mlflow

    uri = f"sqlite:///{tmp_path}/mlflow.db"
    previous = mlflow.get_tracking_uri()
    mlflow.set_tracking_uri(uri)
    try:
        experiment = mlflow.create_experiment(
            "report runs", artifact_location=(tmp_path / "artifacts").as_uri())
        logged: dict[str, Path] = {}
        for run in runs[:2]:
            folder = run.save(tmp_path / "folders" / run.name)
            with mlflow.start_run(experiment_id=experiment) as active:
                mlflow.log_artifacts(str(folder))
            logged[active.info.run_id] = folder
        with mlflow.start_run(experiment_id=experiment):   # a run without a run folder
            mlflow.log_param("unrelated", 1)
        failed = mlflow.start_run(experiment_id=experiment)
        mlflow.log_artifacts(str(runs[2].save(tmp_path / "folders" / "failed")))
        mlflow.end_run(status="FAILED")
    finally:
        mlflow.set_tracking_uri(previous)

    loaded = load_bundles_from_mlflow(uri, "report runs")
    assert [b.run_id for b in loaded] == list(logged)
    for bundle in loaded:
        on_disk = RunBundle.load(logged[bundle.run_id])
        assert bundle.name == on_disk.name and bundle.metrics == on_disk.metrics
        pd.testing.assert_frame_equal(bundle.predictions, on_disk.predictions)
        pd.testing.assert_frame_equal(bundle.edges, on_disk.edges)
        assert bundle.config == on_disk.config and bundle.command == on_disk.command
    second = list(logged)[1]
    assert [b.run_id for b in load_bundles_from_mlflow(uri, "report runs", [second])] == [second]
    with pytest.raises(ReportInputError, match="status FAILED"):
        load_bundles_from_mlflow(uri, "report runs", [failed.info.run_id])
    with pytest.raises(ReportInputError, match="no experiment named 'elsewhere'"):
        load_bundles_from_mlflow(uri, "elsewhere")
