"""Target statistics: smoothing x statistic x target type, cross-fitted on training data.

``fit`` learns one table per column from all training rows; ``transform`` always uses
those tables. ``fit_transform`` returns *cross-fitted* training encodings: the rows
that feed each training row's statistics are chosen by a scheme of ``_crossfit.py``,
so that (except under ``crossfit="none"``) no row's encoding depends on its own target.

Smoothing maps a level's sufficient statistics (count ``n``, target sum, sum of squared
deviations) and the prior to one number per target column; the same rule serves the
full-data tables and every cross-fitting scheme.
"""

from __future__ import annotations

import numpy as np
from scipy.special import expit, logit
from sklearn.utils import check_random_state
from sklearn.utils.validation import _check_feature_names_in, check_consistent_length, check_is_fitted, column_or_1d

import harness.encoders._crossfit as _crossfit
from harness.encoders._base import CategoricalEncoder
from harness.encoders._rules import Interval, Nothing, Options, Seed, Splitter
from harness.encoders._supervised import TARGET_TYPES, _SupervisedLevels
from harness.errors import EncoderInputError

__all__ = ["TargetStatistics", "smooth", "weight_of_evidence"]

SMOOTHINGS = ("none", "m-estimate", "sigmoid", "empirical-bayes")
CROSSFITS = ("none", "kfold", "loo", "ordered", "holdout")
STATISTICS = ("mean", "woe")
MISSING_POLICIES = ("prior", "category")
ZERO_CELL = 0.5  # Siddiqi (2006): a zero count of goods or bads is replaced by 0.5


# --- smoothing: statistics -> encoding ------------------------------------------------
def smooth(n, total, sq_dev, prior, tau2, *, smoothing, m=10.0, ramp_center=20.0, ramp_width=10.0):
    """Encode per-level (or per-row) sufficient statistics with one smoothing rule.

    Parameters
    ----------
    n : ndarray of shape (R,)
        Number of rows behind each statistic.
    total, sq_dev : ndarray of shape (R, T)
        Sum of targets; sum of squared deviations from their mean.
    prior, tau2 : ndarray broadcastable to (R, T)
        Prior mean and target variance (ddof 0) of the rows the statistic may use.
    smoothing : {"none", "m-estimate", "sigmoid", "empirical-bayes"}
        ``none``: the raw mean; ``m-estimate``: ``(total + m*prior)/(n + m)``;
        ``sigmoid``: ``lam*mean + (1-lam)*prior`` with ``lam = 1/(1+exp(-(n-k)/f))``,
        ``k = ramp_center``, ``f = ramp_width`` (``f = 0`` is a hard step);
        ``empirical-bayes``: ``lam = tau2*n/(tau2*n + sq_dev/n)``, as scikit-learn's
        ``TargetEncoder(smooth="auto")``. A statistic over no rows is the prior.

    Returns
    -------
    ndarray of shape (R, T)

    References
    ----------
    Cestnik, B. (1990). Estimating probabilities: a crucial task in machine learning.
    Proc. ECAI'90, 147-149. Micci-Barreca, D. (2001). A preprocessing scheme for
    high-cardinality categorical attributes in classification and prediction problems.
    SIGKDD Explorations 3(1):27-32, eq. 3-4 (sigmoid). Empirical Bayes as scikit-learn
    1.9.1 implements it in ``TargetEncoder`` (its source cites eq. 5-6 of that paper).
    """
    n2 = np.asarray(n, dtype=np.float64)[:, None]
    prior = np.broadcast_to(prior, total.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.where(n2 > 0, total / n2, prior)
        if smoothing == "none":
            return mean
        if smoothing == "m-estimate":
            return np.where(n2 + m > 0, (total + m * prior) / (n2 + m), prior)
        if smoothing == "sigmoid":
            lam = _ramp(n2, ramp_center, ramp_width)
        else:
            lam = tau2 * n2 / (tau2 * n2 + sq_dev / n2)
        # lam is NaN for n == 0, or for tau2 == 0 with no spread: the prior, as scikit-learn
        return np.where(np.isnan(lam), prior, lam * mean + (1 - lam) * prior)


def _ramp(n, center: float, width: float):
    """Micci-Barreca's lambda(n); width 0 is the limit, a step of height 1/2 at n == k."""
    if width == 0:
        return np.where(n > center, 1.0, np.where(n == center, 0.5, 0.0))
    return expit((n - center) / width)


def weight_of_evidence(enc, prior, n, n_prior):
    """Weight of evidence of a smoothed positive rate against the prior rate.

    ``ln((pos_i/POS)/(neg_i/NEG)) = logit(pos_i/n_i) - logit(POS/N)``, so with
    ``smoothing="none"`` this is Siddiqi's WoE with the positive class as his "good"
    (sign conventions differ between texts). Zero cells: a rate over ``n`` rows is kept
    within ``[0.5/(n+0.5), n/(n+0.5)]``, the rates of a level whose zero count of
    positives (negatives) is replaced by 0.5. A raw rate ``k/n`` with ``0 < k < n``
    always lies inside, so under ``smoothing="none"`` only zero cells move; a smoothed
    rate is held to the same bound, which also keeps rounding noise near 0 or 1 from
    reaching the logarithm. The prior gets the same bound with ``n_prior`` rows. A
    level over no rows is 0.

    References
    ----------
    Siddiqi, N. (2006). Credit Risk Scorecards. Wiley. (0.5 zero-cell adjustment
    recalled from memory.)
    """
    n2 = np.asarray(n, dtype=np.float64)[:, None]
    rate = _half_count_bound(enc, n2)
    base = _half_count_bound(np.broadcast_to(prior, enc.shape), float(n_prior))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(n2 > 0, logit(rate) - logit(base), 0.0)


def _half_count_bound(rate, n):
    with np.errstate(divide="ignore", invalid="ignore"):
        low, high = ZERO_CELL / (n + ZERO_CELL), n / (n + ZERO_CELL)
    return np.minimum(np.maximum(rate, low), high)


class TargetStatistics(_SupervisedLevels, CategoricalEncoder):
    """Target encoding: each level becomes a smoothed statistic of the target.

    Parameters
    ----------
    smoothing : {"none", "m-estimate", "sigmoid", "empirical-bayes"}, default="m-estimate"
        How a level's statistics are shrunk towards the prior; see :func:`smooth`.
    m : float >= 0, default=10.0
        Weight of the prior under ``"m-estimate"`` (scikit-learn's numeric ``smooth``).
    ramp_center, ramp_width : float, default=20.0, 10.0
        ``k`` and ``f`` of the ``"sigmoid"`` blend (count at which level and prior
        weigh equally; how gradually the weight moves). ``ramp_width=0`` is a step.
    crossfit : {"none", "kfold", "loo", "ordered", "holdout"}, default="kfold"
        Which rows feed each row's statistics in ``fit_transform``: ``none`` all rows
        (own target included: leaks on purpose); ``kfold`` the other inner folds, each
        fold with its own prior and variance, as scikit-learn's ``TargetEncoder``;
        ``loo`` all other rows (prior and variance too); ``ordered`` the same-level rows
        before the row in one random permutation (CatBoost's ordered target
        statistics), prior from all other rows unless ``prior`` is set; ``holdout`` a
        random ``holdout_fraction`` of rows encodes the rest and the rest encodes it.
    cv : int in [2, 1000] or splitter, default=5
        Inner folds for ``"kfold"``. An integer deals a random permutation (seeded by
        ``random_state``) round-robin into ``cv`` folds, class by class for a class
        target (stratified); a splitter is used as is: its splits, so results reproduce
        scikit-learn's ``TargetEncoder`` given the same splitter.
    random_state : int, RandomState or None, default=None
        Seeds the folds, the permutation, the holdout split and the noise.
    statistic : {"mean", "woe"}, default="mean"
        ``"woe"``: weight of evidence of the smoothed rate (binary targets only); see
        :func:`weight_of_evidence`.
    noise : float in [0, 1e6], default=0.0
        Standard deviation of Gaussian noise added to the training encodings returned
        by ``fit_transform`` (never to ``transform``).
    holdout_fraction : float in (0, 1), default=0.5
        Under ``crossfit="holdout"``, the share of rows in the first of the two random
        parts; each part is encoded from the other (``_folds.holdout_folds``).
    missing : {"category", "prior"}, default="category"
        A missing value is a level of its own with its own smoothed statistic (as
        scikit-learn, and as every other encoder here by default), or gets the prior.
    target_type : {"auto", "binary", "multiclass", "continuous"}, default="auto"
        ``auto`` uses ``sklearn.utils.multiclass.type_of_target``.
    prior : float or None, default=None
        Fixed prior for every target column; ``None`` learns it from the rows in use.

    Attributes
    ----------
    target_type_ : str
    classes_ : ndarray or None
        Sorted class labels; the positive class of a binary target is ``classes_[1]``.
    prior_ : ndarray of shape (n_targets,)
    encodings_ : list of ndarray of shape (n_levels_j [+1 missing level], n_targets)
    default_ : ndarray of shape (n_targets,)
        Output for an unseen or (under ``missing="prior"``) missing value.
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> X = pd.DataFrame({"city": ["Oslo", "Rome", "Oslo", "Lima", "Lima"]})
    >>> y = [1, 0, 1, 0, 0]
    >>> enc = build("target", smoothing="m-estimate", m=2.0, crossfit="kfold", cv=2,
    ...             random_state=0)
    >>> train = enc.fit_transform(X, y)  # cross-fitted: no row sees its own label
    >>> train.shape
    (5, 1)
    >>> enc.prior_.tolist()
    [0.4]
    >>> # Oslo: (2 positives + 2 * 0.4) / (2 rows + 2) = 0.7 ; Paris is unseen: the prior
    >>> enc.transform(pd.DataFrame({"city": ["Oslo", "Paris"]})).round(4).ravel().tolist()
    [0.7, 0.4]

    References
    ----------
    Micci-Barreca (2001), SIGKDD Explorations 3(1); Cestnik (1990), ECAI'90;
    Prokhorenkova et al. (2018), NeurIPS; Siddiqi (2006), Credit Risk Scorecards.
    """

    uses_target = True
    # fitted on the rows they encode: "none" includes each row, "loo" excludes it but
    # still shifts a level's encoding with the row's own label (Prokhorenkova et al. 2018)
    leaky_when = {"crossfit": ("none", "loo")}
    references = ("pargent2022", "prokhorenkova2018")
    references_when = {
        "smoothing": {"m-estimate": ("cestnik1990",), "sigmoid": ("micci2001",), "empirical-bayes": ("micci2001",)},
        "statistic": {"woe": ("siddiqi2006",)},
    }
    param_rules = {
        "smoothing": (Options(*SMOOTHINGS),),
        "m": (Interval("real", 0, None),),
        "ramp_center": (Interval("real", None, None),),
        "ramp_width": (Interval("real", 0, None),),
        "crossfit": (Options(*CROSSFITS),),
        # more inner folds than 1,000 is leave-one-out in all but name: use crossfit="loo"
        "cv": (Interval("int", 2, 1000), Splitter()),
        "random_state": (Nothing(), Interval("int", 0, 2**32 - 1), Seed()),
        "statistic": (Options(*STATISTICS),),
        # noise in target units; 1e6 bounds a typo (1e300), not a sensible setting
        "noise": (Interval("real", 0, 1e6),),
        "holdout_fraction": (Interval("real", 0, 1, closed="neither"),),
        "missing": (Options(*MISSING_POLICIES),),
        "target_type": (Options(*TARGET_TYPES),),
        "prior": (Nothing(), Interval("real", None, None)),
    }
    # crossfit values that build no folds: in-sample, leave-one-out and ordered cells
    _unfolded = ("none", "loo", "ordered")

    def __init__(
        self,
        smoothing="m-estimate",
        m=10.0,
        ramp_center=20.0,
        ramp_width=10.0,
        crossfit="kfold",
        cv=5,
        random_state=None,
        statistic="mean",
        noise=0.0,
        holdout_fraction=0.5,
        missing="category",
        target_type="auto",
        prior=None,
    ):
        self.smoothing = smoothing
        self.m = m
        self.ramp_center = ramp_center
        self.ramp_width = ramp_width
        self.crossfit = crossfit
        self.cv = cv
        self.random_state = random_state
        self.statistic = statistic
        self.noise = noise
        self.holdout_fraction = holdout_fraction
        self.missing = missing
        self.target_type = target_type
        self.prior = prior

    # --- public API ---------------------------------------------------------------------
    def fit(self, X, y):
        """Learn one table per column from all rows of ``(X, y)``.

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
            self._store_table(j, _crossfit.in_sample(c, Y, self._n_levels(j), self._spread))
        return self

    def fit_transform(self, X, y, groups=None):
        """Fit, then return cross-fitted encodings of the training rows (see ``crossfit``).

        ``groups`` (one label per row: a patient, a country, an incident) makes every
        scheme group-aware, as grouped outer folds are: inner folds and the holdout part
        are unions of whole groups, the ordered permutation orders whole groups, and
        ``loo`` becomes leave-one-group-out. No row's statistic then uses a row of its
        own group. ``crossfit="none"`` ignores it.

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
        return self._fit_transform(X, y, groups=groups)

    def transform(self, X):
        """Encode ``X`` with the full-data tables.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, n_features_out)
            One column per input column (per class and input column for a multiclass
            target); unseen (and, under ``missing="prior"``, missing) values get
            ``default_``.
        """
        frame = self._frame(X, reset=False)
        out = []
        for j, codes in enumerate(self._codes(frame)):
            codes = self._level_codes(codes, j)
            table = np.concatenate([self.encodings_[j], self.default_[None, :]])
            out.append(np.take(table, np.where(codes >= 0, codes, len(table) - 1), axis=0))
        return np.concatenate(out, axis=1)

    def get_feature_names_out(self, input_features=None):
        """``<column>__target``, or ``<column>__target_<class>`` for a multiclass target."""
        check_is_fitted(self, "encodings_")
        names = _check_feature_names_in(self, input_features)
        if self.target_type_ == "multiclass":
            return np.asarray([f"{c}__target_{k}" for c in names for k in self.classes_], dtype=object)
        return np.asarray([f"{c}__target" for c in names], dtype=object)

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.required = True
        return tags

    def missing_rule(self) -> str:
        return "a level of its own" if self.missing == "category" else 'the prior (missing = "prior")'

    # --- fitting ------------------------------------------------------------------------
    def _prepare(self, X, y):
        """Validate; learn levels, target type and prior; return what fitting needs."""
        frame = self._frame(X, reset=True)
        y = column_or_1d(np.asarray(y), warn=True)
        check_consistent_length(frame, y)
        Y, classes = self._target_matrix(y)
        # training codes hold MISSING only where missing rows were seen: else no remap pass
        codes = [self._level_codes(c, j) if self.n_missing_[j] else c for j, c in enumerate(self._fit_levels(frame))]
        self._n_fit = Y.shape[0]
        self.prior_ = Y.mean(axis=0)
        if self.prior is not None:
            self.prior_ = np.full(Y.shape[1], float(self.prior))
        self.encodings_ = [None] * len(codes)
        return frame, y, Y, classes, codes

    def _store_table(self, j: int, full) -> None:
        """Encode column ``j``'s in-sample cells into its table for ``transform``."""
        table = self._encode(full)
        n_levels = self._n_levels(j)
        self.encodings_[j] = table[:n_levels]
        # the empty last cell: what an unseen (or missing, under "prior") value gets
        self.default_ = table[n_levels]

    def _fit_transform(self, X, y, *, permutation=None, groups=None):
        """``fit_transform``; ``permutation`` imposes the order of ``"ordered"`` (tests):
        of the rows, or of the groups when ``groups`` is given."""
        frame, y, Y, classes, codes = self._prepare(X, y)
        groups = self._groups(groups, len(y))
        rng = check_random_state(self.random_state)
        folds = self._folds(frame, y, classes, rng, groups)
        if self.crossfit == "ordered" and permutation is None:
            permutation = rng.permutation(Y.shape[0] if groups is None else int(groups.max()) + 1)
        out = []
        for j, c in enumerate(codes):
            cells, full = self._cells(c, Y, self._n_levels(j), folds, permutation, groups)
            self._store_table(j, full)
            out.append(np.take(self._encode(cells), cells.index, axis=0))
        out = np.concatenate(out, axis=1)
        if self.noise > 0:
            # noise regularises the training encodings only; test rows stay exact
            out = out + rng.normal(0.0, self.noise, size=out.shape)
        return out

    @property
    def _spread(self) -> bool:
        return self.smoothing == "empirical-bayes"

    def _cells(self, codes, Y, n_levels, folds, permutation, groups=None):
        """Cross-fitted cells of one column, and its in-sample cells (the table)."""
        spread = self._spread
        if self.crossfit in ("kfold", "holdout"):
            return _crossfit.out_of_fold(codes, Y, n_levels, *folds, spread)
        full = _crossfit.in_sample(codes, Y, n_levels, spread)
        if self.crossfit == "loo" and groups is not None:
            return _crossfit.leave_one_group_out(codes, Y, n_levels, groups, spread), full
        if self.crossfit == "loo":
            return _crossfit.leave_one_out(codes, Y, n_levels, spread), full
        if self.crossfit == "ordered":
            return _crossfit.ordered(codes, Y, n_levels, permutation, spread, groups), full
        return full, full

    def _encode(self, cells):
        """Smooth each cell, then apply the statistic; returns (n_cells, n_targets)."""
        prior = cells.prior if self.prior is None else self.prior_[None, :]
        enc = smooth(
            cells.n,
            cells.total,
            cells.sq_dev,
            prior,
            cells.tau2,
            smoothing=self.smoothing,
            m=self.m,
            ramp_center=self.ramp_center,
            ramp_width=self.ramp_width,
        )
        if self.statistic == "woe":
            return weight_of_evidence(enc, prior, cells.n, self._n_fit)
        return enc

    # --- target ----------------------------------------------------------------------------
    def _check_target_kind(self, kind: str) -> None:
        """Weight of evidence is defined for a binary target only."""
        if self.statistic == "woe" and kind != "binary":
            raise EncoderInputError(
                f"{type(self).__name__}(statistic='woe') needs a binary target; got a {kind} "
                "target. Use statistic='mean' for it."
            )
