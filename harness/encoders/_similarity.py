"""Similarity encoding of dirty categories: character n-gram similarity to prototype levels.

Cerda, Varoquaux & Kégl (2018), Machine Learning 107:1477-1494. A value is represented by
its similarity to each of a few *prototype* levels (the most frequent training levels),
so that misspelt or reworded variants of a level ("registered nurse", "register nurse",
"Registered Nurse ") get close vectors, even when they were never seen at fit.

Work is per distinct value, never per row: the n-gram sets of the levels are a sparse
binary level x n-gram matrix, intersections with the prototypes are one sparse matrix
product, and each row then gathers its level's vector by its code.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.sparse as sp
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted

from harness.encoders._base import MISSING, UNSEEN, CategoricalEncoder
from harness.encoders._rules import Flag, Interval, Options

__all__ = ["NgramSimilarity", "ngram_set", "ngram_similarity"]

MISSING_RULES = ("category", "zeros")


class NgramSimilarity(CategoricalEncoder):
    """Encode each value by its character n-gram similarity to the most frequent levels.

    ``sim(s, t) = |G(s) ∩ G(t)| / |G(s) ∪ G(t)|`` (Jaccard index of the two n-gram sets;
    Cerda et al. 2018, section 3.3), where ``G(s)`` is the set of the substrings of length
    ``ngram`` of ``s``. Each input column gives one output column per prototype.

    Parameters
    ----------
    n_prototypes : int in [1, 10000], default=30
        Number of prototype levels per column: the most frequent training levels, ties
        broken by lexical order of the levels. A column with fewer levels has fewer
        prototypes. (No "all levels" setting: the output is dense, one column per
        prototype, and the level table is levels x prototypes.)
    ngram : int in [1, 100], default=3
        Length ``n`` of the character n-grams (3 in the paper).
    pad : bool, default=False
        Compare ``" " + text + " "`` instead of ``text``: the first and last characters
        then form n-grams of their own, which weighs a shared beginning or end more.
        The default compares the text as it is (the hand check "London" vs "Londres"
        = 2/7 of ``REFERENCES.md`` is unpadded).
    missing : {"category", "zeros"}, default="category"
        A missing value is a level of its own: when training rows were missing, missing
        is one more prototype (the last one), with similarity 1 to itself and 0 to any
        text. Or (``"zeros"``) a missing value gets a vector of zeros and no prototype.

    Notes
    -----
    - Text: each level is compared by ``str(value)``, case and whitespace kept (``1`` is
      ``"1"``, ``True`` is ``"True"``). A value seen at fit is looked up as the other
      encoders do (``1.0`` matches a fitted ``1``); an unseen float is its own text
      (``"2.0"``).
    - Short strings: a text shorter than ``ngram`` characters has one n-gram, the whole
      text (so ``""`` and ``"ab"`` still have a non-empty set and ``sim("ab", "ab") = 1``).
    - Unseen values are not pooled: at transform each distinct unseen value gets its own
      similarities to the prototypes, which is the point of the method.
    - Output: a dense float64 array; columns ``<column>__sim_<k>``, ``k`` indexing
      ``prototypes_[j]`` (the prototype texts can be long or messy, so they are kept in
      the fitted attribute, not in the names).

    Attributes
    ----------
    prototypes_ : list of object ndarray
        Per column, the prototype levels in output order (most frequent first); ``None``
        stands for the missing prototype.
    lookups_ : list of float64 ndarray of shape (n_levels + 2, n_prototypes)
        Per column, the similarity of each level (rows, aligned with ``levels_``) to each
        prototype, then the row of a missing value, then a row of zeros that unseen values
        replace by their own similarities at transform.
    n_features_in_, feature_names_in_, levels_, counts_, n_missing_, stringified_
        See ``CategoricalEncoder``.

    References
    ----------
    .. [1] Cerda, P., Varoquaux, G., Kégl, B. (2018). Similarity encoding for learning
       with dirty categorical variables. Machine Learning 107:1477-1494.

    Examples
    --------
    >>> import pandas as pd
    >>> from harness.encoders import build
    >>> X = pd.DataFrame({"city": ["London", "London", "Londres", "Paris", None]})
    >>> enc = build("similarity", n_prototypes=2).fit(X)
    >>> enc.prototypes_[0].tolist()
    ['London', 'Londres', None]
    >>> enc.transform(pd.DataFrame({"city": ["Londres", "Londn", None]})).round(3).tolist()
    [[0.286, 1.0, 0.0], [0.4, 0.333, 0.0], [0.0, 0.0, 1.0]]
    """

    references = ("cerda2018",)
    param_rules = {
        # the output is dense: 10,000 prototypes are already 80 kB per row
        "n_prototypes": (Interval("int", 1, 10_000),),
        "ngram": (Interval("int", 1, 100),),
        "pad": (Flag(),),
        "missing": (Options(*MISSING_RULES),),
    }

    def __init__(self, n_prototypes=30, ngram=3, pad=False, missing="category"):
        self.n_prototypes = n_prototypes
        self.ngram = ngram
        self.pad = pad
        self.missing = missing

    def missing_rule(self) -> str:
        if self.missing == "category":
            return "a level of its own"
        return 'a vector of zeros (missing = "zeros")'

    def fit(self, X, y=None):
        """Choose the prototypes of each column and the similarity of every level to them.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
            Categorical columns (object, ``str``, ``category``, bool or numbers).
        y : ignored
            Accepted for the scikit-learn API.

        Returns
        -------
        self : the fitted encoder.

        Raises
        ------
        ParameterError
            If a parameter breaks the class's ``param_rules``.
        """
        self._fit_codes(X)
        return self

    def fit_transform(self, X, y=None, **fit_params):
        """Fit and return the encoded training rows (one factorisation, not two).

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
        y : ignored

        Returns
        -------
        ndarray of shape (n_samples, n_features_out)
            Equal to ``fit(X).transform(X)``.
        """
        codes = self._fit_codes(X)
        return self._to_output(codes, [None] * len(codes))

    def transform(self, X):
        """Encode ``X``: each value's similarity to each prototype of its column.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, n_features_out)
            float64; column ``k`` is named ``get_feature_names_out()[k]``.
        """
        frame = self._frame(X, reset=False)
        return self._to_output(*self._codes(frame, with_values=True))

    def get_feature_names_out(self, input_features=None):
        """``<column>__sim_<k>`` for prototype ``k`` of each column (see ``prototypes_``)."""
        check_is_fitted(self)
        names = _check_feature_names_in(self, input_features)
        return np.asarray(
            [f"{name}__sim_{k}" for name, protos in zip(names, self.prototypes_) for k in range(len(protos))],
            dtype=object,
        )

    # --- helpers ---------------------------------------------------------------------------
    def _fit_codes(self, X) -> list[np.ndarray]:
        frame = self._frame(X, reset=True)
        # most frequent first, ties lexical: the prototypes are a prefix of the levels
        codes = self._fit_levels(frame, order="frequency")
        self.prototypes_, self.lookups_ = [], []
        for levels, n_missing in zip(self.levels_, self.n_missing_):
            texts = self._texts(levels.tolist())
            chosen = texts[: self.n_prototypes]
            with_missing = self.missing == "category" and n_missing > 0
            table = np.zeros((len(texts) + 2, len(chosen) + with_missing), dtype=np.float64)
            table[: len(texts), : len(chosen)] = ngram_similarity(texts, chosen, self.ngram)
            if with_missing:
                # missing has no text: 1 to itself, 0 to every string (a level of its own)
                table[MISSING, -1] = 1.0
            protos = levels[: len(chosen)].tolist() + ([None] if with_missing else [])
            self.prototypes_.append(_object_array(protos))
            self.lookups_.append(table)
        return codes

    def _texts(self, values) -> list[str]:
        if self.pad:
            return [f" {v!s} " for v in values]
        return [str(v) for v in values]

    def _to_output(self, codes: list[np.ndarray], values: list) -> np.ndarray:
        """``values[j]``: ``(raw codes, distinct values)`` of column ``j`` at transform."""
        widths = [table.shape[1] for table in self.lookups_]
        out = np.empty((len(codes[0]), sum(widths)), dtype=np.float64)
        start = 0
        for j, (table, col) in enumerate(zip(self.lookups_, codes)):
            block = out[:, start : start + widths[j]]
            start += widths[j]
            # codes lie in [-2, n_levels - 1], so "wrap" reads the same rows as negative
            # indexing; it is ~3x faster than the default mode, which buffers ``out``
            if len(codes) == 1:
                np.take(table, col, axis=0, out=out, mode="wrap")  # no intermediate copy
            else:
                block[...] = np.take(table, col, axis=0, mode="wrap")
            unseen = col == UNSEEN
            if values[j] is not None and unseen.any():
                block[unseen] = self._unseen_block(j, table, *values[j], unseen)
        return out

    def _unseen_block(self, j, table, raw, uniques, unseen) -> np.ndarray:
        """Rows of the unseen values: similarities of their distinct values only."""
        new_codes, distinct = pd.factorize(raw[unseen])
        texts = self._texts(uniques.take(distinct).tolist())
        n_text = sum(p is not None for p in self.prototypes_[j])
        protos = self._texts(self.prototypes_[j][:n_text].tolist())
        sims = np.zeros((len(texts), table.shape[1]), dtype=np.float64)
        sims[:, :n_text] = ngram_similarity(texts, protos, self.ngram)
        return sims[new_codes]


def ngram_set(text: str, n: int) -> set[str]:
    """The set ``G(text)`` of character n-grams; the whole text when shorter than ``n``.

    Parameters
    ----------
    text : str
    n : int
        n-gram length, >= 1.

    Returns
    -------
    set of str

    Examples
    --------
    >>> sorted(ngram_set("London", 3))
    ['Lon', 'don', 'ndo', 'ond']
    >>> ngram_set("ab", 3)
    {'ab'}
    """
    if len(text) < n:
        return {text}
    return {text[i : i + n] for i in range(len(text) - n + 1)}


def ngram_similarity(texts, prototypes, n: int) -> np.ndarray:
    """``|G(s) ∩ G(t)| / |G(s) ∪ G(t)|`` for every text ``s`` and prototype ``t``.

    Parameters
    ----------
    texts, prototypes : sequence of str
    n : int
        n-gram length (see :func:`ngram_set`).

    Returns
    -------
    float64 ndarray of shape (len(texts), len(prototypes))

    References
    ----------
    .. [1] Cerda, Varoquaux & Kégl (2018), Machine Learning 107:1477-1494, section 3.3.
    """
    vocab: dict[str, int] = {}
    protos, proto_sizes = _incidence(prototypes, n, vocab, grow=True)
    # n-grams absent from every prototype only enlarge |G(s)|: no column needed for them
    values, value_sizes = _incidence(texts, n, vocab, grow=False)
    inter = (values @ protos.T).toarray()
    union = value_sizes[:, None] + proto_sizes[None, :] - inter
    return inter / union  # union >= 1: every set holds at least one n-gram


def _incidence(texts, n: int, vocab: dict, grow: bool) -> tuple[sp.csr_matrix, np.ndarray]:
    """Binary text x n-gram matrix over ``vocab`` (extended when ``grow``), and set sizes."""
    indptr, indices, sizes = [0], [], []
    for text in texts:
        grams = ngram_set(text, n)
        sizes.append(len(grams))
        if grow:
            ids = [vocab.setdefault(g, len(vocab)) for g in grams]
        else:
            ids = [vocab[g] for g in grams if g in vocab]
        indices.extend(ids)
        indptr.append(len(indices))
    data = np.ones(len(indices), dtype=np.float64)
    shape = (len(sizes), max(len(vocab), 1))
    matrix = sp.csr_matrix((data, np.asarray(indices, dtype=np.int64), indptr), shape=shape)
    return matrix, np.asarray(sizes, dtype=np.float64)


def _object_array(values: list) -> np.ndarray:
    """A 1-D object array of ``values`` (``np.asarray`` could nest tuple-like values)."""
    out = np.empty(len(values), dtype=object)
    out[:] = values
    return out
