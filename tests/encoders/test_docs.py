"""Documentation of every registered encoder: runnable examples, fitted attributes, numpydoc.

Registering a kind puts it here: its class docstring must hold one ``Examples`` section
that runs as written (a doctest), an ``Attributes`` section naming every public fitted
attribute, and ``fit`` and ``transform`` must document ``Parameters`` and ``Returns``.
"""

from __future__ import annotations

import doctest
import inspect

import numpy as np
import pandas as pd
import pytest

from harness.encoders import ENCODERS, KINDS, build


@pytest.mark.parametrize("kind", KINDS)
def test_examples_run_as_written(kind):
    cls = ENCODERS[kind]
    doc = inspect.getdoc(cls)
    assert doc.count("Examples\n--------") == 1, kind
    test = doctest.DocTestParser().get_doctest(doc, {}, cls.__name__, None, 0)
    assert test.examples, kind
    runner = doctest.DocTestRunner(optionflags=doctest.NORMALIZE_WHITESPACE)
    runner.run(test)
    assert runner.summarize(verbose=False).failed == 0, kind


def _section(doc: str, title: str) -> str:
    start = doc.index(f"{title}\n{'-' * len(title)}")
    rest = doc[start + 2 * len(title) + 2 :]
    ends = [
        rest.find(f"\n{t}\n")
        for t in ("Parameters", "Returns", "Raises", "See Also", "Notes", "References", "Examples", "Attributes")
    ]
    ends = [e for e in ends if e >= 0]
    return rest[: min(ends)] if ends else rest


@pytest.mark.parametrize("kind", KINDS)
def test_every_fitted_attribute_is_documented(kind, rng):
    frame = pd.DataFrame({"c": rng.choice(["a", "b", "c"], size=40)})
    enc = build(kind).fit(frame, (rng.random(40) < 0.5).astype(int))
    fitted = [k for k in vars(enc) if k.endswith("_") and not k.startswith("_")]
    documented = _section(inspect.getdoc(type(enc)), "Attributes")
    missing = [k for k in fitted if k not in documented]
    assert not missing, (kind, missing)


@pytest.mark.parametrize("method", ["fit", "transform"])
@pytest.mark.parametrize("kind", KINDS)
def test_fit_and_transform_have_numpydoc(kind, method):
    doc = inspect.getdoc(getattr(ENCODERS[kind], method))
    assert "Parameters\n----------" in doc and "Returns\n-------" in doc, (kind, method)
    assert "X :" in doc


def test_examples_match_an_outside_reference():
    """The integer example's codes are scikit-learn's ``OrdinalEncoder`` codes (reference
    library); the one-hot example's block equals ``OneHotEncoder``'s."""
    from sklearn.preprocessing import OneHotEncoder, OrdinalEncoder

    X = pd.DataFrame({"city": ["Oslo", "Rome", "Oslo", "Lima"]})
    np.testing.assert_array_equal(build("integer").fit_transform(X), OrdinalEncoder().fit_transform(X))
    np.testing.assert_array_equal(
        build("onehot").fit_transform(X).toarray(), OneHotEncoder().fit_transform(X).toarray()
    )
