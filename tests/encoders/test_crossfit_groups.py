"""Group-aware cross-fitting: no row's statistic uses a row of its own group.

References are brute-force computations row by row, from the definitions: k-fold and
holdout on whole groups, leave-one-group-out, and ordered statistics over an order of
whole groups (Prokhorenkova et al. 2018, NeurIPS, with groups in place of rows).
"""

from __future__ import annotations

import functools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from harness.encoders import _crossfit
from harness.encoders._target import SMOOTHINGS, TargetStatistics
from harness.errors import EncoderInputError

from test_crossfit import assert_cells_match, brute_force, frame_of, rows

FAST = settings(max_examples=60, deadline=None)


def _groups(draw, n):
    labels = np.array(draw.draw(st.lists(st.integers(0, 4), min_size=n, max_size=n)))
    _, codes = np.unique(labels, return_inverse=True)
    return codes.astype(np.int64)


@FAST
@given(rows(min_rows=3), st.data())
def test_leave_one_group_out_uses_all_rows_outside_the_group(data, draw):
    codes, Y = data
    groups = _groups(draw, len(codes))
    if groups.max() < 1:
        with pytest.raises(EncoderInputError, match="at least 2 groups"):
            _crossfit.leave_one_group_out(codes, Y, 4, groups)
        return
    outside = lambda i: groups != groups[i]  # noqa: E731
    expected = brute_force(codes, Y, lambda i: (outside(i), outside(i)))
    assert_cells_match(_crossfit.leave_one_group_out(codes, Y, 4, groups), expected)


@FAST
@given(rows(min_rows=3), st.data(), st.randoms(use_true_random=False))
def test_grouped_ordered_uses_rows_of_earlier_groups_only(data, draw, random):
    codes, Y = data
    groups = _groups(draw, len(codes))
    if groups.max() < 1:
        return
    n_groups = int(groups.max()) + 1
    permutation = np.array(random.sample(range(n_groups), n_groups))
    place = np.argsort(permutation)[groups]  # each row's group position
    outside = lambda i: groups != groups[i]  # noqa: E731
    expected = brute_force(codes, Y, lambda i: (place < place[i], outside(i)))
    assert_cells_match(_crossfit.ordered(codes, Y, 4, permutation, groups=groups), expected)


@pytest.mark.parametrize("seed", range(5))
def test_group_folds_and_holdout_never_split_a_group(seed):
    rng = np.random.RandomState(seed)
    groups = rng.randint(0, 23, size=400)
    groups = np.unique(groups, return_inverse=True)[1]
    fold, k = _crossfit.group_folds(groups, 5, rng)
    assert k == 5 and len(np.unique(fold)) == 5
    part = _crossfit.group_holdout(groups, 0.5, rng)
    for assign in (fold, part):
        per_group = [np.unique(assign[groups == g]) for g in np.unique(groups)]
        assert all(len(p) == 1 for p in per_group)
    assert 0.3 < np.mean(part == 0) < 0.7
    fold, k = _crossfit.group_folds(groups[groups < 3], 5, rng)  # fewer groups than folds
    assert k == 3


@pytest.mark.parametrize("smoothing", SMOOTHINGS)
@pytest.mark.parametrize("crossfit", ["kfold", "holdout", "ordered", "loo"])
def test_own_group_targets_never_move_own_encodings(crossfit, smoothing):
    """Change every target of one group: that group's training encodings stay put."""
    rng = np.random.RandomState(0)
    n = 300
    groups = rng.randint(0, 30, size=n)
    codes = rng.randint(0, 4, size=n)
    y = rng.normal(size=n)
    enc = functools.partial(
        TargetStatistics, crossfit=crossfit, smoothing=smoothing, random_state=3, target_type="continuous"
    )
    before = enc().fit_transform(frame_of(codes), y, groups=groups)
    for g in (0, 7, 29):
        moved = y.copy()
        moved[groups == g] += rng.normal(scale=5.0, size=(groups == g).sum())
        after = enc().fit_transform(frame_of(codes), moved, groups=groups)
        np.testing.assert_allclose(after[groups == g], before[groups == g], rtol=0, atol=1e-9)
        assert not np.allclose(after[groups != g], before[groups != g])  # the others do use them


def test_ungrouped_kfold_leaks_a_groups_own_targets():
    """The contrast: random inner folds put a row's own group into its statistic."""
    rng = np.random.RandomState(0)
    groups, codes, y = rng.randint(0, 30, 300), rng.randint(0, 4, 300), rng.normal(size=300)
    enc = lambda: TargetStatistics(crossfit="kfold", random_state=3, target_type="continuous")  # noqa: E731
    before = enc().fit_transform(frame_of(codes), y)
    moved = y + np.where(groups == 7, 5.0, 0.0)
    after = enc().fit_transform(frame_of(codes), moved)
    assert not np.allclose(after[groups == 7], before[groups == 7])
