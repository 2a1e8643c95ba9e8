"""What every encoder class declares about itself, checked over the whole registry.

Registering a kind puts it here. The declarations (``uses_target``, ``leaky_when``,
``references``, ``param_rules``) are read by the runner (the ``uses_target`` and
``leaky`` columns), the report's leakage audit and the bibliography, so a wrong
declaration would silently mislabel results: these checks measure each kind's behaviour
and compare it with what the class says.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from sklearn.model_selection import KFold

from harness.encoders import ENCODERS, KINDS, ParameterError, build, check, declaration, params_of
from harness.encoders._rules import Options, invalid_example
from harness.errors import ConfigError, EncoderInputError
from harness.reporting._bib import BIB

N_LEVELS, PER_LEVEL = 200, 40


def _as_array(out) -> np.ndarray:
    if hasattr(out, "toarray"):
        return out.toarray()
    if isinstance(out, pd.DataFrame):
        return np.column_stack([out[c].cat.codes.to_numpy() for c in out.columns]).astype(float)
    return np.asarray(out, dtype=np.float64)


def _probe_data(seed: int):
    """Random labels, independent of the level: any dependence of a training encoding on
    the row's own label is leakage, not signal (common practice, no source)."""
    rng = np.random.default_rng(seed)
    level = np.repeat(np.arange(N_LEVELS), PER_LEVEL)
    rng.shuffle(level)
    frame = pd.DataFrame({"level": pd.Series([f"L{v}" for v in level], dtype=object)})
    y = rng.integers(0, 2, size=len(level))
    return frame, y, level


def _option_settings(kind: str):
    """Every combination of the kind's option-valued parameters."""
    rules = ENCODERS[kind].param_rules
    names = [n for n, r in rules.items() if all(isinstance(x, Options) for x in r)]
    values = [[v for x in rules[n] for v in x.values] for n in names]
    for combo in itertools.product(*values):
        yield dict(zip(names, combo))


def _fixed_folds(kind: str) -> dict:
    params = params_of(kind)
    extra = {"random_state": 0} if "random_state" in params else {}
    if "cv" in params:  # fixed folds: a label change must not move rows between folds
        extra["cv"] = KFold(5, shuffle=True, random_state=0)
    return extra


@pytest.mark.parametrize("kind", KINDS)
def test_an_encoder_whose_output_moves_with_y_declares_uses_target(kind):
    """A supervised encoder can never be recorded (and audited) as target-free."""
    frame, y, _ = _probe_data(1)
    extra = _fixed_folds(kind)
    outs = []
    for labels in (y, 1 - y):
        enc = build(kind, **extra)
        outs.append((_as_array(enc.fit_transform(frame, labels)), _as_array(enc.transform(frame))))
    moves = not all(np.array_equal(a, b) for a, b in zip(outs[0], outs[1]))
    assert moves == ENCODERS[kind].uses_target, (kind, moves)
    assert enc.__sklearn_tags__().target_tags.required == ENCODERS[kind].uses_target
    assert declaration(kind, {}).uses_target == ENCODERS[kind].uses_target


def _within_level_corr(enc: np.ndarray, y: np.ndarray, level: np.ndarray) -> float:
    """Largest |correlation| of label and encoding after removing each level's mean."""
    best = 0.0
    for col in enc.T:
        e = col - (np.bincount(level, col) / np.bincount(level))[level]
        t = y - (np.bincount(level, y) / np.bincount(level))[level]
        denom = np.sqrt((e * e).sum() * (t * t).sum())
        if denom > 1e-9 * len(e):
            best = max(best, abs(float((e * t).sum() / denom)))
    return best


def _marginal_corr(enc: np.ndarray, y: np.ndarray) -> float:
    return max((abs(np.corrcoef(col, y)[0, 1]) for col in enc.T if col.std() > 0), default=0.0)


@pytest.mark.parametrize("kind", [k for k in KINDS if ENCODERS[k].uses_target])
def test_leaky_declaration_matches_measured_leakage(kind):
    """``leaky`` is declared exactly for the settings whose training encodings reveal the
    row's own label. Two signatures (Prokhorenkova et al. 2018, NeurIPS, section 3.2,
    "target leakage"): in-sample statistics move with the own label across levels
    (marginal correlation ~ 1/sqrt(40) = 0.16 here), and leave-one-out statistics take one
    value per (level, own label) (within-level correlation exactly 1 in size). Cross-fitted
    schemes stay below 0.04 and 0.4 (k-fold with 8 rows per fold and level: ~ 1/sqrt(8))."""
    frame, y, level = _probe_data(2)
    checked = 0
    for setting in _option_settings(kind):
        enc = build(kind, **setting, **_fixed_folds(kind))
        try:
            out = _as_array(enc.fit_transform(frame, y))
        except EncoderInputError:  # a combination this target cannot take (woe x continuous)
            continue
        marginal, within = _marginal_corr(out, y), _within_level_corr(out, y, level)
        measured = marginal > 0.08 or within > 0.7
        assert measured == declaration(kind, setting).leaky, (setting, marginal, within)
        checked += 1
    assert checked > 0


@pytest.mark.parametrize("kind", KINDS)
def test_every_parameter_has_rules(kind):
    assert set(ENCODERS[kind].param_rules) == set(params_of(kind))


@pytest.mark.parametrize("kind", KINDS)
def test_declared_references_are_in_the_bibliography(kind):
    cls = ENCODERS[kind]
    keys = set(cls.references) | {k for by in cls.references_when.values() for v in by.values() for k in v}
    assert keys <= set(BIB), keys - set(BIB)


def _constrained():
    return [(kind, name) for kind in KINDS for name in ENCODERS[kind].param_rules]


@pytest.mark.parametrize(("kind", "name"), _constrained())
def test_invalid_value_of_every_constrained_parameter_is_refused(kind, name, rng):
    bad = invalid_example(ENCODERS[kind].param_rules[name])
    frame = pd.DataFrame({"c": rng.choice(["a", "b", "c"], size=30)})
    y = rng.integers(0, 2, size=30)
    wording = rf"^{ENCODERS[kind].__name__}: parameter '{name}' must be .+; got {_re_repr(bad)}\."
    with pytest.raises(ParameterError, match=wording) as info:
        build(kind, **{name: bad}).fit(frame, y)
    assert isinstance(info.value, ConfigError) and isinstance(info.value, ValueError)
    # config validation uses the same rules without fitting
    with pytest.raises(ParameterError, match=wording):
        check(kind, {name: bad})


def _re_repr(value) -> str:
    import re

    return re.escape(repr(value))


@pytest.mark.parametrize("kind", KINDS)
def test_defaults_pass_the_rules(kind):
    check(kind, {})


def test_harness_list_shows_the_declarations(capsys):
    from harness.cli import main

    assert main(["list"]) == 0
    out = capsys.readouterr().out
    assert "uses the target; leaky when crossfit in none, loo" in out
    assert out.count("target-free") == sum(not ENCODERS[k].uses_target for k in KINDS)
    # each parameter with its default and the values its declared rules allow
    assert "width = 256: an integer in [1, 16777216]" in out
    assert "scheme = 'sum': one of 'sum', 'helmert'" in out
