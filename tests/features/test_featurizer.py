"""Word features against hand arithmetic, the reference libraries they wrap, and FUNSD pages."""

from __future__ import annotations

import json
import math
import os
import struct
from decimal import Decimal

import dateparser
import numpy as np
import pytest
import torch
import torch.nn.functional as F
from hypothesis import given, settings
from hypothesis import strategies as st
from price_parser import Price
from sklearn.feature_extraction.text import HashingVectorizer
from sklearn.preprocessing import StandardScaler
from sklearn.utils import murmurhash3_32
from wordfreq import zipf_frequency

from dochar.data.word_table import Page
from dochar.features import (
    CHAR_VOCAB,
    CHAR_VOCAB_SIZE,
    DEFAULT_LEXICONS,
    FEATURE_GROUPS,
    GEOMETRY_NAMES,
    TEXT_FLAG_NAMES,
    CharCNNEncoder,
    WordFeaturizer,
    char_ids,
    char_ngram_hashes,
)
from dochar.features.options import FeatureOptionError
from dochar.features.geometry import geometry_features
from dochar.features.text_flags import text_flag_row
from tests.helpers import datasets_root

FUNSD = datasets_root() / "funsd"


def make_page(texts, boxes, width=200.0, height=100.0, doc_id="coa-1") -> Page:
    return Page(doc_id=doc_id, page=1, word_ids=np.arange(len(texts), dtype=np.int64),
                texts=list(texts), boxes=np.asarray(boxes, dtype=np.float64).reshape(-1, 4),
                width=width, height=height)


def flags(text: str) -> dict[str, float]:
    return dict(zip(TEXT_FLAG_NAMES, text_flag_row(text)))


# ---------------------------------------------------------------- geometry

def test_geometry_hand_computed():
    # Page 200 x 100. Word a: (20,10)-(60,30), w=40 h=20. Word b: (100,50)-(180,60), w=80 h=10.
    # Word c: empty text, zero-area box at (140,80). Size floor = 1e-3 * side: 0.2 wide, 0.1 high.
    page = make_page(["Lot:", "B-2041", ""], [[20, 10, 60, 30], [100, 50, 180, 60],
                                              [140, 80, 140, 80]])
    g = dict(zip(GEOMETRY_NAMES, geometry_features(page).T))
    # corners / page size: a = (20/200, 10/100, 60/200, 30/100)
    np.testing.assert_allclose(g["x0"], [0.1, 0.5, 0.7], atol=1e-6)
    np.testing.assert_allclose(g["y1"], [0.3, 0.6, 0.8], atol=1e-6)
    np.testing.assert_allclose(g["width"], [0.2, 0.4, 0.0], atol=1e-6)
    np.testing.assert_allclose(g["height"], [0.2, 0.1, 0.0], atol=1e-6)
    # centres: a (40, 20), b (140, 55), c (140, 80)
    np.testing.assert_allclose(g["cx"], [0.2, 0.7, 0.7], atol=1e-6)
    np.testing.assert_allclose(g["cy"], [0.2, 0.55, 0.8], atol=1e-6)
    # log aspect: log(40/20), log(80/10); c uses the floors log(0.2/0.1)
    np.testing.assert_allclose(g["log_aspect"], [math.log(2), math.log(8), math.log(2)], atol=1e-6)
    # sqrt area of the normalised box: sqrt(0.2*0.2), sqrt(0.4*0.1), 0
    np.testing.assert_allclose(g["sqrt_area"], [0.2, math.sqrt(0.04), 0.0], atol=1e-6)
    np.testing.assert_allclose(g["gap_right"], [0.7, 0.1, 0.3], atol=1e-6)
    np.testing.assert_allclose(g["gap_bottom"], [0.7, 0.4, 0.2], atol=1e-6)
    # text block spans x 20..180 (160 wide), y 10..80 (70 high)
    np.testing.assert_allclose(g["block_x"], [20 / 160, 120 / 160, 120 / 160], atol=1e-6)
    np.testing.assert_allclose(g["block_y"], [10 / 70, 45 / 70, 70 / 70], atol=1e-6)
    # ranks of cx = (40, 140, 140): average ranks 1, 2.5, 2.5 (ties share, as
    # scipy.stats.rankdata method="average"), scaled (r-1)/(n-1) -> 0, 0.75, 0.75
    np.testing.assert_allclose(g["rank_x"], [0.0, 0.75, 0.75], atol=1e-6)
    np.testing.assert_allclose(g["rank_y"], [0.0, 0.5, 1.0], atol=1e-6)
    # median height over non-degenerate boxes: median(20, 10) = 15; c uses the floor 0.1
    np.testing.assert_allclose(g["log_rel_height"],
                               [math.log(20 / 15), math.log(10 / 15), math.log(0.1 / 15)],
                               atol=1e-5)
    np.testing.assert_allclose(g["log_rel_width"],
                               [math.log(40 / 15), math.log(80 / 15), math.log(0.2 / 15)],
                               atol=1e-5)


def test_geometry_single_degenerate_word_is_finite():
    # one zero-area box at the page corner: no real height to take a median from
    g = geometry_features(make_page([""], [[0, 0, 0, 0]]))
    assert g.shape == (1, len(GEOMETRY_NAMES)) and np.isfinite(g).all()
    assert g[0, GEOMETRY_NAMES.index("rank_x")] == 0.5


box_strategy = st.tuples(st.floats(0, 1), st.floats(0, 1), st.floats(0, 1), st.floats(0, 1))


@settings(max_examples=60, deadline=None)
@given(st.lists(box_strategy, min_size=1, max_size=12),
       st.floats(1, 5000), st.floats(1, 5000))
def test_geometry_is_finite_and_bounded(raw_boxes, width, height):
    # property: any valid boxes (x0<=x1, y0<=y1 inside the page) give finite, bounded values
    boxes = [[min(a, c) * width, min(b, d) * height, max(a, c) * width, max(b, d) * height]
             for a, b, c, d in raw_boxes]
    g = geometry_features(make_page(["x"] * len(boxes), boxes, width, height))
    assert np.isfinite(g).all()
    bounded = [GEOMETRY_NAMES.index(n) for n in ("x0", "y0", "x1", "y1", "cx", "cy", "block_x",
                                                 "block_y", "rank_x", "rank_y", "sqrt_area")]
    assert (g[:, bounded] >= -1e-6).all() and (g[:, bounded] <= 1 + 1e-6).all()


# ---------------------------------------------------------------- text flags

DATE_REFERENCE = {"REQUIRE_PARTS": ["day", "month", "year"]}


@pytest.mark.parametrize("text,is_date", [
    ("2026-03-14", True), ("14/03/2026", True), ("14.03.2026", True), ("14-Mar-2026", True),
    ("12.50", False), ("2026", False), ("Mar-2026", False), ("COA-2026-0012", False),
])
def test_date_like_matches_dateparser(text, is_date):
    # reference: dateparser.parse with a full date required (day, month and year)
    reference = dateparser.parse(text, languages=["en"], settings=DATE_REFERENCE) is not None
    assert reference == is_date
    assert flags(text)["date_like"] == float(is_date)


@pytest.mark.parametrize("text,amount,currency", [
    ("12.50", Decimal("12.50"), False), ("$1,200.00", Decimal("1200.00"), True),
    ("€12,50", Decimal("12.50"), True), ("<0.01", Decimal("0.01"), False),
])
def test_amount_like_matches_price_parser(text, amount, currency):
    # reference: price_parser.Price.fromstring reads the same amount and currency
    price = Price.fromstring(text)
    assert price.amount == amount and (price.currency is not None) == currency
    f = flags(text)
    assert f["amount_like"] == 1.0 and f["currency_amount"] == float(currency)


@pytest.mark.parametrize("text", ["A12", "2026-03-14", "1200.5kg", "mg/L", ""])
def test_not_amount_like(text):
    # price_parser finds a number inside "A12" (12); the flag also requires nothing else be left
    assert flags(text)["amount_like"] == 0.0


def test_surface_flags():
    f = flags("Date:")
    assert f["ends_with_colon"] == 1 and f["title"] == 1 and f["upper"] == 0
    assert f["punct_share"] == pytest.approx(1 / 5) and f["letter_share"] == pytest.approx(4 / 5)
    f = flags("COA-2026-0012")     # 13 characters: 3 letters, 8 digits, 2 hyphens
    assert f["letters_and_digits"] == 1 and f["upper"] == 1 and f["numeric"] == 0
    assert f["digit_share"] == pytest.approx(8 / 13)
    assert flags("1,200")["numeric"] == 1 and flags("-3.5")["numeric"] == 1
    assert flags("1e5")["numeric"] == 0 and flags("nan")["numeric"] == 0
    assert flags("mg")["lower"] == 1 and flags("March")["month_name"] == 1
    # log length: log1p(5) / log1p(64)
    assert flags("Date:")["log_length"] == pytest.approx(math.log(6) / math.log(65), rel=1e-6)


@pytest.mark.parametrize("text", ["the", "certificate", "Laboratory", "xqzvbn", "12"])
def test_word_freq_matches_wordfreq(text):
    # reference: wordfreq.zipf_frequency(text, "en"), scaled by 1/8
    assert flags(text)["word_freq"] == pytest.approx(zipf_frequency(text, "en") / 8, abs=1e-9)


def test_empty_text_flags():
    f = flags("   ")
    assert f["empty"] == 1 and sum(f.values()) == 1


# ---------------------------------------------------------------- lexicons and the featurizer

def test_lexicon_membership():
    lexicons = {"units": ["mg/L", "μg/L", "%"], "verdicts": ["pass", "complies"]}
    fz = WordFeaturizer(groups=("text_flags",), lexicons=lexicons).fit([])
    texts = ["MG/L", "(mg/L),", "µg/L", "%", "Pass.", "Complies", "mg", "passes", ""]
    page = make_page(texts, [[0, 0, 10, 10]] * len(texts))
    names = fz.feature_names
    x = fz.transform(page)
    units = x[:, names.index("lexicon:units")]
    verdicts = x[:, names.index("lexicon:verdicts")]
    # µ (U+00B5 micro sign) has the compatibility mapping to μ (U+03BC), Unicode UAX #15 NFKC
    assert units.tolist() == [1, 1, 1, 1, 0, 0, 0, 0, 0]
    assert verdicts.tolist() == [0, 0, 0, 0, 1, 1, 0, 0, 0]


@pytest.mark.parametrize("bad,error", [
    ({"verdicts": ["not detected"]}, FeatureOptionError), ({"units": "mg/L"}, TypeError),
    ({"units": []}, FeatureOptionError), ({"units": ["mg/L", ""]}, FeatureOptionError),
])
def test_lexicon_errors_name_the_entry(bad, error):
    with pytest.raises(error, match=r"data\.lexicons\.(units|verdicts)"):
        WordFeaturizer(lexicons=bad)


def test_default_lexicons_are_usable():
    fz = WordFeaturizer(lexicons=DEFAULT_LEXICONS)
    assert [n for n in fz.feature_names if n.startswith("lexicon:")] == \
        [f"lexicon:{n}" for n in DEFAULT_LEXICONS]


def test_featurizer_columns_and_groups():
    page = make_page(["Result", "0.25", ""], [[10, 10, 50, 20], [60, 10, 80, 20], [0, 0, 0, 0]])
    full = WordFeaturizer().fit([page])
    x = full.transform(page)
    assert FEATURE_GROUPS == ("geometry", "text_flags", "char_cnn")
    assert x.dtype == np.float32 and x.shape == (3, len(full.feature_names))
    assert x.shape[1] == len(GEOMETRY_NAMES) + len(TEXT_FLAG_NAMES) and np.isfinite(x).all()
    geo = WordFeaturizer(groups=("geometry", "char_cnn")).fit([page])
    assert geo.uses_char_cnn and not full.uses_char_cnn
    np.testing.assert_array_equal(geo.transform(page), x[:, :len(GEOMETRY_NAMES)])
    assert WordFeaturizer(groups=("char_cnn",)).fit([]).transform(page).shape == (3, 0)
    np.testing.assert_array_equal(geo.char_ids(page), char_ids(page.texts, 16))
    # determinism: a second featurizer gives the same bytes
    np.testing.assert_array_equal(WordFeaturizer().fit([page]).transform(page), x)
    empty = make_page([], np.zeros((0, 4)))
    assert full.transform(empty).shape == (0, x.shape[1])


def test_featurizer_refuses_bad_input():
    with pytest.raises(ValueError, match="unknown or no feature group"):
        WordFeaturizer(groups=("geometry", "layout_magic"))
    with pytest.raises(RuntimeError, match="before fit"):
        WordFeaturizer().transform(make_page(["a"], [[0, 0, 1, 1]]))
    fz = WordFeaturizer().fit([])
    with pytest.raises(ValueError, match=r"page coa-1#p1, word_id 1: box"):
        fz.transform(make_page(["a", "b"], [[0, 0, 1, 1], [5, 0, 2, 1]]))
    with pytest.raises(ValueError, match="boxes have shape"):
        fz.transform(Page("coa-1", 1, np.arange(2), ["a", "b"], np.zeros((1, 4)), 10.0, 10.0))
    with pytest.raises(ValueError, match="page size"):
        fz.transform(make_page(["a"], [[0, 0, 1, 1]], width=0.0))


def test_standardize_matches_sklearn_standard_scaler():
    train = [make_page(["Lot", "12.5", "mg/L"], [[10, 10, 30, 20], [40, 10, 60, 20],
                                                  [70, 10, 90, 22]]),
             make_page(["Client:", "Verdant", "Labs"], [[5, 40, 45, 52], [50, 40, 90, 52],
                                                         [95, 40, 120, 52]])]
    test = make_page(["Sample", "2026-03-14"], [[10, 70, 40, 80], [50, 70, 100, 80]])
    raw = WordFeaturizer().fit(train)
    scaled = WordFeaturizer(standardize=True).fit(train)
    # reference: sklearn StandardScaler fitted on the training words only (population std,
    # constant columns left unscaled)
    reference = StandardScaler().fit(np.concatenate([raw.transform(p) for p in train]))
    np.testing.assert_allclose(scaled.transform(test), reference.transform(raw.transform(test)),
                               rtol=1e-5, atol=1e-5)
    with pytest.raises(ValueError, match="at least one word"):
        WordFeaturizer(standardize=True).fit([])


@pytest.mark.parametrize("decimals", [0, 1, 3])
def test_rank_columns_are_scipy_average_ranks(decimals):
    # reference: scipy.stats.rankdata(method="average"), scaled (r - 1) / (n - 1); rounding the
    # centres makes ties common
    from scipy.stats import rankdata

    rng = np.random.default_rng(decimals)
    boxes = np.round(rng.uniform(0, 90, (60, 2)), decimals)
    boxes = np.column_stack([boxes, boxes + 5])
    g = geometry_features(make_page([""] * len(boxes), boxes.tolist(), width=100, height=100))
    for column, axis in (("rank_x", 0), ("rank_y", 1)):
        centres = (boxes[:, axis] + boxes[:, axis + 2]) / 2
        expected = (rankdata(centres, method="average") - 1) / (len(centres) - 1)
        np.testing.assert_allclose(g[:, GEOMETRY_NAMES.index(column)], expected, atol=1e-6)


# ---------------------------------------------------------------- characters

def test_char_ids_padding_unknown_truncation():
    ids = char_ids(["pH", "", "字µ±°", "abcdefghij"], max_chars=4)
    assert ids.dtype == np.int64 and ids.shape == (4, 4)
    assert ids[0].tolist() == [CHAR_VOCAB.index("p") + 2, CHAR_VOCAB.index("H") + 2, 0, 0]
    assert ids[1].tolist() == [0, 0, 0, 0]                        # empty: all padding
    assert ids[2, 0] == 1 and (ids[2, 1:] > 1).all()              # CJK unknown, µ ± ° known
    assert ids[3].tolist() == char_ids(["abcd"], 4)[0].tolist()   # truncated to the first 4
    assert CHAR_VOCAB_SIZE == len(CHAR_VOCAB) + 2 == len(set(CHAR_VOCAB)) + 2
    assert char_ids(["~" * 20], 20).max() < CHAR_VOCAB_SIZE


@pytest.mark.parametrize("max_chars", [1, 3, 16])
def test_char_ids_match_the_vocabulary_position_of_each_character(max_chars):
    # the id is the character's position in CHAR_VOCAB plus 2 (the module docstring's rule),
    # looked up one character at a time; texts mix NUL, astral and out-of-vocabulary characters
    rng = np.random.default_rng(0)
    alphabet = list(CHAR_VOCAB[:40]) + ["\0", "字", "\U0001F600", "✗", "✘", "µ"]
    texts = ["".join(rng.choice(alphabet, size=int(rng.integers(0, 20)))) for _ in range(300)]
    texts += ["\0", "a\0", "\0\0b"]
    expected = np.zeros((len(texts), max_chars), dtype=np.int64)
    for row, text in enumerate(texts):
        for column, ch in enumerate(text[:max_chars]):
            expected[row, column] = CHAR_VOCAB.index(ch) + 2 if ch in CHAR_VOCAB else 1
    np.testing.assert_array_equal(char_ids(texts, max_chars), expected)
    with pytest.raises(TypeError, match="text 1 is NoneType"):
        char_ids(["a", None], max_chars)


def test_char_cnn_hand_computed_case():
    # embedding_dim=1, one kernel of width 2, one channel, output 2*p + 0.1.
    # "ab" -> ids (a, b, pad, pad), embeddings e = (-0.2, -0.1, 0, 0); w = (1, 1), b = 0.5.
    # windows starting on real characters: relu(0.5 - 0.2 - 0.1) = 0.2, relu(0.5 - 0.1 + 0) = 0.4
    # max = 0.4 -> output 2 * 0.4 + 0.1 = 0.9. (A window starting on padding would give 0.5.)
    enc = CharCNNEncoder(vocab_size=4, embedding_dim=1, channels=1, kernel_sizes=(2,), out_dim=1)
    with torch.no_grad():
        enc.embedding.weight.copy_(torch.tensor([[0.0], [0.0], [-0.2], [-0.1]]))
        enc.convs[0].weight.copy_(torch.tensor([[[1.0, 1.0]]]))
        enc.convs[0].bias.fill_(0.5)
        enc.project.weight.fill_(2.0)
        enc.project.bias.fill_(0.1)
        out = enc(torch.tensor([[2, 3, 0, 0], [0, 0, 0, 0]]))
    # the empty word pools to 0, leaving only the output bias
    np.testing.assert_allclose(out.squeeze(1).numpy(), [0.9, 0.1], atol=1e-6)


def test_char_cnn_matches_conv1d_reference():
    # reference: torch.nn.functional.conv1d over each word's own characters (right-padded by
    # k-1 zeros), ReLU, max over positions, then torch.nn.functional.linear
    torch.manual_seed(0)
    enc = CharCNNEncoder(embedding_dim=5, channels=4, kernel_sizes=(1, 3), out_dim=3).eval()
    texts = ["12.5", "mg/L", "Ω", "Certificate of"]
    ids = torch.from_numpy(char_ids(texts, 10))
    with torch.no_grad():
        out = enc(ids)
        for row, text in enumerate(texts):
            m = min(len(text), 10)
            e = enc.embedding.weight[ids[row, :m]].T.unsqueeze(0)        # (1, D, m)
            pooled = [F.relu(F.conv1d(F.pad(e, (0, k - 1)), conv.weight, conv.bias)).amax(2)
                      for k, conv in zip(enc.kernel_sizes, enc.convs)]
            expected = F.linear(torch.cat(pooled, 1), enc.project.weight, enc.project.bias)
            torch.testing.assert_close(out[row:row + 1], expected, rtol=1e-5, atol=1e-6)


def test_char_cnn_gradients_match_conv1d_reference():
    # reference: the rule of the module docstring by torch.nn.functional.conv1d over each
    # word's own characters (right-padded by k-1 zeros), ReLU, max over positions, summed
    # with fixed weights; autograd of that gives the expected gradients. Words repeat whole
    # ("0000" twice) and repeat windows inside ("00000000", "aaaa"), which a max must count once
    torch.manual_seed(2)
    enc = CharCNNEncoder(embedding_dim=3, channels=5, kernel_sizes=(2, 4), out_dim=2)
    texts = ["00000000", "0000", "aaaa", "", "Lot 12", "0000", "mg/kg", "x"]
    ids = torch.from_numpy(char_ids(texts, 8))
    weights = torch.randn(len(texts), 10)
    parameters = [enc.embedding.weight, *(p for c in enc.convs for p in c.parameters())]
    got = torch.autograd.grad((enc._pool(ids) * weights).sum(), parameters)
    expected_loss = 0.0
    for row, text in enumerate(texts):
        m = min(len(text), 8)
        if m == 0:
            continue
        e = enc.embedding(ids[row, :m]).T.unsqueeze(0)                    # (1, D, m)
        pooled = torch.cat([F.relu(F.conv1d(F.pad(e, (0, k - 1)), conv.weight, conv.bias))
                            .amax(2) for k, conv in zip(enc.kernel_sizes, enc.convs)], 1)
        expected_loss = expected_loss + (pooled[0] * weights[row]).sum()
    expected = torch.autograd.grad(expected_loss, parameters)
    for g, e in zip(got, expected):
        torch.testing.assert_close(g, e, rtol=1e-5, atol=1e-6)


def test_char_cnn_shape_padding_invariance_and_gradients():
    torch.manual_seed(1)
    enc = CharCNNEncoder(out_dim=8)
    short = torch.from_numpy(char_ids(["Complies", "ND", "", "1,200.00 mg/kg!"], 16))
    long = F.pad(short, (0, 14))     # the same words with 14 more padding positions
    out = enc(short)
    assert out.shape == (4, 8)
    torch.testing.assert_close(enc(long), out, rtol=0, atol=1e-6)
    out.sum().backward()
    grad = enc.embedding.weight.grad
    assert grad[0].abs().sum() == 0                     # padding row never learns
    assert grad[short[0, 0]].abs().sum() > 0            # a used character does
    assert all(c.weight.grad.abs().sum() > 0 for c in enc.convs)
    torch.manual_seed(1)
    torch.testing.assert_close(CharCNNEncoder(out_dim=8)(short), out, rtol=0, atol=0)
    with pytest.raises(ValueError, match="ids must lie in"):
        enc(torch.tensor([[CHAR_VOCAB_SIZE]]))


def _char_wb_oracle(text: str, n_features: int, low: int, high: int) -> np.ndarray:
    # brute force of scikit-learn's documented char_wb analyser (n-grams inside word
    # boundaries, words padded with one space each side, lowercased) and its hashing trick:
    # index = |murmurhash3_32(ngram, seed=0)| mod n_features, counts, then L2 normalisation
    row = np.zeros(n_features)
    for word in text.lower().split():
        padded = f" {word} "
        for n in range(low, high + 1):
            for start in range(max(1, len(padded) - n + 1)):
                row[abs(murmurhash3_32(padded[start:start + n], seed=0)) % n_features] += 1
    norm = np.linalg.norm(row)
    return row / norm if norm else row


def test_char_ngram_hashes_against_sklearn_and_oracle():
    texts = ["Certificate", "mg/L", "", "Lot 2041-B", "PASS"]
    x = char_ngram_hashes(texts, n_features=64, ngram_range=(1, 3))
    assert x.dtype == np.float32 and x.shape == (5, 64)
    # reference: HashingVectorizer with the documented parameters
    ref = HashingVectorizer(analyzer="char_wb", ngram_range=(1, 3), n_features=64,
                            alternate_sign=False, norm="l2").transform(texts).toarray()
    np.testing.assert_allclose(x, ref, rtol=1e-6)
    oracle = np.array([_char_wb_oracle(t, 64, 1, 3) for t in texts])
    np.testing.assert_allclose(x, oracle, rtol=1e-5, atol=1e-6)
    assert not x[2].any()
    np.testing.assert_array_equal(char_ngram_hashes(texts, 64), x)     # deterministic
    assert char_ngram_hashes([], 32).shape == (0, 32)


# ---------------------------------------------------------------- FUNSD

def _funsd_pages(limit: int) -> list[Page]:
    folder = FUNSD / "training_data" / "annotations"
    if not folder.is_dir():
        if os.environ.get("DOCHAR_REQUIRE_DATASETS") == "1":
            pytest.fail(f"FUNSD required (DOCHAR_REQUIRE_DATASETS=1) but {folder} is missing")
        pytest.skip(f"FUNSD not found at {folder}")
    pages = []
    for path in sorted(folder.glob("*.json"))[:limit]:
        image = FUNSD / "training_data" / "images" / f"{path.stem}.png"
        # PNG spec (W3C, section 11.2.2): IHDR comes first; width, height are big-endian
        # uint32 at bytes 16-23 of the file
        width, height = struct.unpack(">II", image.read_bytes()[16:24])
        words = [w for entity in json.loads(path.read_text())["form"] for w in entity["words"]]
        pages.append(make_page([w["text"] for w in words], [w["box"] for w in words],
                               float(width), float(height), doc_id=path.stem))
    return pages


def test_funsd_pages_featurise_finite():
    pages = _funsd_pages(limit=6)
    fz = WordFeaturizer(groups=FEATURE_GROUPS, lexicons=DEFAULT_LEXICONS).fit(pages)
    encoder = CharCNNEncoder()
    for page in pages:
        x = fz.transform(page)
        assert x.shape == (len(page), len(fz.feature_names)) and np.isfinite(x).all()
        empty = x[:, fz.feature_names.index("text:empty")]
        np.testing.assert_array_equal(empty, [float(not t.strip()) for t in page.texts])
        with torch.no_grad():
            assert torch.isfinite(encoder(torch.from_numpy(fz.char_ids(page)))).all()


@pytest.mark.parametrize("dtype, high", [(np.int16, 90), (np.int64, 90), (np.int64, 70_000)])
def test_distinct_rows_are_sorted_by_their_bytes_with_each_rows_index(dtype, high):
    """Oracle: Python's sort of each row's raw bytes (NumPy's order for a row as one block of
    bytes), first occurrences kept; ids of one byte, two bytes and three bytes."""
    from dochar.features.char_cnn import _distinct_rows

    rng = np.random.default_rng(7)
    block = rng.integers(0, high, (60, 5)).astype(dtype)
    block = np.concatenate([block, block[::3], np.zeros((2, 5), dtype)])
    order = sorted({row.tobytes(): i for i, row in reversed(list(enumerate(block)))}.items())
    distinct, index = _distinct_rows(block)
    np.testing.assert_array_equal(distinct, block[[i for _, i in order]])
    position = {key: p for p, (key, _) in enumerate(order)}
    assert index.tolist() == [position[row.tobytes()] for row in block]
