"""`split.pages_per_layout`: a value that is no positive whole number, or training documents
without a layout, stop with a located error naming the config key (rule of the house: bad
input gets a located error). Expected messages are written out by hand from that rule."""

from __future__ import annotations

import numpy as np
import pytest

from dochar.splits.protocols import SplitError, documents_per_layout

LAYOUT_OF = {"coa-1": "L1", "coa-2": "L1", "coa-3": "L2"}


@pytest.mark.parametrize("value", [True, False, 0, -1, 2.0, "3", None])
def test_anything_but_a_positive_whole_number_is_refused(value):
    with pytest.raises(SplitError) as error:
        documents_per_layout(list(LAYOUT_OF), LAYOUT_OF, value, seed=0)
    assert str(error.value) == (f"split.pages_per_layout={value!r}: use a positive number of "
                                "documents per layout, or null for all")


@pytest.mark.parametrize("value", [1, np.int64(2)])
def test_a_positive_whole_number_is_taken(value):
    kept, short = documents_per_layout(list(LAYOUT_OF), LAYOUT_OF, value, seed=0)
    assert len(kept) == min(value, 2) + 1 and short == int(value > 1)


def test_training_documents_without_a_layout_are_named():
    """Six without a layout: four with an empty layout id, two (coa-7, coa-8) missing from the
    mapping; the error counts them and shows the first five, sorted."""
    layout_of = {**LAYOUT_OF, "coa-4": "", "coa-5": "", "coa-6": "", "coa-9": ""}
    train = [*LAYOUT_OF, "coa-9", "coa-8", "coa-7", "coa-6", "coa-5", "coa-4"]
    with pytest.raises(SplitError) as error:
        documents_per_layout(train, layout_of, 1, seed=0)
    assert str(error.value) == (
        "split.pages_per_layout needs a layout_id for every training document; 6 have none "
        "(e.g. ['coa-4', 'coa-5', 'coa-6', 'coa-7', 'coa-8']); set split.infer_layouts=true "
        "to group them by inferred families")
