"""The HTML report, built from real runs: scikit-learn trees trained on FUNSD word boxes.

The runs are genuine (FUNSD forms, Jaume et al., ICDAR-OST 2019; models fitted here), so every
number the report shows can be recomputed independently with scikit-learn and compared.
"""

from __future__ import annotations

import base64
import datetime as dt
import io
import re
from html import unescape
from importlib import metadata
from pathlib import Path

import matplotlib.image
import numpy as np
import pandas as pd
import pytest
from sklearn.calibration import calibration_curve
from sklearn.metrics import confusion_matrix, f1_score

from dochar.report import ReportInputError, write_report
from dochar.runs.store import RunLookupError, RunStore
from dochar.report.summaries import confusion_rows, display_names, reliability
from dochar.runs.bundle import RunBundle
from tests.helpers.report_runs import (FUNSD_LABELS, StartTags, document_counts, document_draws,
                         funsd_runs, macro_f1_of_counts, synthetic_runs, table_cells)
from tests.helpers.report_verdict import check_verdict, facts_of


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
    score_col = header.index("word macro-F1")
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
    # Headings in words, never metric keys (issue 9): no underscores, the score spelled out.
    headings = [unescape(h) for h in re.findall(r"<h2>(.*?)</h2>", report)]
    assert headings[0] == "Runs ranked by word macro-F1"
    assert not [h for h in headings if "_" in h]
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
    # The verdict carries the same numbers, here from the test's own bootstrap: the best run
    # other than the reference is the forest (sklearn scores), and it is the one described.
    forest = next(r for r in runs if r.name == "forest & friends")
    mine = results[id(forest.predictions)]
    said = check_verdict(html, runs, reference="deep tree", measure="macro_f1")
    assert said.challenger == "forest & friends"
    assert np.isclose(said.difference, mine.difference, atol=5e-4)
    assert np.allclose([said.low, said.high], [mine.low, mine.high], atol=5e-4)


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


def test_the_reference_model_is_a_setting(runs, tmp_path):
    # --reference-model names the system every run is compared with: here the decision trees,
    # so the forest's cell is its own difference from the first tree run (worked from metrics)
    html = write_report(runs, tmp_path / "trees.html", reference_model="decision_tree").read_text()
    header, rows = table_cells(html, "leaderboard-table")
    column = header.index("vs reference")
    tree = next(r for r in runs if r.tags["model"] == "decision_tree")
    cells = {row[1]: row[column] for row in rows}
    assert cells[tree.name] == "reference"
    forest = next(r for r in runs if r.tags["model"] == "random_forest")
    assert cells[forest.name] == f"{forest.metrics['macro_f1'] - tree.metrics['macro_f1']:+.3f}"


def test_verdict_opens_the_page_and_agrees_with_the_leaderboard(runs, report):
    # Default report: the forest is the reference and ranks first, so the verdict compares
    # the runner-up with it; the project's paired bootstrap supplies interval and p-value.
    assert report.index('id="verdict"') < report.index('<section id="leaderboard"')
    said = check_verdict(report, runs, reference="forest & friends", measure="macro_f1")
    assert said.challenger == "deep tree" and said.form == "reference beats"
    assert said.documents == runs[0].predictions["doc_id"].nunique() and said.families is None
    # FUNSD forms carry no layout id (dataset README): the sentence must not call them seen
    # or unseen, and says why.
    assert said.scope == " (no layout families recorded, so seen and unseen layouts cannot " \
                         "be told apart)"


def test_verdict_of_a_run_beating_the_reference(runs, tmp_path):
    html = write_report(runs, tmp_path / "v.html", reference="shallow tree").read_text()
    said = check_verdict(html, runs, reference="shallow tree", measure="macro_f1")
    assert said.challenger == "forest & friends"


def test_verdict_says_plainly_when_there_is_no_clear_difference(runs, tmp_path):
    # The same predictions under another name: difference 0, interval [0, 0] covers 0.
    forest = next(r for r in runs if r.name == "forest & friends")
    again = RunBundle(name="forest again", labels=forest.labels, metrics=dict(forest.metrics),
                      predictions=forest.predictions, tags={"model": "forest_copy"})
    html = write_report([forest, again], tmp_path / "tie.html").read_text()
    said = check_verdict(html, [forest, again], reference="forest & friends",
                         measure="macro_f1")
    assert said.form == "no clear difference" and said.challenger == "forest again"


def test_verdict_names_the_layout_families_held_out(tmp_path):
    runs = synthetic_runs(3)
    html = write_report(runs, tmp_path / "synthetic.html", overlay_pages=0,
                        reference="tree depth 2").read_text()
    said = check_verdict(html, runs, reference="tree depth 2", measure="macro_f1")
    test = runs[0].predictions
    assert said.documents == test["doc_id"].nunique() == 4
    assert said.families == test["layout_id"].nunique() == 2
    assert said.scope == ", all unseen in training"   # every test family held out


def test_facts_under_the_verdict_come_from_the_runs_or_the_installed_libraries(runs, tmp_path):
    facts = facts_of(write_report(runs, tmp_path / "f.html",
                                  written=dt.date(2026, 12, 1)).read_text())
    tags = runs[0].tags
    assert facts["written"] == "2026-12-01"
    assert facts["data"] == f"funsd, fingerprint {tags['data_fingerprint']}"
    assert facts["split protocol"] == "fixed"
    assert facts["commit"] == tags["git_commit"][:12]
    # No run records versions: the installed ones, read from each package's own __version__.
    import mlflow
    import numpy
    import pandas
    import sklearn
    import torch
    import torch_geometric

    import dochar
    installed = {"dochar": dochar.__version__, "torch": torch.__version__,
                 "torch-geometric": torch_geometric.__version__,
                 "scikit-learn": sklearn.__version__, "numpy": numpy.__version__,
                 "pandas": pandas.__version__, "mlflow": mlflow.__version__}
    assert facts["libraries"] == (", ".join(f"{k} {v}" for k, v in installed.items())
                                  + " (installed where this report was written)")
    # Runs that record their versions are believed; runs that disagree are shown as such.
    recorded = [RunBundle(name=r.name, labels=r.labels, metrics=r.metrics,
                          predictions=r.predictions,
                          tags={**r.tags, "version/numpy": "1.26.4" if i else "2.0.0",
                                "data_fingerprint": "abc" if i else "xyz"})
                for i, r in enumerate(runs)]
    facts = facts_of(write_report(recorded, tmp_path / "g.html").read_text())
    assert "numpy differs between runs: 1.26.4 (2 runs), 2.0.0 (1 run)" in facts["libraries"]
    assert f"torch {metadata.version('torch')}" in facts["libraries"]
    assert facts["libraries"].endswith(
        "(installed where this report was written / recorded by the runs)")
    assert facts["data"] == "funsd, fingerprint differs between runs: abc (2 runs), xyz (1 run)"


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
        # sklearn.calibration.calibration_curve, strategy="uniform", on the bins the run logged
        # its ECE with (evaluation.calibration_bins, 15 when the run does not say)
        bins = int(run.config.get("evaluation", {}).get("calibration_bins", 15))
        accuracy, confidence = calibration_curve(correct, run.predictions["confidence"],
                                                 n_bins=bins, strategy="uniform")
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
        assert row[header.index("test words")] == f"{(frame['layout_id'] == row[0]).sum():,}"
        # synthetic_runs holds the test families out of training whole
        assert row[header.index("in training")] == "unseen"
    # Five runs with fourteen classes stay well inside a mail attachment (common practice).
    assert path.stat().st_size < 3_000_000
    assert "learning-curves" not in html   # no curve/<n>/macro_f1 metrics in these runs
    assert html.count('<div class="overlay"') == 1
    assert ">vs reference<" not in html and "no reference run was named" in html
    assert "no reference run to compare with" in html


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

    store = RunStore(uri)
    loaded = store.bundles("report runs")
    assert [b.run_id for b in loaded] == list(logged)
    for bundle in loaded:
        on_disk = RunBundle.load(logged[bundle.run_id])
        assert bundle.name == on_disk.name and bundle.metrics == on_disk.metrics
        pd.testing.assert_frame_equal(bundle.predictions, on_disk.predictions)
        pd.testing.assert_frame_equal(bundle.edges, on_disk.edges)
        assert bundle.config == on_disk.config and bundle.command == on_disk.command
    second = list(logged)[1]
    assert [b.run_id for b in store.load([store.resolve_id(second[:12])])] == [second]
    with pytest.raises(RunLookupError, match="status FAILED"):
        store.load([failed.info.run_id])
    with pytest.raises(RunLookupError, match="no experiment named 'elsewhere'"):
        store.bundles("elsewhere")
