"""A composite encoder: each column's encoder chosen by its number of training levels.

Common practice, no source: few-level columns are one-hot encoded (cheap and exact),
many-level columns get target statistics (one-hot would be too wide). Both sub-encoders
are ordinary registered kinds built through ``harness.encoders.build``; this module only
routes columns and joins the outputs.
"""

from __future__ import annotations

import inspect
from dataclasses import dataclass

import numpy as np
import pandas as pd
import scipy.sparse as sp
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted

from harness.encoders._base import CategoricalEncoder
from harness.encoders._rules import Flag, Interval, Nothing, Options, ParameterError, Seed
from harness.encoders._target import TARGET_TYPES
from harness.errors import ConfigError, EncoderInputError

__all__ = ["CardinalitySplit"]

#: kinds that cannot be a part: their output is no numeric matrix to join
NOT_A_PART = ("native",)
#: parameters the composite hands to a part that has them, unless the part's params set them
FORWARDED = ("random_state", "target_type")


@dataclass(frozen=True)
class _Kind:
    """The name of a registered encoder kind whose output is a numeric matrix."""

    def accepts(self, value) -> bool:
        return isinstance(value, str) and value in _part_kinds()

    def describe(self) -> str:
        return "one of " + ", ".join(repr(k) for k in _part_kinds())

    def bad_examples(self):
        return ["<not-a-kind>", 3]


@dataclass(frozen=True)
class _Table:
    """A table of parameters (a dict with string keys); its values are checked at fit."""

    def accepts(self, value) -> bool:
        return isinstance(value, dict) and all(isinstance(k, str) for k in value)

    def describe(self) -> str:
        return "a table of parameters (dict)"

    def bad_examples(self):
        return ["<text>", 3]


def _part_kinds() -> tuple[str, ...]:
    # imported here: harness.encoders imports this module to build its registry
    from harness.encoders import KINDS

    return tuple(k for k in KINDS if k not in NOT_A_PART)


class CardinalitySplit(CategoricalEncoder):
    """One encoder for columns with few levels, another for columns with many.

    A column whose number of training levels (missing counted as one level when seen
    at fit, as one-hot counts it) is at most ``threshold`` goes to the *low* encoder,
    every other column to the *high* encoder. Each part is fitted on its own columns
    only, so the output equals the two parts' outputs side by side: the low block (its
    columns in input order), then the high block. This is common practice; there is no
    published source.

    Parameters
    ----------
    threshold : int >= 0, default=15
        Largest number of levels encoded by the low encoder.
    low_kind, high_kind : str, default="onehot", "target"
        Registered encoder kinds of the two parts (any but ``native``).
    low_params, high_params : dict or None, default=None
        Parameters of each part; ``None`` is the kind's defaults (for ``target``:
        m-estimate smoothing, cross-fitted by k-fold). Checked when fitting.
    random_state : int, RandomState or None, default=None
        Given to each part with a ``random_state`` parameter its params do not set.
    target_type : {"auto", "binary", "multiclass", "continuous"}, default="auto"
        Given to each part with a ``target_type`` parameter its params do not set.
    sparse : bool or None, default=None
        ``None``: a CSR matrix when either part returns one, else a dense array;
        ``True``/``False`` force CSR or dense float64.

    Notes
    -----
    ``fit_transform(X, y, groups)`` calls each part's ``fit_transform``, with ``groups``
    for a part that takes them: a cross-fitted part stays cross-fitted (and group-aware),
    so the training encodings differ from ``fit(X, y).transform(X)`` as the part's do.
    The composite declares ``uses_target`` (its default high part reads ``y``); it is
    leaky exactly when a part is (``declaration`` of each part), and cites what the parts
    cite. Output column names are the parts' own names.

    Attributes
    ----------
    n_levels_ : int64 ndarray
        Number of training levels of each input column (missing counted once if seen).
    low_columns_, high_columns_ : int64 ndarray
        Indices of the input columns routed to each part, in input order.
    low_encoder_, high_encoder_ : encoder or None
        The fitted parts (``None`` when no column was routed to a part).
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> X = pd.DataFrame({"flag": ["y", "n", "y", "n", "y", "n"],
    ...                   "city": ["Oslo", "Rome", "Lima", "Oslo", "Rome", "Lima"]})
    >>> y = [1, 0, 1, 1, 0, 0]
    >>> enc = build("hybrid", threshold=2, high_params={"m": 2.0, "cv": 2}, random_state=0)
    >>> train = enc.fit_transform(X, y)  # the target part is cross-fitted
    >>> enc.get_feature_names_out().tolist()
    ['flag=n', 'flag=y', 'city__target']
    >>> # Oslo: (2 positives + 2 * prior 0.5) / (2 rows + 2) = 0.75
    >>> enc.transform(X.iloc[:1]).toarray().tolist()
    [[0.0, 1.0, 0.75]]
    """

    uses_target = True
    param_rules = {
        "threshold": (Interval("int", 0, None),),
        "low_kind": (_Kind(),),
        "low_params": (Nothing(), _Table()),
        "high_kind": (_Kind(),),
        "high_params": (Nothing(), _Table()),
        "random_state": (Nothing(), Interval("int", 0, 2**32 - 1), Seed()),
        "target_type": (Options(*TARGET_TYPES),),
        "sparse": (Nothing(), Flag()),
    }

    def __init__(
        self,
        threshold=15,
        low_kind="onehot",
        low_params=None,
        high_kind="target",
        high_params=None,
        random_state=None,
        target_type="auto",
        sparse=None,
    ):
        self.threshold = threshold
        self.low_kind = low_kind
        self.low_params = low_params
        self.high_kind = high_kind
        self.high_params = high_params
        self.random_state = random_state
        self.target_type = target_type
        self.sparse = sparse

    # --- declarations ------------------------------------------------------------------
    @classmethod
    def is_leaky(cls, params: dict) -> bool:
        """True when either part, under its params, is leaky."""
        return any(d.leaky for d in cls._part_declarations(params))

    @classmethod
    def cited(cls, params: dict) -> tuple[str, ...]:
        """The references of both parts (low first), without duplicates."""
        keys = [k for d in cls._part_declarations(params) for k in d.references]
        return tuple(dict.fromkeys(list(cls.references) + keys))

    @classmethod
    def _part_declarations(cls, params: dict):
        from harness.encoders import declaration

        full = cls.settings(params)
        return [declaration(full[f"{side}_kind"], dict(full[f"{side}_params"] or {})) for side in ("low", "high")]

    def missing_rule(self) -> str:
        low, high = (self._build(side).missing_rule() for side in ("low", "high"))
        if low == high:
            return low
        return f"{low} (columns up to {self.threshold} levels); {high} (the others)"

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.required = True
        return tags

    # --- public API --------------------------------------------------------------------
    def fit(self, X, y=None):
        """Route the columns by their number of levels and fit each part on its columns.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
            Categorical columns.
        y : array-like of shape (n_samples,), optional
            The target; required when a part uses it (the default high part does).

        Returns
        -------
        self : the fitted encoder.

        Raises
        ------
        ParameterError
            If a parameter (or a part's parameter) breaks its rules.
        ValueError
            If ``y`` is None and a part with columns uses the target.
        """
        self._fit(X, y, groups=None, transform=False)
        return self

    def fit_transform(self, X, y=None, groups=None):
        """Fit, then return each part's ``fit_transform`` output side by side.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,), optional
        groups : array-like of shape (n_samples,), optional
            Group labels, passed to a part whose ``fit_transform`` takes them (target
            statistics keep every group whole in its inner folds).

        Returns
        -------
        ndarray or scipy.sparse.csr_matrix of shape (n_samples, n_features_out)
            Cross-fitted where a part is; see Notes.
        """
        return self._fit(X, y, groups=groups, transform=True)

    def transform(self, X):
        """Encode ``X`` with the fitted parts.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray or scipy.sparse.csr_matrix of shape (n_samples, n_features_out)
            The low block, then the high block; column ``k`` is named
            ``get_feature_names_out()[k]``.
        """
        frame = self._frame(X, reset=False)
        outs = [enc.transform(self._part(X, frame, cols)) for enc, cols in self._parts()]
        return self._joined(outs, frame.shape[0])

    def get_feature_names_out(self, input_features=None):
        """The low part's names, then the high part's (each part's own naming)."""
        check_is_fitted(self)
        names = _check_feature_names_in(self, input_features)
        out = [enc.get_feature_names_out(names[cols]) for enc, cols in self._parts()]
        return np.asarray([n for part in out for n in part], dtype=object)

    # --- helpers -----------------------------------------------------------------------
    def _check_params(self) -> None:
        # imported here: harness.encoders imports this module for its registry
        from harness.encoders import check

        super()._check_params()
        for side in ("low", "high"):
            try:
                check(getattr(self, f"{side}_kind"), self._part_params(side))
            except ConfigError as exc:
                raise ParameterError(
                    f"CardinalitySplit: parameter '{side}_params' must be valid parameters of "
                    f"kind '{getattr(self, f'{side}_kind')}'; got {getattr(self, f'{side}_params')!r}. "
                    f"{exc}"
                ) from None

    def _part_params(self, side: str) -> dict:
        """The part's params, with the forwarded ones it has and does not set itself."""
        from harness.encoders import params_of

        kind, own = getattr(self, f"{side}_kind"), dict(getattr(self, f"{side}_params") or {})
        accepted = params_of(kind)
        extra = {name: getattr(self, name) for name in FORWARDED if name in accepted and name not in own}
        return {**extra, **own}

    def _build(self, side: str):
        from harness.encoders import build

        return build(getattr(self, f"{side}_kind"), **self._part_params(side))

    def _fit(self, X, y, groups, transform: bool):
        frame = self._frame(X, reset=True)
        self._fit_levels(frame, order="any")  # routing needs only the counts: no sort
        self.n_levels_ = np.asarray([len(lv) + bool(m) for lv, m in zip(self.levels_, self.n_missing_)], dtype=np.int64)
        low = self.n_levels_ <= self.threshold
        self.low_columns_, self.high_columns_ = np.flatnonzero(low), np.flatnonzero(~low)
        outs = []
        for side, cols in (("low", self.low_columns_), ("high", self.high_columns_)):
            enc = self._build(side) if len(cols) else None
            setattr(self, f"{side}_encoder_", enc)
            if enc is None:
                continue
            part = self._part(X, frame, cols)
            if y is None and type(enc).uses_target:
                raise EncoderInputError(
                    f"CardinalitySplit requires y to be passed, but the target y is None: "
                    f"its {side} part (kind '{getattr(self, f'{side}_kind')}') uses the "
                    f"target for {len(cols)} column(s). Pass y, or choose target-free kinds."
                )
            if not transform:
                enc.fit(part, y)
                continue
            takes_groups = "groups" in inspect.signature(enc.fit_transform).parameters
            extra = {"groups": groups} if groups is not None and takes_groups else {}
            outs.append(enc.fit_transform(part, y, **extra))
        return self._joined(outs, frame.shape[0]) if transform else None

    def _parts(self):
        """(fitted part, its input column indices) for the parts that have columns."""
        pairs = ((self.low_encoder_, self.low_columns_), (self.high_encoder_, self.high_columns_))
        return [(enc, cols) for enc, cols in pairs if enc is not None]

    @staticmethod
    def _part(X, frame: pd.DataFrame, cols: np.ndarray):
        """The part's columns, as the kind of input the composite got: a part fitted on a
        DataFrame checks its column names; one fitted on an array accepts any names."""
        sub = frame.iloc[:, cols]
        return sub if isinstance(X, pd.DataFrame) else sub.to_numpy()

    def _joined(self, outs: list, n_rows: int):
        """The parts' outputs side by side: CSR if any is sparse (or ``sparse=True``)."""
        if not outs:
            return np.empty((n_rows, 0), dtype=np.float64)
        to_sparse = any(sp.issparse(o) for o in outs) if self.sparse is None else self.sparse
        if to_sparse:
            blocks = [sp.csr_matrix(o, dtype=np.float64) for o in outs]
            return blocks[0] if len(blocks) == 1 else sp.hstack(blocks, format="csr")
        dense = [o.toarray() if sp.issparse(o) else np.asarray(o, dtype=np.float64) for o in outs]
        return dense[0] if len(dense) == 1 else np.hstack(dense)
