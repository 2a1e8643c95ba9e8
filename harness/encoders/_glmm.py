"""Random-intercept (GLMM) encoding: each level becomes its fitted intercept mu + u_c.

One random-intercept model per input column and target column, fitted from per-level
sufficient statistics only (count, target sum and, for a continuous target, squared
deviations), so the rows are read once by ``np.bincount`` and every fit costs work in
the number of levels, not rows:

- continuous target: ``y = mu + u_c + e``, ``u_c ~ N(0, tau^2)``, ``e ~ N(0, sigma^2)``;
  variance components by REML (a 1-D search over the ratio ``tau^2/sigma^2``), the
  encoding is the BLUP ``mu + tau^2 n_c/(tau^2 n_c + sigma^2) (ybar_c - mu)``;
- binary target: ``logit P(y=1) = mu + u_c``, marginal likelihood by the Laplace
  approximation (inner modes by Newton steps over all levels at once), the encoding is
  ``mu + u_hat_c`` on the logit scale;
- multiclass target: one binary model per class (one-vs-rest), one column per class.

Cross-fitting reuses ``_crossfit``: its per-(fold, level) cells hold exactly the
sufficient statistics of the other folds' rows, so each fold gets its own model.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import minimize, minimize_scalar
from scipy.special import expit
from sklearn.utils import check_random_state
from sklearn.utils.validation import _check_feature_names_in, check_consistent_length, check_is_fitted, column_or_1d

import harness.encoders._crossfit as _crossfit
from harness.encoders._base import CategoricalEncoder
from harness.encoders._rules import Interval, Nothing, Options, Seed, Splitter
from harness.encoders._supervised import TARGET_TYPES, _SupervisedLevels

__all__ = ["RandomInterceptCodes", "reml_one_way", "laplace_loglik", "fit_logistic"]

# leave-one-out and ordered schemes need one model per row; not offered
CROSSFITS = ("none", "kfold", "holdout")
MISSING_POLICIES = ("category", "prior")
# search range of log(tau^2/sigma^2): e^-30 is no level effect at any realistic count,
# e^15 is no shrinkage at all; the REML optimum may sit on either end
LOG_RATIO_BOUNDS = (-30.0, 15.0)
# search range of log(tau) on the logit scale: e^-8 is no level effect, e^4 (55 logits)
# is beyond any separable data
LOG_TAU_BOUNDS = (-8.0, 4.0)
NEWTON_TOL, NEWTON_MAX = 1e-10, 100


# --- continuous target: one-way random-effects ANOVA by REML ----------------------------
def reml_one_way(n, total, sq_dev):
    """REML fit of ``y = mu + u_c + e`` from per-level statistics.

    Parameters
    ----------
    n : ndarray of shape (K,)
        Rows per level (a level with none contributes nothing).
    total, sq_dev : ndarray of shape (K,)
        Per level, the sum of targets and the sum of squared deviations from their mean.

    Returns
    -------
    mu, tau2, sigma2 : float
        GLS intercept and the REML variance components.

    Notes
    -----
    With ``gamma = tau^2/sigma^2`` and ``w_c = n_c/(1 + gamma n_c)``, the GLS intercept is
    ``sum w_c ybar_c / sum w_c`` and, with ``sigma^2`` profiled out as ``Q/(N-1)``,
    ``Q = sum_c SS_c + w_c (ybar_c - mu)^2``, minus twice the REML log-likelihood is
    ``(N-1) log(Q/(N-1)) + sum_c log(1 + gamma n_c) + log(sum_c w_c)`` up to a constant
    (Searle, Casella & McCulloch 1992, Variance Components, ch. 6). A target without
    spread gets ``tau2 = sigma2 = 0``.
    """
    n = np.asarray(n, dtype=np.float64)
    keep = n > 0
    n, total, sq_dev = n[keep], np.asarray(total, float)[keep], np.asarray(sq_dev, float)[keep]
    n_rows = n.sum()
    mean = total / n
    within = sq_dev.sum()
    grand = total.sum() / n_rows if n_rows else 0.0
    if n_rows < 2 or within + np.sum(n * (mean - grand) ** 2) <= 0:
        return float(grand), 0.0, 0.0
    best = minimize_scalar(
        _reml_objective,
        bounds=LOG_RATIO_BOUNDS,
        method="bounded",
        args=(n, mean, within, n_rows),
        options={"xatol": 1e-10},
    )
    gamma = float(np.exp(best.x))
    mu, q = _gls(gamma, n, mean, within)
    sigma2 = q / (n_rows - 1)
    return mu, gamma * sigma2, sigma2


def _gls(gamma, n, mean, within):
    """GLS intercept and the residual form ``Q`` for a variance ratio ``gamma``."""
    w = n / (1.0 + gamma * n)
    mu = float(np.sum(w * mean) / np.sum(w))
    return mu, float(within + np.sum(w * (mean - mu) ** 2))


def _reml_objective(log_gamma, n, mean, within, n_rows):
    gamma = np.exp(log_gamma)
    _, q = _gls(gamma, n, mean, within)
    w_sum = np.sum(n / (1.0 + gamma * n))
    # q reaches 0 only when every level is constant: no residual variance left to fit
    return (n_rows - 1) * np.log(max(q, 1e-300) / (n_rows - 1)) + np.sum(np.log1p(gamma * n)) + np.log(w_sum)


def blup(n, total, mu, tau2, sigma2):
    """``mu + tau2 n/(tau2 n + sigma2) (ybar - mu)``; a level with no rows gets ``mu``."""
    n = np.asarray(n, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        lam = tau2 * n / (tau2 * n + sigma2)
        shrunk = mu + lam * (total / n - mu)
    # sigma2 == 0 with tau2 > 0 is no shrinkage; no spread at all (0/0) is mu
    return np.where((n > 0) & np.isfinite(shrunk), shrunk, mu)


# --- binary target: random-intercept logistic model by Laplace --------------------------
def _log_joint(u, mu, tau2, n, s):
    """Per level, ``log p(y_c | u) + log N(u; 0, tau2)`` (Bernoulli rows, no binomial term).

    ``s log sigmoid(eta) + (n - s) log sigmoid(-eta) = s eta - n log(1 + e^eta)``.
    """
    eta = mu + u
    return s * eta - n * np.logaddexp(0.0, eta) - 0.5 * (u * u / tau2 + np.log(2 * np.pi * tau2))


def _modes(mu, tau2, n, s, start=None):
    """Posterior mode of every level's ``u`` at once, the log joint there and ``p``.

    Newton steps on a strictly concave function; a step longer than 0.5 logits is
    halved, level by level, where it would lower the objective (a saturated logistic
    term can make a full step overshoot). ``start``
    (the modes at nearby parameters) saves steps during the outer search.
    """
    u = np.zeros_like(n) if start is None else start.copy()
    f = None
    for _ in range(NEWTON_MAX):
        p = expit(mu + u)
        step = (s - n * p - u / tau2) / (n * p * (1 - p) + 1.0 / tau2)
        if np.max(np.abs(step), initial=0.0) > 0.5:
            # only a long step can overshoot; near the mode Newton converges as is
            f = _log_joint(u, mu, tau2, n, s) if f is None else f
            step, f = _halved(step, u, f, mu, tau2, n, s)
        else:
            f = None
        u = u + step
        if np.max(np.abs(step), initial=0.0) < NEWTON_TOL:
            break
    f = _log_joint(u, mu, tau2, n, s) if f is None else f
    return u, f, expit(mu + u)


def _halved(step, u, f, mu, tau2, n, s):
    """Halve the step of every level whose log joint it would lower; the new log joint."""
    for _ in range(60):
        f_new = _log_joint(u + step, mu, tau2, n, s)
        worse = f_new < f - 1e-12 * np.abs(f)
        if not worse.any():
            break
        step = np.where(worse, step / 2, step)
    return step, f_new


def _laplace(mu, log_tau, n, s, start=None):
    """Laplace log-likelihood, its gradient in ``(mu, log_tau)`` and the modes.

    At the mode ``g_c = s_c - n_c p_c - u_c/tau2 = 0``; with ``w = n p (1-p)`` and the
    curvature ``H = w + 1/tau2``, implicit differentiation gives ``du/dmu = -w/H`` and
    ``du/dtau2 = u/(tau2^2 H)``. The log joint needs only its partial derivatives (its
    ``u``-derivative is 0 at the mode); ``-log(H)/2`` also moves through ``u``, by
    ``dH/du = dH/dmu = w (1 - 2p)``.
    """
    tau2 = np.exp(2.0 * log_tau)
    u, f, p = _modes(mu, tau2, n, s, start)
    w = n * p * (1 - p)
    curvature = w + 1.0 / tau2
    value = float(np.sum(f + 0.5 * np.log(2 * np.pi) - 0.5 * np.log(curvature)))
    bend = w * (1 - 2 * p) / curvature  # (dH/du) / H
    d_mu = np.sum(s - n * p) - 0.5 * np.sum(bend * (1 - w / curvature))
    d_tau2 = np.sum(0.5 * u * u / tau2**2 - 0.5 / tau2) - 0.5 * np.sum(
        (-1.0 / tau2**2 + bend * u / tau2**2) / curvature
    )
    return value, np.array([d_mu, 2.0 * tau2 * d_tau2]), u


def laplace_loglik(mu, log_tau, n, s):
    """Laplace approximation of the marginal log-likelihood of the logistic model.

    Parameters
    ----------
    mu, log_tau : float
        Intercept (logit scale) and log of the random-intercept standard deviation.
    n, s : ndarray of shape (K,)
        Rows and positives per level.

    Returns
    -------
    float
        ``sum_c [f_c(u_c) + log(2 pi)/2 - log(-f_c''(u_c))/2]``, ``f_c`` the log joint
        density of level ``c``'s rows and ``u_c``, at its mode ``u_c``.
    """
    n, s = np.asarray(n, dtype=np.float64), np.asarray(s, dtype=np.float64)
    return _laplace(mu, log_tau, n, s)[0]


def fit_logistic(n, s, start=None):
    """Maximise :func:`laplace_loglik` over ``(mu, log tau)`` (L-BFGS-B, exact gradient).

    Parameters
    ----------
    n, s : ndarray of shape (K,)
        Rows and positives per level.
    start : tuple (mu, log_tau, u), optional
        Where to start, e.g. the fit on all rows when fitting a fold of them.

    Returns
    -------
    mu, tau2 : float
    u : ndarray of shape (K,)
        Each level's mode ``u_hat`` (0 for a level with no rows).

    Notes
    -----
    ``mu`` is kept within the logits of ``0.5/(N+1)`` and ``(N+0.5)/(N+1)``, so a sample
    of one class gets a finite intercept (half a count added, as for weight of evidence).
    """
    n, s = np.asarray(n, dtype=np.float64), np.asarray(s, dtype=np.float64)
    n_rows, positives = n.sum(), s.sum()
    edge = float(np.log((n_rows + 0.5) / 0.5))
    if start is None:
        rate = np.clip((positives + 0.5) / (n_rows + 1.0), 1e-12, 1 - 1e-12)
        start = (np.log(rate / (1 - rate)), -1.0, np.zeros_like(n))
    modes = [np.asarray(start[2], dtype=np.float64)]  # each evaluation starts the next

    def objective(theta):
        value, grad, modes[0] = _laplace(theta[0], theta[1], n, s, modes[0])
        return -value / n_rows, -grad / n_rows  # per row: a first step of sane size

    best = minimize(
        objective,
        x0=[np.clip(start[0], -edge, edge), np.clip(start[1], *LOG_TAU_BOUNDS)],
        jac=True,
        method="L-BFGS-B",
        bounds=[(-edge, edge), LOG_TAU_BOUNDS],
        options={"ftol": 1e-13, "gtol": 1e-9},
    )
    mu, tau2 = float(best.x[0]), float(np.exp(2.0 * best.x[1]))
    u, _, _ = _modes(mu, tau2, n, s, modes[0])
    return mu, tau2, u


# --- the encoder -------------------------------------------------------------------------
class RandomInterceptCodes(_SupervisedLevels, CategoricalEncoder):
    """GLMM encoding: each level becomes its fitted random intercept ``mu + u_c``.

    Parameters
    ----------
    crossfit : {"none", "kfold", "holdout"}, default="kfold"
        Which rows fit the model that encodes each training row in ``fit_transform``:
        ``none`` all rows (own target included: leaks on purpose); ``kfold`` the other
        inner folds, one model per fold; ``holdout`` a random ``holdout_fraction`` of rows
        encodes the rest and the rest encodes it. The folds are those of
        ``TargetStatistics`` (``_crossfit``), group-aware when ``groups`` is given.
    cv : int in [2, 1000] or splitter, default=5
        Inner folds for ``"kfold"``: an integer deals a random permutation (seeded by
        ``random_state``) into ``cv`` folds, stratified for a class target; a splitter is
        used as is.
    random_state : int, RandomState or None, default=None
        Seeds the folds and the holdout split.
    holdout_fraction : float in (0, 1), default=0.5
        Under ``crossfit="holdout"``, the share of rows in the first of the two parts.
    missing : {"category", "prior"}, default="category"
        A missing value is a level of its own (as every encoder here by default), or is
        left out of the model and gets the intercept ``mu``.
    target_type : {"auto", "binary", "multiclass", "continuous"}, default="auto"
        ``auto`` uses ``sklearn.utils.multiclass.type_of_target``.

    Attributes
    ----------
    target_type_ : str
    classes_ : ndarray or None
        Sorted class labels; the positive class of a binary target is ``classes_[1]``.
    intercept_ : ndarray of shape (n_features_in_, n_targets)
        Fitted ``mu`` of each input column's model (logit scale for a class target); an
        unseen (or, under ``missing="prior"``, missing) value gets it.
    tau2_ : ndarray of shape (n_features_in_, n_targets)
        Variance of the random intercepts (REML; Laplace for a class target).
    sigma2_ : ndarray of shape (n_features_in_, n_targets)
        Residual variance (REML) of a continuous target; NaN for a class target.
    encodings_ : list of ndarray of shape (n_levels_j [+1 missing level], n_targets)
        ``mu + u_c`` of every level, from all training rows (what ``transform`` uses).
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders._glmm import RandomInterceptCodes
    >>> X = pd.DataFrame({"shop": ["a", "a", "a", "b", "b", "b", "c", "c", "c"]})
    >>> y = [1.5, 2.5, 3.5, 4.5, 5.5, 6.5, 7.5, 8.5, 9.5]
    >>> enc = RandomInterceptCodes(crossfit="none").fit(X, y)
    >>> # balanced levels: mu is the grand mean, and REML is the ANOVA estimator:
    >>> # sigma2 = within mean square = 1, tau2 = (between mean square 27 - 1) / 3
    >>> enc.intercept_.round(6).tolist(), enc.sigma2_.round(6).tolist()
    ([[5.5]], [[1.0]])
    >>> # shrinkage tau2 n/(tau2 n + sigma2) = 26/27 towards mu: a -> 5.5 - 3 * 26/27
    >>> enc.transform(pd.DataFrame({"shop": ["a", "zzz"]})).round(6).ravel().tolist()
    [2.611111, 5.5]

    References
    ----------
    Pargent, F., Pfisterer, F., Thomas, J., Bischl, B. (2022). Regularized target encoding
    outperforms traditional methods in supervised machine learning with high cardinality
    features. Computational Statistics 37:2671-2692. The one-way random-effects model and
    its REML fit: Searle, S. R., Casella, G., McCulloch, C. E. (1992). Variance
    Components. Wiley, ch. 3 and 6.
    """

    uses_target = True
    # only in-sample fitting includes each row's own target in its encoding
    leaky_when = {"crossfit": ("none",)}
    references = ("pargent2022",)
    param_rules = {
        "crossfit": (Options(*CROSSFITS),),
        "cv": (Interval("int", 2, 1000), Splitter()),
        "random_state": (Nothing(), Interval("int", 0, 2**32 - 1), Seed()),
        "holdout_fraction": (Interval("real", 0, 1, closed="neither"),),
        "missing": (Options(*MISSING_POLICIES),),
        "target_type": (Options(*TARGET_TYPES),),
    }

    def __init__(
        self, crossfit="kfold", cv=5, random_state=None, holdout_fraction=0.5, missing="category", target_type="auto"
    ):
        self.crossfit = crossfit
        self.cv = cv
        self.random_state = random_state
        self.holdout_fraction = holdout_fraction
        self.missing = missing
        self.target_type = target_type

    # --- public API ---------------------------------------------------------------------
    def fit(self, X, y):
        """Fit one random-intercept model per column on all rows of ``(X, y)``.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)
            Binary, multiclass or continuous target (``target_type``).

        Returns
        -------
        self : the fitted encoder.
        """
        _, _, Y, _, codes = self._prepare(X, y)
        for j, c in enumerate(codes):
            self._store(j, self._fit_cells(_crossfit.in_sample(c, Y, self._n_levels(j), self._spread)))
        return self

    def fit_transform(self, X, y, groups=None):
        """Fit, then return cross-fitted encodings of the training rows (see ``crossfit``).

        ``groups`` (one label per row) makes the folds and the holdout part unions of
        whole groups, so no row is encoded by a model that saw a row of its group.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)
        groups : array-like of shape (n_samples,), optional

        Returns
        -------
        ndarray of shape (n_samples, n_features_out)
            Differs from ``fit(X, y).transform(X)`` except under ``crossfit="none"``.
        """
        frame, y, Y, classes, codes = self._prepare(X, y)
        groups = self._groups(groups, len(y))
        folds = self._folds(frame, y, classes, check_random_state(self.random_state), groups)
        out = []
        for j, c in enumerate(codes):
            n_levels = self._n_levels(j)
            if folds is None:
                cells = full = _crossfit.in_sample(c, Y, n_levels, self._spread)
                table = self._store(j, self._fit_cells(full))
            else:
                cells, full = _crossfit.out_of_fold(c, Y, n_levels, *folds, self._spread)
                fitted = self._fit_cells(full)
                self._store(j, fitted)
                table = self._fold_tables(cells, folds[1], fitted)
            out.append(np.take(table, cells.index, axis=0))
        return np.concatenate(out, axis=1)

    def transform(self, X):
        """Encode ``X`` with the models fitted on all training rows.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, n_features_out)
            One column per input column (per class and input column for a multiclass
            target, feature-major); unseen (and, under ``missing="prior"``, missing)
            values get the column's ``intercept_``.
        """
        frame = self._frame(X, reset=False)
        out = []
        for j, codes in enumerate(self._codes(frame)):
            codes = self._level_codes(codes, j)
            table = np.concatenate([self.encodings_[j], self.intercept_[j][None, :]])
            out.append(np.take(table, np.where(codes >= 0, codes, len(table) - 1), axis=0))
        return np.concatenate(out, axis=1)

    def get_feature_names_out(self, input_features=None):
        """``<column>__glmm``, or ``<column>__glmm_<class>`` for a multiclass target."""
        check_is_fitted(self, "encodings_")
        names = _check_feature_names_in(self, input_features)
        if self.target_type_ == "multiclass":
            return np.asarray([f"{c}__glmm_{k}" for c in names for k in self.classes_], dtype=object)
        return np.asarray([f"{c}__glmm" for c in names], dtype=object)

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.required = True
        return tags

    def missing_rule(self) -> str:
        return "a level of its own" if self.missing == "category" else 'the intercept (missing = "prior")'

    # --- fitting ------------------------------------------------------------------------
    @property
    def _spread(self) -> bool:
        return self.target_type_ == "continuous"

    def _prepare(self, X, y):
        """Validate; learn levels and target type; return what fitting needs."""
        frame = self._frame(X, reset=True)
        y = column_or_1d(np.asarray(y), warn=True)
        check_consistent_length(frame, y)
        Y, classes = self._target_matrix(y)
        codes = [self._level_codes(c, j) for j, c in enumerate(self._fit_levels(frame))]
        shape = (len(codes), Y.shape[1])
        self.intercept_, self.tau2_, self.sigma2_ = np.zeros(shape), np.zeros(shape), np.full(shape, np.nan)
        self.encodings_ = [None] * len(codes)
        return frame, y, Y, classes, codes

    def _fit_cells(self, cells, near=None):
        """One model per target column on cells ``(n, total, sq_dev)``.

        Returns ``(table, mu, tau2, sigma2)``: each cell's ``mu + u_c`` (a cell with no
        rows gets ``mu``) and the parameters, one entry per target column. ``near`` (such
        a result for cells of the same levels) starts the logistic fits.
        """
        n_targets = cells.total.shape[1]
        table = np.empty((len(cells.n), n_targets))
        mu, tau2, sigma2 = np.zeros(n_targets), np.zeros(n_targets), np.full(n_targets, np.nan)
        for t in range(n_targets):  # loop over target columns (classes) only
            if self._spread:
                mu[t], tau2[t], sigma2[t] = reml_one_way(cells.n, cells.total[:, t], cells.sq_dev[:, t])
                table[:, t] = blup(cells.n, cells.total[:, t], mu[t], tau2[t], sigma2[t])
            else:
                start = None
                if near is not None and near[2][t] > 0:
                    start = (near[1][t], 0.5 * np.log(near[2][t]), near[0][:, t] - near[1][t])
                mu[t], tau2[t], u = fit_logistic(cells.n, cells.total[:, t], start)
                table[:, t] = mu[t] + u
        return table, mu, tau2, sigma2

    def _store(self, j: int, fitted) -> np.ndarray:
        """Keep column ``j``'s full-data model for ``transform``; return its table."""
        table, self.intercept_[j], self.tau2_[j], self.sigma2_[j] = fitted
        self.encodings_[j] = table[: self._n_levels(j)]
        return table

    def _fold_tables(self, cells, n_folds: int, full) -> np.ndarray:
        """Fit one model per fold on its (fold, level) cells; stack the fold tables.

        Each fold holds most of the rows, so the fit on all rows (``full``) starts it.
        """
        width = len(cells.n) // n_folds
        tables = []
        for f in range(n_folds):  # cells are fold-major: fold f owns one block of width
            part = slice(f * width, (f + 1) * width)
            sq = None if cells.sq_dev is None else cells.sq_dev[part]
            fold_cells = _crossfit.LevelStats(cells.n[part], cells.total[part], sq)
            tables.append(self._fit_cells(fold_cells, full)[0])
        return np.concatenate(tables)
