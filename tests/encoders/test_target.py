"""TargetStatistics: published check values, scikit-learn's TargetEncoder, errors.

Every published value below is recomputed from its formula in the test before it is
compared with the encoder; the source is named beside each check.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import roc_auc_score
from sklearn.model_selection import KFold, ShuffleSplit, StratifiedKFold
from sklearn.preprocessing import TargetEncoder

from harness.encoders import build
from harness.encoders._target import TargetStatistics, smooth
from harness.errors import ConfigError, EncoderInputError


def one_column(values) -> pd.DataFrame:
    return pd.DataFrame({"x": pd.Series(values, dtype=object)})


def make_data(rng, target: str, n_rows: int = 240):
    """Tiny synthetic data: three columns (strings, floats, many rare levels) with NaN."""
    color = rng.choice(["red", "green", "blue", "grey", "pink"], size=n_rows).astype(object)
    color[rng.random(n_rows) < 0.1] = np.nan
    size = rng.integers(0, 12, size=n_rows).astype(float)
    size[rng.random(n_rows) < 0.1] = np.nan
    shop = rng.choice([f"s{i}" for i in range(40)], size=n_rows).astype(object)
    X = pd.DataFrame({"color": color, "size": size, "shop": shop})
    signal = (pd.Series(color).map({"red": 1.0, "green": -1.0}).fillna(0.0)).to_numpy()
    latent = signal + rng.normal(size=n_rows)
    if target == "binary":
        y = (latent > 0).astype(int)
    elif target == "multiclass":
        y = np.array(["lo", "mid", "hi"], dtype=object)[np.digitize(latent, [-0.5, 0.5])]
    else:
        y = 3.0 * latent + 10.0
    return X, y


def splitter(target: str):
    if target == "continuous":
        return KFold(5, shuffle=True, random_state=0)
    return StratifiedKFold(5, shuffle=True, random_state=0)


# --- scikit-learn's TargetEncoder (read in its source, version 1.9.1) -------------------
@pytest.mark.parametrize(
    "ours, theirs",
    [
        # scikit-learn's numeric `smooth` is the m-estimate (Cestnik 1990)
        ({"smoothing": "m-estimate", "m": 3.0}, 3.0),
        ({"smoothing": "m-estimate", "m": 0.0}, 0.0),
        ({"smoothing": "empirical-bayes"}, "auto"),
    ],
)
@pytest.mark.parametrize("target", ["binary", "multiclass", "continuous"])
def test_kfold_matches_sklearn_target_encoder(rng, target, ours, theirs):
    # same splitter, NaN as its own level (scikit-learn's convention)
    X, y = make_data(rng, target)
    reference = TargetEncoder(smooth=theirs, cv=splitter(target))
    encoder = TargetStatistics(cv=splitter(target), missing="category", **ours)
    np.testing.assert_allclose(encoder.fit_transform(X, y), reference.fit_transform(X, y), rtol=0, atol=1e-10)
    np.testing.assert_allclose(encoder.transform(X), reference.transform(X), rtol=0, atol=1e-10)
    fitted = TargetStatistics(missing="category", **ours).fit(X, y)
    reference_fit = TargetEncoder(smooth=theirs).fit(X, y)  # fit: full data, no splitter
    np.testing.assert_allclose(fitted.transform(X), reference_fit.transform(X), rtol=0, atol=1e-10)


@pytest.mark.parametrize("target", ["binary", "multiclass", "continuous"])
def test_feature_names_follow_sklearn_column_order(rng, target):
    X, y = make_data(rng, target)
    names = list(TargetStatistics().fit(X, y).get_feature_names_out())
    reference = list(TargetEncoder().fit(X, y).get_feature_names_out())
    if target == "multiclass":  # feature-major: f0_c0, f0_c1, ... with sorted classes
        classes = np.unique(y)
        assert reference == [f"{c}_{k}" for c in X.columns for k in classes]
        assert names == [f"{c}__target_{k}" for c in X.columns for k in classes]
    else:
        assert names == [f"{c}__target" for c in reference]


def test_docstring_example_of_sklearn_target_encoder():
    # scikit-learn 1.9.1 TargetEncoder docstring example (digits as printed there)
    X = one_column(["dog"] * 20 + ["cat"] * 30 + ["snake"] * 38)
    y = np.array([90.3] * 5 + [80.1] * 15 + [20.4] * 5 + [20.1] * 25 + [21.2] * 8 + [49] * 30)
    prior = y.mean()
    assert prior == pytest.approx(44.28522727, abs=1e-8)
    groups = [y[20:50], y[:20], y[50:]]  # cat, dog, snake (lexical level order)
    m_estimate = [(g.sum() + 1.0 * prior) / (len(g) + 1.0) for g in groups]
    tau2 = y.var()  # ddof 0, as scikit-learn
    lam = [tau2 * len(g) / (tau2 * len(g) + ((g - g.mean()) ** 2).sum() / len(g)) for g in groups]
    auto = [lam_c * g.mean() + (1 - lam_c) * prior for lam_c, g in zip(lam, groups)]
    np.testing.assert_allclose(m_estimate, [20.928556, 80.823106, 43.176544], atol=1e-6)
    np.testing.assert_allclose(auto, [20.150017, 82.58706, 43.153812], atol=1e-6)
    low = TargetStatistics(smoothing="m-estimate", m=1.0).fit(X, y)
    auto_fit = TargetStatistics(smoothing="empirical-bayes").fit(X, y)
    assert list(low.levels_[0]) == ["cat", "dog", "snake"]
    # rows 0-2: the levels; under the default missing="category" a last row holds the missing level
    np.testing.assert_allclose(low.encodings_[0][:3, 0], m_estimate, rtol=0, atol=1e-12)
    np.testing.assert_allclose(auto_fit.encodings_[0][:3, 0], auto, rtol=0, atol=1e-12)


# --- sigmoid blending: Micci-Barreca (2001), SIGKDD Explorations 3(1), eq. 3-4 -----------
@pytest.mark.parametrize(
    "n, positives, prior, k, f, expected",
    [  # Micci-Barreca (2001), SIGKDD Explorations 3(1), eq. 3-4; values recomputed below
        (2, 2, 1 / 3, 1.0, 1.0, 0.8207057191),
        (1, 1, 1 / 3, 1.0, 1.0, 0.6666666667),
        (5, 1, 0.5, 10.0, 20.0, 0.3686529503),
        (100, 30, 0.2, 1.0, 1.0, 0.3),
    ],
)
def test_sigmoid_blend_micci_barreca(n, positives, prior, k, f, expected):
    lam = 1.0 / (1.0 + np.exp(-(n - k) / f))
    by_formula = lam * positives / n + (1 - lam) * prior
    assert by_formula == pytest.approx(expected, abs=1e-9)
    # level "a" holds the n rows; one negative row of level "b" keeps both classes present
    X = one_column(["a"] * n + ["b"])
    y = np.r_[np.ones(positives), np.zeros(n - positives), 0]
    enc = TargetStatistics(smoothing="sigmoid", ramp_center=k, ramp_width=f, prior=prior).fit(X, y)
    assert enc.encodings_[0][0, 0] == pytest.approx(by_formula, abs=1e-12)


@pytest.mark.parametrize(
    "n, expected_weight",
    [(3, 0.0), (5, 0.5), (7, 1.0)],  # f -> 0 is a hard step at n = k (Micci-Barreca 2001)
)
def test_sigmoid_zero_width_is_a_step(n, expected_weight):
    total, prior = np.array([[2.0]]), np.array([[0.1]])
    out = smooth(np.array([n]), total, None, prior, None, smoothing="sigmoid", ramp_center=5, ramp_width=0)
    assert out[0, 0] == pytest.approx(expected_weight * 2.0 / n + (1 - expected_weight) * 0.1)


def test_sigmoid_infinite_width_weighs_half():
    # f -> infinity gives lambda -> 1/2 (Micci-Barreca 2001, eq. 4)
    total, prior = np.array([[50.0]]), np.array([[0.0]])
    out = smooth(np.array([50]), total, None, prior, None, smoothing="sigmoid", ramp_center=1, ramp_width=1e12)
    assert out[0, 0] == pytest.approx(0.5 * 1.0 + 0.5 * 0.0)


# --- m-estimate: Cestnik (1990), ECAI'90 (formula recalled from memory) ---------------------
@pytest.mark.parametrize(
    "n, positives, prior, m, expected",
    [(2, 2, 1 / 3, 1.0, 0.7778), (10, 3, 0.5, 2.0, 0.3333)],  # Cestnik (1990), ECAI; formula recalled from memory
)
def test_m_estimate_cestnik(n, positives, prior, m, expected):
    by_formula = (positives + m * prior) / (n + m)
    assert by_formula == pytest.approx(expected, abs=5e-5)
    X = one_column(["a"] * n + ["b"])
    y = np.r_[np.ones(positives), np.zeros(n - positives), 0]
    enc = TargetStatistics(smoothing="m-estimate", m=m, prior=prior).fit(X, y)
    assert enc.encodings_[0][0, 0] == pytest.approx(by_formula, abs=1e-12)


@pytest.mark.parametrize("smoothing", ["none", "m-estimate", "sigmoid", "empirical-bayes"])
def test_level_over_no_rows_gets_the_prior(smoothing):
    # n = 0 -> prior (Cestnik 1990 for the m-estimate; common practice for the others)
    z = np.zeros((1, 1))
    prior, tau2 = np.array([[0.3]]), np.array([[0.2]])
    out = smooth(np.array([0]), z, z, prior, tau2, smoothing=smoothing, m=0.0)
    assert out[0, 0] == pytest.approx(0.3)


@pytest.mark.parametrize("smoothing", ["none", "m-estimate", "sigmoid", "empirical-bayes"])
@pytest.mark.parametrize("missing", ["prior", "category"])
def test_unseen_and_missing_values_at_transform(rng, smoothing, missing):
    # unseen -> prior: common practice, no source (scikit-learn's TargetEncoder does it too)
    X, y = make_data(rng, "binary")
    enc = TargetStatistics(smoothing=smoothing, missing=missing).fit(X, y)
    new = pd.DataFrame({"color": ["violet", np.nan], "size": [99.0, np.nan], "shop": ["zz", np.nan]})
    out = enc.transform(new)
    np.testing.assert_allclose(out[0], y.mean())  # unseen -> prior
    if missing == "prior":
        np.testing.assert_allclose(out[1], y.mean())
    else:  # missing is a level: its rows' statistic, not the prior
        assert out[1, 0] == pytest.approx(enc.encodings_[0][-1, 0])
        assert out[1, 0] != pytest.approx(y.mean())


# --- ordered target statistics: Prokhorenkova et al. (2018), NeurIPS ----------------------
def test_ordered_target_statistics_toy_example():
    # Prokhorenkova et al. (2018), NeurIPS, Sec. 3.2 (ordered TS); toy example a=1, p=0.5, order A,B,A,A,B, y=1,0,0,1,1
    levels, y, a, p = ["A", "B", "A", "A", "B"], np.array([1, 0, 0, 1, 1]), 1.0, 0.5
    by_formula = [
        (sum(y[j] for j in range(k) if levels[j] == levels[k]) + a * p)
        / (sum(levels[j] == levels[k] for j in range(k)) + a)
        for k in range(len(y))
    ]
    np.testing.assert_allclose(by_formula, [0.5, 0.5, 0.75, 0.5, 0.25])
    enc = TargetStatistics(crossfit="ordered", smoothing="m-estimate", m=a, prior=p)
    out = enc._fit_transform(one_column(levels), y, permutation=np.arange(5))
    np.testing.assert_allclose(out[:, 0], by_formula, rtol=0, atol=1e-12)
    # test rows use all training rows: A = (2 + 0.5)/(3 + 1), B = (1 + 0.5)/(2 + 1)
    test_time = enc.transform(one_column(["A", "B"]))[:, 0]
    np.testing.assert_allclose(test_time, [(2 + a * p) / (3 + a), (1 + a * p) / (2 + a)])
    np.testing.assert_allclose(test_time, [0.625, 0.5])


def test_ordered_permutation_comes_from_random_state(rng):
    X, y = make_data(rng, "binary")
    first = TargetStatistics(crossfit="ordered", random_state=3).fit_transform(X, y)
    again = TargetStatistics(crossfit="ordered", random_state=3).fit_transform(X, y)
    other = TargetStatistics(crossfit="ordered", random_state=4).fit_transform(X, y)
    np.testing.assert_array_equal(first, again)
    assert not np.allclose(first, other)


@pytest.mark.parametrize("learned_prior", [False, True])
def test_leave_one_out_separates_the_classes_of_a_constant_feature(learned_prior):
    # Prokhorenkova et al. (2018), NeurIPS: leave-one-out leaks; n=10, n+=4, a=1, p=0.4
    n, n_pos, a, p = 10, 4, 1.0, 0.4
    y = np.r_[np.ones(n_pos), np.zeros(n - n_pos)]
    prior = None if learned_prior else p
    enc = TargetStatistics(crossfit="loo", smoothing="m-estimate", m=a, prior=prior)
    out = enc.fit_transform(one_column(["c"] * n), y)[:, 0]
    if not learned_prior:
        expected = (n_pos - y + a * p) / (n - 1 + a)
        np.testing.assert_allclose(expected[y == 1], 0.34)
        np.testing.assert_allclose(expected[y == 0], 0.44)
        np.testing.assert_allclose(out, expected, rtol=0, atol=1e-12)
    # a feature carrying no information ranks every positive below every negative
    assert out[y == 1].max() < out[y == 0].min()
    assert roc_auc_score(y, out) == 0.0


# --- weight of evidence: Siddiqi (2006), Credit Risk Scorecards ----------------------------
def woe_data(cells: dict[str, tuple[int, int]]):
    """One row per (positive, negative) count of each level; positives are Siddiqi's goods."""
    levels = np.repeat(list(cells), [g + b for g, b in cells.values()])
    y = np.concatenate([np.r_[np.ones(g), np.zeros(b)] for g, b in cells.values()])
    return one_column(levels), y


def test_weight_of_evidence_siddiqi():
    # (G=900 goods, B=100 bads): (300, 50) -> -0.405465, (600, 30) -> 0.798508
    # (Siddiqi 2006, Credit Risk Scorecards, Wiley: WoE formula; check values recalled from memory,
    # recomputed below)
    cells = {"a": (300, 50), "b": (600, 30), "c": (0, 20)}
    X, y = woe_data(cells)
    G, B = 900, 100
    assert (y == 1).sum() == G and (y == 0).sum() == B
    expected = [np.log((300 / G) / (50 / B)), np.log((600 / G) / (30 / B))]
    np.testing.assert_allclose(expected, [-0.405465, 0.798508], atol=1e-6)
    # zero cell: 0.5 replaces the zero count of goods (Siddiqi 2006; recalled from memory)
    expected.append(np.log((0.5 / G) / (20 / B)))
    enc = TargetStatistics(statistic="woe", smoothing="none").fit(X, y)
    np.testing.assert_allclose(enc.encodings_[0][:3, 0], expected, rtol=0, atol=1e-12)  # [3]: the missing level
    np.testing.assert_allclose(enc.transform(one_column(["unseen"])), [[0.0]])


def test_weight_of_evidence_zero_bad_cell():
    # a level with no bads: 0.5 replaces its zero count (Siddiqi 2006, recalled from memory)
    X, y = woe_data({"a": (10, 0), "b": (5, 5)})
    enc = TargetStatistics(statistic="woe", smoothing="none").fit(X, y)
    G, B = 15, 5
    np.testing.assert_allclose(enc.encodings_[0][0, 0], np.log((10 / G) / (0.5 / B)))


def test_weight_of_evidence_of_a_smoothed_rate(rng):
    # logit(rate) - logit(prior): Siddiqi's WoE rewritten (common practice, no source)
    X, y = make_data(rng, "binary")
    mean = TargetStatistics(m=5.0).fit(X, y)
    woe = TargetStatistics(m=5.0, statistic="woe").fit(X, y)
    logit = lambda p: np.log(p / (1 - p))  # noqa: E731
    np.testing.assert_allclose(woe.encodings_[0], logit(mean.encodings_[0]) - logit(y.mean()))


# --- the other schemes and options ----------------------------------------------------------
@pytest.mark.parametrize("fraction", [0.3, 0.5])
def test_holdout_encodes_each_part_from_the_other(rng, fraction):
    # our own scheme (documented in _crossfit.holdout_folds), checked by direct group means
    X, y = make_data(rng, "continuous", n_rows=200)
    enc = TargetStatistics(crossfit="holdout", holdout_fraction=fraction, smoothing="none", random_state=0)
    out = enc.fit_transform(X[["color"]], y)[:, 0]
    part = np.random.RandomState(0).permutation(200)[: int(round(fraction * 200))]
    held = np.zeros(200, dtype=bool)
    held[part] = True
    color = X["color"].fillna("?").to_numpy()
    for source, target in ((held, ~held), (~held, held)):  # loop over the two parts
        means = pd.Series(y[source]).groupby(color[source]).mean()
        expected = pd.Series(color[target]).map(means).to_numpy(dtype=float, copy=True)
        # missing is a level of its own ("?"); a level absent from the other part -> its prior
        expected[np.isnan(expected)] = y[source].mean()
        np.testing.assert_allclose(out[target], expected, rtol=0, atol=1e-12)


@pytest.mark.parametrize("crossfit", ["none", "kfold", "loo", "ordered", "holdout"])
def test_noise_only_on_training_encodings(rng, crossfit):
    # Gaussian noise on training encodings only: common practice, no source
    X, y = make_data(rng, "binary", n_rows=2000)
    clean = TargetStatistics(crossfit=crossfit, random_state=1)
    noisy = TargetStatistics(crossfit=crossfit, random_state=1, noise=0.05)
    clean_out, noisy_out = clean.fit_transform(X, y), noisy.fit_transform(X, y)
    diff = noisy_out - clean_out
    assert diff.std() == pytest.approx(0.05, rel=0.1)
    np.testing.assert_array_equal(noisy.transform(X), clean.transform(X))
    again = TargetStatistics(crossfit=crossfit, random_state=1, noise=0.05).fit_transform(X, y)
    np.testing.assert_array_equal(noisy_out, again)


def test_in_sample_crossfit_equals_fit_then_transform(rng):
    # by definition: without cross-fitting the training rows use the full-data tables
    X, y = make_data(rng, "multiclass")
    enc = TargetStatistics(crossfit="none")
    np.testing.assert_allclose(enc.fit_transform(X, y), enc.transform(X), rtol=0, atol=1e-14)


@pytest.mark.parametrize("target", ["binary", "multiclass", "continuous"])
def test_target_type_and_classes(rng, target):
    X, y = make_data(rng, target)
    enc = TargetStatistics().fit(X, y)
    assert enc.target_type_ == target
    if target == "continuous":
        assert enc.classes_ is None
    else:
        np.testing.assert_array_equal(enc.classes_, np.unique(y))
    assert enc.transform(X).shape == (len(y), 3 * (3 if target == "multiclass" else 1))


def test_registry_builds_the_target_kind():
    enc = build("target", crossfit="loo", smoothing="sigmoid")
    assert isinstance(enc, TargetStatistics) and enc.crossfit == "loo"


def test_set_output_pandas(rng):
    X, y = make_data(rng, "binary")
    out = TargetStatistics().set_output(transform="pandas").fit(X, y).transform(X)
    assert list(out.columns) == ["color__target", "size__target", "shop__target"]


# --- errors -----------------------------------------------------------------------------
@pytest.mark.parametrize(
    "params, match",
    [
        ({"smoothing": "laplace"}, "'smoothing' must be one of .*got 'laplace'"),
        ({"crossfit": "kfolds"}, "Closest match: 'kfold'"),
        ({"statistic": "median"}, "'statistic' must be one of"),
        ({"missing": "drop"}, "'missing' must be one of"),
        ({"target_type": "ordinal"}, "'target_type' must be one of"),
        ({"m": -1.0}, r"'m' must be a finite number >= 0; got -1.0"),
        ({"m": True}, "'m' must be a finite number"),
        ({"ramp_width": -2}, "'ramp_width' must be a finite number"),
        ({"ramp_center": np.nan}, "'ramp_center' must be a finite number"),
        ({"noise": -0.1}, "'noise' must be a finite number"),
        ({"holdout_fraction": 1.0}, r"'holdout_fraction' must be a finite number in \(0, 1\)"),
        ({"prior": "half"}, "'prior' must be None or a finite number"),
        ({"cv": 1}, r"'cv' must be an integer in \[2, 1000\] or a scikit-learn splitter"),
        ({"cv": "five"}, r"'cv' must be an integer in \[2, 1000\]"),
        ({"cv": 10**9}, r"'cv' must be an integer in \[2, 1000\] .*; got 1000000000"),
        ({"noise": 1e300}, r"'noise' must be a finite number in \[0, 1e\+06\]"),
    ],
)
def test_invalid_parameters(rng, params, match):
    X, y = make_data(rng, "binary", n_rows=30)
    with pytest.raises(ConfigError, match=match):
        TargetStatistics(**params).fit(X, y)


@pytest.mark.parametrize("target", ["multiclass", "continuous"])
def test_weight_of_evidence_needs_a_binary_target(rng, target):
    X, y = make_data(rng, target, n_rows=30)
    with pytest.raises(EncoderInputError, match=f"needs a binary target; got a {target} target"):
        TargetStatistics(statistic="woe").fit(X, y)


def test_binary_target_type_with_three_classes(rng):
    X, y = make_data(rng, "multiclass", n_rows=30)
    with pytest.raises(EncoderInputError, match="got 3 classes; a binary target has at most 2"):
        TargetStatistics(target_type="binary").fit(X, y)


def test_unknown_label_type():
    # scikit-learn's wording, which its check_dtype_object looks for
    y = np.array([0, 1, 2, 1], dtype=object)
    with pytest.raises(EncoderInputError, match="Unknown label type.*'unknown'"):
        TargetStatistics().fit(one_column(list("abab")), y)


def test_missing_class_label():
    y = np.array(["a", None, "b", "a"], dtype=object)
    with pytest.raises(EncoderInputError, match="the target has 1 missing label"):
        TargetStatistics(target_type="binary").fit(one_column(list("abab")), y)


@pytest.mark.parametrize(
    "params, n_rows, match",
    [
        ({"crossfit": "loo"}, 1, "needs at least 2 training rows; got 1"),
        ({"crossfit": "holdout", "holdout_fraction": 0.1}, 4, "leaves one part empty"),
        ({"crossfit": "kfold", "cv": 5}, 3, "needs at least 5 training rows; got 3"),
        ({"cv": ShuffleSplit(3, test_size=0.5, random_state=0)}, 10, "validation parts"),
    ],
)
def test_crossfit_needs_enough_rows_and_a_partition(params, n_rows, match):
    X, y = one_column(["a", "b"] * n_rows)[:n_rows], np.arange(n_rows) % 2
    with pytest.raises(EncoderInputError, match=match):
        TargetStatistics(**params).fit_transform(X, y)


class HalfTraining:
    """A splitter whose training parts are not the complement of its validation parts."""

    def get_n_splits(self, X=None, y=None, groups=None):
        return 2

    def split(self, X, y=None, groups=None):
        idx = np.arange(len(X))
        yield idx[:2], idx[len(X) // 2 :]
        yield idx[len(X) // 2 :], idx[: len(X) // 2]


def test_splitter_training_part_must_be_the_complement():
    X, y = one_column(list("abababab")), np.arange(8) % 2
    with pytest.raises(EncoderInputError, match="split 0 of `cv` has 2 training and 4 validation"):
        TargetStatistics(cv=HalfTraining()).fit_transform(X, y)


@pytest.mark.parametrize(
    "y",
    [
        np.array([True, False, True, True]),
        np.array([7, 3, 7, 7]),
        np.array([-1, 4, -1, -1]),
        np.array([70000, 3, 70000, 70000]),
        np.array(["yes", "no", "yes", "yes"], dtype=object),
    ],
)
def test_binary_labels_of_any_kind(y):
    # the positive class is the larger label (scikit-learn's LabelEncoder order)
    enc = TargetStatistics(crossfit="none", smoothing="none").fit(one_column(list("aabb")), y)
    assert enc.target_type_ == "binary"
    np.testing.assert_array_equal(enc.classes_, np.unique(y))
    positive = (y == np.unique(y)[1]).astype(float)
    np.testing.assert_allclose(enc.encodings_[0][:2, 0], [positive[:2].mean(), positive[2:].mean()])
