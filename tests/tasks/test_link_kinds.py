"""Which links of the links table a key -> value links task learns from."""

from __future__ import annotations

import numpy as np
import pandas as pd

from dochar.data.word_table import Page
from dochar.tasks.links import link_pages


def _page() -> Page:
    boxes = np.array([[0, 0, 10, 10], [20, 0, 30, 10], [0, 20, 10, 30], [20, 20, 30, 30]], float)
    return Page("d", 1, np.arange(4), ["No.", "7", "Lead", "0.5"], boxes, 100.0, 100.0,
                labels=["key", "cert_no", "analyte", "result"],
                entity_ids=["k", "v", "a", "r"])


def test_row_links_are_left_out_unless_asked_for():
    # key -> value links point from a key to its value; a row link joins two cells of a row
    # and is no key -> value pair, so it counts only when task.link_table_kinds names it
    links = pd.DataFrame({"doc_id": "d", "page": 1, "source": ["k", "a"], "target": ["v", "r"],
                          "kind": ["key_value", "row"]})
    (page,) = link_pages([_page()], "key_value", links)
    assert page.true_links.T.tolist() == [[0, 1]]
    (page,) = link_pages([_page()], "key_value", links, table_kinds=["row"])
    assert page.true_links.T.tolist() == [[2, 3]]
