"""A run on data with a record shape scores records, and two runs compare on them.

The expected values are worked from the run's own record tables by hand rules stated beside
each check (straight-through = share of documents whose predicted record equals the true one).
"""

from __future__ import annotations

import json

import pytest

from dochar.runs.compare import compare_runs

pytestmark = pytest.mark.slow   # two forest runs and their record scores: about 2.5 minutes

QUICK = ["train.progress=false", "tracking.enabled=false", "data.documents=24",
         "split=random", "evaluation.bootstrap_resamples=50", "features=geometry_text",
         "model=random_forest", "model.options.n_estimators=10"]


@pytest.fixture(scope="module")
def runs():
    """A shallow forest (depth 3) and a full one on the same synthetic certificates."""
    from hydra import compose, initialize_config_dir

    from dochar.config import CONFIG_DIR
    from dochar.experiment import run_experiment

    with initialize_config_dir(str(CONFIG_DIR), version_base=None):
        return [run_experiment(compose("config", overrides=[*QUICK, *extra]))[0]
                for extra in (["+model.options.max_depth=3"], [])]


def _canonical(record: dict) -> tuple:
    items = record.pop("results", [])
    return (sorted(record.items()), sorted(sorted(item.items()) for item in items))


def test_a_run_scores_its_test_documents_records(runs):
    bundle = runs[1]
    pairs = bundle.tables["record_pairs"]
    assert set(pairs.index.astype(str)) == set(bundle.predictions["doc_id"].astype(str))
    # straight-through by hand: header values equal and items equal in any order
    right = [_canonical(json.loads(p)) == _canonical(json.loads(t))
             for p, t in zip(pairs["predicted"], pairs["truth"])]
    assert bundle.metrics["records/straight_through"] == pytest.approx(sum(right) / len(right))
    for name in ("straight_through", "field_f1", "ted_accuracy", "row_f1"):
        for prefix in ("records/", "records/normalised/"):
            low, point, high = (bundle.metrics[f"{prefix}{name}{s}"]
                                for s in ("_low", "", "_high"))
            assert 0 <= low <= point <= high <= 1
    assert 0 <= bundle.metrics["records/field/cert_no"] <= 1


def test_two_runs_compare_on_straight_through(runs):
    result = compare_runs(runs[1], runs[0], score="straight_through", resamples=200)
    assert result.score_a == pytest.approx(runs[1].metrics["records/straight_through"])
    assert result.score_b == pytest.approx(runs[0].metrics["records/straight_through"])
    normalised = compare_runs(runs[1], runs[0], score="normalised/field_f1", resamples=200)
    assert normalised.score_a == pytest.approx(runs[1].metrics["records/normalised/field_f1"])
    with pytest.raises(ValueError, match="normalised/row_f1"):
        compare_runs(runs[1], runs[0], score="row_f2")


def test_the_report_has_a_records_chapter_ranked_by_straight_through(runs, tmp_path):
    import re

    from dochar.report import write_report

    page = write_report(runs, tmp_path / "report.html").read_text()
    chapter = page[page.index('<section id="records">'):]
    chapter = chapter[:chapter.index("</section>")]
    table = chapter[chapter.index('id="records-table"'):chapter.index("</table>")]
    # first numeric column: straight-through, highest first
    firsts = [float(v) for v in re.findall(r"<tr><td>.*?</td><td class=num>([0-9.]+)", table)]
    expected = sorted((b.metrics["records/straight_through"] for b in runs), reverse=True)
    assert firsts == pytest.approx(expected, abs=5e-4)
    assert 'id="record-fields-table"' in chapter
    worst = runs[int(runs[1].metrics["records/straight_through"]
                     < runs[0].metrics["records/straight_through"])]
    if worst.metrics["records/straight_through"] < 1:
        assert chapter.count('class="record-pair"') >= 1
