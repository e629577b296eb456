"""The per-layout template baseline on pages built so that labels depend only on position.

Each family below has fixed slots (a box and a label) in its own quarter of the page, with its
own key words; a document of the family puts one word in every slot, moved by a jitter far
smaller than half the gap between slots, on a page of its own size. By construction a word's
nearest template word (positions as fractions of the page) is the same slot, so the template
must label every word of a seen family correctly; and a page of a family never seen either
borrows the template whose page signature is nearest (closer than the threshold) or gets
``other`` everywhere, as the module documents.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import f1_score

from dochar.data.word_table import Page
from dochar.models.baselines import make_template
from dochar.models.template import LayoutTemplateClassifier, TemplateInputError, text_shape

CLASSES = ["key", "value", "date", "other"]
# quarter of the page each family writes in (x offset, y offset), and its fixed wording
FAMILIES = {"north_west": ((0.0, 0.0), "laboratory"), "north_east": ((0.5, 0.0), "certificate"),
            "south_west": ((0.0, 0.5), "specimen")}
ROWS, COLUMNS = 5, 3


def _slots(family: str) -> list[tuple[float, float, str]]:
    """(x, y, label) of each slot, as fractions of the page: a 5 × 3 grid in the quarter."""
    (ox, oy), _ = FAMILIES.get(family, ((0.5, 0.5), ""))
    slots = []
    for r in range(ROWS):
        for c in range(COLUMNS):
            label = ("key", "value", "date")[c] if r < 4 else "other"
            slots.append((ox + 0.05 + 0.13 * c, oy + 0.05 + 0.09 * r, label))
    return slots


def _page(doc_id: str, family: str, rng: np.random.Generator, *, layout_id: str | None = None,
          wording: str | None = None) -> Page:
    width, height = rng.choice([600.0, 612.0, 1200.0]), rng.choice([800.0, 792.0, 1600.0])
    texts, boxes, labels = [], [], []
    word = wording or FAMILIES.get(family, ((0, 0), "unrelated"))[1]
    for x, y, label in _slots(family):
        x += rng.uniform(-0.01, 0.01)   # jitter: at most 0.01 of the page, slots 0.09 apart
        y += rng.uniform(-0.01, 0.01)
        boxes.append([x * width, y * height, (x + 0.08) * width, (y + 0.02) * height])
        texts.append({"key": f"{word}:", "value": f"V{rng.integers(10, 99)}x",
                      "date": f"{rng.integers(10, 28)}.05.2026", "other": word}[label])
        labels.append(label)
    return Page(doc_id=doc_id, page=1, word_ids=np.arange(len(texts)), texts=texts,
                boxes=np.array(boxes), width=float(width), height=float(height), labels=labels,
                layout_id=family if layout_id is None else layout_id)


def _pages(count: int, seed: int, families=tuple(FAMILIES), **kwargs) -> list[Page]:
    rng = np.random.default_rng(seed)
    return [_page(f"{family}-{seed}-{i}", family, rng, **kwargs)
            for family in families for i in range(count)]


def _labels(pages: list[Page]) -> list[str]:
    return [label for page in pages for label in page.labels]


def _fitted(**options) -> LayoutTemplateClassifier:
    return LayoutTemplateClassifier(classes=CLASSES, **options).fit(_pages(3, seed=1))


@pytest.mark.parametrize("neighbours", [1, 3])
def test_every_word_of_a_seen_layout_is_labelled_by_its_slot(neighbours) -> None:
    model = _fitted(neighbours=neighbours)
    test = _pages(4, seed=2)
    predicted = model.predict(test)
    # by construction the right answer is each word's own slot label: F1 must be exactly 1
    assert f1_score(_labels(test), predicted, average="macro") == 1.0
    assert (model.match_pages(test)["outcome"] == "template").all()
    proba = model.predict_proba(test)
    assert proba.shape == (len(_labels(test)), len(CLASSES))
    assert np.allclose(proba.sum(axis=1), 1.0)


def test_families_are_inferred_from_page_signatures_when_layout_ids_are_missing() -> None:
    train = _pages(3, seed=1, layout_id="")
    model = LayoutTemplateClassifier(classes=CLASSES).fit(train)
    assert len(model.families_) == len(FAMILIES)   # three quarters, three wordings: 3 families
    test = _pages(2, seed=5, layout_id="")
    assert f1_score(_labels(test), model.predict(test), average="macro") == 1.0


def test_an_unseen_family_that_looks_like_a_seen_one_borrows_its_template() -> None:
    model = _fitted(fallback_threshold=0.3)
    # a new layout id whose pages are north_east pages in every respect: signature distance ~0
    test = _pages(2, seed=3, families=("north_east",), layout_id="north_east_v2")
    matches = model.match_pages(test)
    assert (matches["outcome"] == "fallback").all()
    assert (matches["template"] == "north_east").all() and (matches["distance"] < 0.3).all()
    assert f1_score(_labels(test), model.predict(test), average="macro") == 1.0


def test_an_unseen_family_unlike_any_template_gets_other_and_is_counted() -> None:
    model = _fitted(fallback_threshold=0.3)
    # the south-east quarter and wording no training page uses: occupancy grids share no cell
    # and the keyword bags no word, so the cosine distance is near 1 (well above 0.3)
    test = _pages(2, seed=4, families=("south_east",))
    matches = model.match_pages(test)
    assert (matches["outcome"] == "no_template").all() and (matches["template"] == "").all()
    assert (matches["distance"] > 0.3).all()
    assert set(model.predict(test)) == {"other"}
    assert np.array_equal(model.predict_proba(test)[:, CLASSES.index("other")],
                          np.ones(len(_labels(test))))
    # the threshold is the only thing that decides: at the largest cosine distance (2) the same
    # pages fall back to their nearest template instead
    loose = _fitted(fallback_threshold=2.0).match_pages(test)
    assert (loose["outcome"] == "fallback").all() and (loose["template"] != "").all()


def test_text_shape_breaks_ties_between_words_at_one_place() -> None:
    box = np.array([[100.0, 100.0, 140.0, 110.0]])

    def page(doc: str, text: str, label: str) -> Page:
        return Page(doc, 1, np.array([0]), [text], box.copy(), 600.0, 800.0, [label],
                    layout_id="one")
    model = LayoutTemplateClassifier(classes=CLASSES, shape_weight=0.02).fit(
        [page("a", "Lot:", "key"), page("b", "4711", "value")])
    assert list(model.predict([page("c", "0815", "value"), page("d", "Batch:", "key")])) \
        == ["value", "key"]
    # text shape: digits 9, capitals A, other letters a, runs collapsed (as documented)
    assert text_shape("Lot 42-b") == "Aa 9-a" and text_shape("12.05.2026") == "9.9.9"


def test_bad_input_gets_a_located_error() -> None:
    pages = _pages(1, seed=1)
    unlabelled = Page("doc-x", 2, np.array([0]), ["x"], np.array([[0.0, 0, 1, 1]]), 10.0, 10.0)
    with pytest.raises(TemplateInputError, match=r"page doc-x#p2 has no label"):
        LayoutTemplateClassifier(classes=CLASSES).fit([unlabelled])
    wrong = _pages(1, seed=1)[0]
    wrong.labels = ["verdict", *wrong.labels[1:]]
    with pytest.raises(TemplateInputError, match=rf"page {wrong.key}, word 0: label 'verdict'"):
        LayoutTemplateClassifier(classes=CLASSES).fit([wrong])
    with pytest.raises(TemplateInputError, match=r"neighbours must be a positive int, got 0"):
        LayoutTemplateClassifier(classes=CLASSES, neighbours=0).fit(pages)
    with pytest.raises(TemplateInputError, match=r"unknown_label 'blank' is not one of"):
        LayoutTemplateClassifier(classes=CLASSES, unknown_label="blank").fit(pages)
    with pytest.raises(TemplateInputError, match=r"no option\(s\) \['k'\]; valid options"):
        make_template("layout_template", {"k": 3}, CLASSES, {})
    with pytest.raises(TemplateInputError, match=r"item 1 is a dict, not a Page"):
        LayoutTemplateClassifier(classes=CLASSES).fit([pages[0], {"doc_id": "x"}])
    with pytest.raises(TemplateInputError, match=r"call fit before predict"):
        LayoutTemplateClassifier().predict(pages)


def test_the_fallback_needs_a_distance_strictly_below_the_threshold() -> None:
    import dataclasses

    # one training page per family: each template's signature is that page's own signature, so
    # a copy of the page under a new layout id is at cosine distance 0 from it (identical
    # vectors). "Closer than fallback_threshold" (module docstring): at threshold 0 nothing is
    # closer than 0, so the copy gets no template; at any positive threshold it borrows its twin.
    train = _pages(1, seed=1)
    twins = [dataclasses.replace(page, doc_id=f"{page.doc_id}-copy",
                                 layout_id=f"{page.layout_id}_v2") for page in train]
    strict = LayoutTemplateClassifier(classes=CLASSES, fallback_threshold=0.0).fit(train)
    matches = strict.match_pages(twins)
    assert (matches["distance"] == 0.0).all()
    assert (matches["outcome"] == "no_template").all()
    assert set(strict.predict(twins)) == {"other"}
    loose = LayoutTemplateClassifier(classes=CLASSES, fallback_threshold=1e-9).fit(train)
    matches = loose.match_pages(twins)
    assert (matches["outcome"] == "fallback").all()
    assert matches["template"].tolist() == [page.layout_id for page in train]


def test_a_model_rebuilt_from_its_saved_state_matches_and_labels_as_the_fitted_one() -> None:
    import json

    # the saved state goes through JSON (what dochar's saved models write): the rebuilt model
    # must pick the same template at the same distance and give the same vote shares on seen
    # families, a look-alike under a new id (fallback) and an unlike family (no template)
    model = _fitted(neighbours=3, fallback_threshold=0.3, shape_weight=0.02)
    state = json.loads(json.dumps(model.fitted_state()))
    rebuilt = LayoutTemplateClassifier(classes=CLASSES, neighbours=3, fallback_threshold=0.3,
                                       shape_weight=0.02).load_state(state)
    # by hand: 3 families × 3 training pages of 15 words, one template per family and page
    assert rebuilt.families_ == sorted(FAMILIES) and rebuilt.n_template_words_ == 135
    assert list(rebuilt.classes_) == list(model.classes_)
    test = (_pages(2, seed=6) + _pages(1, seed=7, families=("north_east",),
                                       layout_id="north_east_v2")
            + _pages(1, seed=8, families=("south_east",)))
    assert rebuilt.match_pages(test).equals(model.match_pages(test))
    assert set(model.match_pages(test)["outcome"]) == {"template", "fallback", "no_template"}
    np.testing.assert_array_equal(rebuilt.predict_proba(test), model.predict_proba(test))
    for saved, loaded in zip(model.templates_, rebuilt.templates_):
        assert (loaded.family, loaded.page) == (saved.family, saved.page)
        np.testing.assert_array_equal(loaded.points, saved.points)
        np.testing.assert_array_equal(loaded.signature, saved.signature)
        assert list(loaded.shapes) == list(saved.shapes) and loaded.labels.dtype == np.int64
        assert loaded.search.n_neighbors == min(len(saved.points), 3 + 8)  # k + 8 candidates


def test_word_positions_are_centres_and_sizes_as_fractions_of_the_page() -> None:
    from dochar.models.template import _positions

    # by hand: box (100, 100)-(140, 110) on a 600 x 800 page has centre (120/600, 105/800)
    # and size (40/600, 10/800); weights scale the distance, so the points take their roots
    page = Page("coa-1", 1, np.array([0]), ["Lot:"], np.array([[100.0, 100.0, 140.0, 110.0]]),
                600.0, 800.0, ["key"], layout_id="one")
    np.testing.assert_allclose(_positions(page), [[0.2, 0.13125, 40 / 600, 10 / 800]])
    weighted = LayoutTemplateClassifier(centre_weight=4.0, size_weight=0.25)._weighted(
        np.ones((1, 4)))
    np.testing.assert_allclose(weighted, [[2.0, 2.0, 0.5, 0.5]])


def test_signature_options_reach_the_page_signatures_and_family_inference() -> None:
    from dochar.splits.layout_families import infer_layout_families, page_signature

    # a YAML config gives the grid as a list; the signatures are page_signature's with it
    options = {"grid": [2, 3], "n_keywords": 4, "text_weight": 0.25}
    train = _pages(1, seed=1)
    model = LayoutTemplateClassifier(classes=CLASSES, signature=options).fit(train)
    expected = page_signature(train[0], grid=(2, 3), n_keywords=4, text_weight=0.25)
    assert len(expected) == 2 * 3 + 4
    (own,) = [t for t in model.templates_ if t.family == train[0].layout_id]
    np.testing.assert_allclose(own.signature, expected)
    # pages without a layout id are grouped by infer_layout_families with the same options
    unnamed = _pages(2, seed=1, layout_id="")
    inferred = LayoutTemplateClassifier(classes=CLASSES, signature=options).fit(unnamed)
    groups = infer_layout_families(unnamed, 0.3, grid=(2, 3), n_keywords=4, text_weight=0.25)
    assert inferred.families_ == sorted({f"inferred-{family}" for family in groups.values()})


def test_a_page_is_matched_to_its_family_template_of_the_same_page_number() -> None:
    import dataclasses

    # family "coa" has a north-west first page and a north-east second page; a first page
    # that looks like a north-east page still gets the family's first-page template, at the
    # distance of an unlike signature (the north-east one would be at distance ~0)
    rng = np.random.default_rng(11)
    first = _page("coa-a", "north_west", rng, layout_id="coa")
    second = dataclasses.replace(_page("coa-a", "north_east", rng, layout_id="coa"), page=2)
    model = LayoutTemplateClassifier(classes=CLASSES).fit([first, second])
    look_alike = _page("coa-b", "north_east", rng, layout_id="coa")
    match = model.match_pages([look_alike]).iloc[0]
    assert (match["outcome"], match["template"]) == ("template", "coa")
    assert match["distance"] > 0.3


def test_match_pages_reads_unlabelled_pages_and_reports_one_row_each() -> None:
    import dataclasses

    model = _fitted()
    page = dataclasses.replace(_pages(1, seed=9, families=("north_west",))[0], labels=None,
                               layout_id=None, doc_id="coa-9", page=1)
    table = model.match_pages([page])
    assert list(table.columns) == ["doc_id", "page", "layout_id", "template", "distance",
                                   "outcome"]
    assert table[["doc_id", "page", "layout_id", "outcome"]].values.tolist() == [
        ["coa-9", 1, "", "fallback"]]
    with pytest.raises(TemplateInputError, match=r"^LayoutTemplateClassifier\.match_pages: "
                                                 r"item 0 is a dict, not a Page$"):
        model.match_pages([{"doc_id": "x"}])


def test_the_class_defaults_are_those_of_the_model_config() -> None:
    import yaml

    from tests.helpers import CONFIGS

    options = yaml.safe_load((CONFIGS / "model" / "layout_template.yaml").read_text())["options"]
    defaults = LayoutTemplateClassifier().get_params()
    assert {name: defaults[name] for name in options} == options
    assert defaults["signature"] is None and defaults["classes"] is None


@pytest.mark.parametrize("options, message", [
    (dict(neighbours=True), r"neighbours must be a positive int, got True"),
    (dict(neighbours=2.0), r"neighbours must be a positive int, got 2\.0"),
    (dict(size_weight=-0.1), r"size_weight must be a number >= 0, got -0\.1"),
    (dict(shape_weight=float("nan")), r"shape_weight must be a number >= 0, got nan"),
    (dict(centre_weight="1"), r"centre_weight must be a number >= 0, got '1'"),
    (dict(centre_weight=0, size_weight=0), r"centre_weight and size_weight are both 0; "
                                           r"positions would not count at all"),
    (dict(fallback_threshold=2.5), r"fallback_threshold is a cosine distance in \[0, 2\], "
                                   r"got 2\.5"),
    (dict(family_threshold="0.3"), r"family_threshold is a cosine distance in \[0, 2\], "
                                   r"got '0\.3'"),
    (dict(signature={"grid": [2, 2], "cells": 4}), r"unknown signature option\(s\) "
                                                   r"\['cells'\]; valid: \['grid', "
                                                   r"'n_keywords', 'text_weight'\]"),
])
def test_options_out_of_range_are_refused_by_name(options, message) -> None:
    with pytest.raises(TemplateInputError, match=rf"^model=layout_template: {message}$"):
        LayoutTemplateClassifier(classes=CLASSES, **options).check_options()


def test_options_at_the_edges_of_their_ranges_are_accepted() -> None:
    for options in (dict(centre_weight=0), dict(size_weight=0), dict(shape_weight=0),
                    dict(fallback_threshold=0, family_threshold=2),
                    dict(fallback_threshold=2, family_threshold=0),
                    dict(signature={"grid": [2, 2], "n_keywords": 8, "text_weight": 0.5})):
        LayoutTemplateClassifier(classes=CLASSES, **options).check_options()


def test_pages_are_refused_with_where_and_what() -> None:
    page = _pages(1, seed=1)[0]
    where = "LayoutTemplateClassifier.fit"
    with pytest.raises(TemplateInputError, match=rf"^{where}: expected a sequence of Page "
                                                 r"objects, got str$"):
        LayoutTemplateClassifier(classes=CLASSES).fit("pages")
    with pytest.raises(TemplateInputError, match=rf"^{where}: no pages given$"):
        LayoutTemplateClassifier(classes=CLASSES).fit([])
    import dataclasses

    for bad, what in ((dataclasses.replace(page, boxes=page.boxes[:, :3]),
                       r"boxes must be a finite \(15, 4\) array, got shape \(15, 3\)"),
                      (dataclasses.replace(page, boxes=np.full((15, 4), np.inf)),
                       r"boxes must be a finite \(15, 4\) array, got shape \(15, 4\)"),
                      (dataclasses.replace(page, width=0.0),
                       r"page size must be positive, got 0\.0 x "),
                      (dataclasses.replace(page, height=0.0),
                       r"page size must be positive, got \S+ x 0\.0")):
        with pytest.raises(TemplateInputError, match=rf"^{where}: page {page.key}: {what}"):
            LayoutTemplateClassifier(classes=CLASSES).fit([bad])
    # a page under one point wide is still a page
    LayoutTemplateClassifier(classes=CLASSES).fit([dataclasses.replace(
        page, width=0.5, height=0.5, boxes=page.boxes / 2000)])
