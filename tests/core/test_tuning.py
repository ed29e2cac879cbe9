"""Fold assignment, scoring and the one-standard-error rule."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nearwise.core import tuning
from nearwise.core.errors import TooFewRows
from nearwise.core.spec import TuningSpec


def test_kfold_sizes_differ_by_at_most_one_and_repeats_differ():
    folds = tuning.make_folds(103, TuningSpec(folds=5, repeats=3, seed=1))
    for r in range(3):
        counts = np.bincount(folds.fold_id[r], minlength=5)
        assert counts.max() - counts.min() <= 1 and counts.sum() == 103
    assert not np.array_equal(folds.fold_id[0], folds.fold_id[1])
    assert folds.min_train == 103 - 21


def test_groups_never_split_across_folds():
    rng = np.random.default_rng(0)
    groups = rng.integers(0, 17, 200)
    groups = np.unique(groups, return_inverse=True)[1]
    folds = tuning.make_folds(200, TuningSpec(folds=4, repeats=2), groups)
    for r in range(2):
        for g in np.unique(groups):
            assert np.unique(folds.fold_id[r][groups == g]).size == 1


def test_too_few_rows_for_the_folds_says_what_would_work():
    with pytest.raises(
        TooFewRows, match=r"5-fold cross-validation needs at least 5 usable rows; got 4"
    ):
        tuning.make_folds(4, TuningSpec(folds=5))
    with pytest.raises(TooFewRows, match="needs at least 5 usable groups; got 3"):
        tuning.make_folds(30, TuningSpec(folds=5), np.arange(30) % 3)


def test_scores_follow_their_definitions():
    """Pooled RMSE; se = sd(fold MSE)/sqrt(K) carried to RMSE by the delta method."""
    rng = np.random.default_rng(2)
    y = rng.normal(size=20)
    oof = y[None, None, :] + rng.normal(0, 0.5, size=(2, 1, 20))
    folds = tuning.make_folds(20, TuningSpec(folds=4, seed=0))
    s = tuning.score(y, oof, folds, "rmse")
    for c in range(2):
        r = y - oof[c, 0]
        mse = [np.mean(r[folds.fold_id[0] == f] ** 2) for f in range(4)]
        rmse = np.sqrt(np.mean(r**2))
        # The same sums in another order: ulps.
        assert_allclose(s.error[c], rmse, rtol=1e-13)
        assert_allclose(s.error_se[c], np.std(mse, ddof=1) / 2 / (2 * rmse), rtol=1e-12)
    m = tuning.score(y, oof, folds, "mae")
    r = y - oof[0, 0]
    # The same sum in another order: ulps.
    assert_allclose(m.error[0], np.mean(np.abs(r)), rtol=1e-13)


def test_one_se_rule_picks_the_simplest_within_one_standard_error():
    """Hastie, Tibshirani & Friedman (2009), section 7.10: candidates simplest first."""
    error = np.array([5.0, 3.2, 3.0, 3.05])
    se = np.array([0.1, 0.1, 0.25, 0.1])
    assert tuning.choose(error, se, "one_se") == (2, 1)
    assert tuning.choose(error, se, "min") == (2, 2)
    assert tuning.choose(np.array([np.inf, 2.0]), np.array([np.inf, 0.1]), "one_se") == (1, 1)
