"""Hostile document text in the report, opened in headless Chromium: nothing runs, nothing loads.

A word's text, a document id and a label carry HTML with ``onerror``/``onload`` handlers and a
reference to an outside address (127.0.0.1:9, where nothing listens). If any of them reached
the page unescaped, Chromium would open a dialog, set ``window.__hostile``, or request a URL
other than the report file itself (common practice for an offline page: only the file and
inline ``data:`` URIs).
"""

from __future__ import annotations

from sklearn.tree import DecisionTreeClassifier

import data_synth
from dochar.data.word_table import validate_word_table
from dochar.report import write_report
from tests.helpers.report_runs import fit_run
from tests.report.test_report_browser import LAUNCH_ARGS, require_chromium

WORD = '<img src="http://127.0.0.1:9/word.png" onerror="alert(1);window.__hostile=1">'
DOC = 'coa"><img src=x onerror="alert(2);window.__hostile=2">'
LABEL = "<svg onload=\"alert(3);window.__hostile=3\"></svg>"


def hostile_runs():
    table = data_synth.generate(n_documents=10, seed=0)
    labels = [*data_synth.LABELS, LABEL]
    table = validate_word_table(table, labels, strict=True).table
    docs = sorted(table["doc_id"].unique())
    test_docs = docs[6:]
    table.loc[table["doc_id"] == test_docs[0], "doc_id"] = DOC
    first_words = table.groupby("doc_id")["word_id"].idxmin()
    table.loc[first_words, "text"] = WORD
    table.loc[table.index[::7], "label"] = LABEL       # a class of its own, in train and test
    train = table[table["doc_id"].isin(docs[:6])]
    test = table[~table["doc_id"].isin(docs[:6])]
    return [fit_run(f"tree depth {depth}", DecisionTreeClassifier(max_depth=depth,
                                                                  random_state=0),
                    train, test, {"model": "decision_tree"}, labels=labels)
            for depth in (3, 6)]


def test_hostile_text_neither_runs_nor_loads(tmp_path):
    chromium = require_chromium()
    from playwright.sync_api import sync_playwright

    path = write_report(hostile_runs(), tmp_path / "report.html", title=f"hostile {WORD}")
    html = path.read_text(encoding="utf-8")
    assert WORD not in html and LABEL not in html          # only escaped forms are written
    dialogs: list[str] = []
    requests: list[str] = []
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(chromium), args=LAUNCH_ARGS)
        try:
            page = browser.new_page()
            page.on("dialog", lambda dialog: (dialogs.append(dialog.message), dialog.dismiss()))
            page.on("request", lambda request: requests.append(request.url))
            page.goto(path.as_uri(), wait_until="load")
            page.wait_for_timeout(500)
            hostile = page.evaluate("window.__hostile === undefined ? null : window.__hostile")
            shown = page.locator("body").inner_text()
        finally:
            browser.close()
    assert dialogs == [] and hostile is None
    assert [u for u in requests if u != path.as_uri() and not u.startswith("data:")] == []
    assert "onerror" in shown       # the payload is shown to the reader as text
