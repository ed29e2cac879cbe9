"""CV+ and jackknife+ ends at many rows: the fast routes equal the definition exactly.

The definition (Barber, Candes, Ramdas & Tibshirani 2021, sections 2-3): at each answer row,
every candidate mu_{-i}(x0) -/+ q R_i is formed and the k-th smallest taken; O(n) per row.
The fast routes (nearwise.core.order_stats) search over values (CV+: the union of the folds'
shifted sorted residuals) or over a window of sorted residuals (jackknife+ of kNN, whose
leave-one-out predictions differ from the fit at few rows), and certify each answer by the rank
argument. They must give the same floats, on random cases with ties, undefined residuals,
spreads that are not finite and fold predictions that agree.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from nearwise.core import intervals, order_stats, uncertainty
from nearwise.core.methods.knn import KNN
from nearwise.core.spec import TuningSpec
from nearwise.core.tuning import make_folds


def _definition(mu, parts, spread, k, upper) -> np.ndarray:
    sign = 1.0 if upper else -1.0
    with np.errstate(invalid="ignore", over="ignore"):
        values = np.concatenate(
            [mu[f][None, :] + sign * spread * s[:, None] for f, s in enumerate(parts)]
        )
    return np.sort(values, axis=0)[k - 1]


def _case(seed: int):
    """Random folds, rows and residuals; even seeds round the residuals (ties), seeds
    divisible by 3 round the fold predictions, by 5 add undefined (infinite) residuals."""
    rng = np.random.default_rng(seed)
    folds, n, m = int(rng.integers(2, 11)), int(rng.integers(20, 500)), int(rng.integers(1, 300))
    base = rng.normal(size=m)
    mu = base + rng.normal(0, rng.choice([0.0, 1e-3, 0.2, 2.0]), (folds, m))
    mu[:, :3] = base[:3]  # fold predictions that agree: a bracket of width 0
    if seed % 3 == 0:
        mu = np.round(mu, 1)
    resid = np.abs(rng.normal(size=n))
    if seed % 2 == 0:
        resid = np.round(resid, int(rng.integers(0, 3)))
    n_inf = 3 if seed % 5 == 0 else 0
    resid[:n_inf] = np.inf
    fold = rng.integers(0, folds, n)
    fold[:folds] = np.arange(folds)
    parts = [np.sort(resid[fold == f]) for f in range(folds)]
    spread = rng.uniform(0.5, 2.0, m) if seed % 4 else np.ones(m)
    ks = {1, 2, n // 2, n - n_inf, int(rng.integers(1, n - n_inf + 1))}
    return mu, parts, spread, sorted(k for k in ks if k >= 1), n_inf


@pytest.mark.parametrize("select_at", [1, 32, 400])
def test_fast_cv_plus_equals_the_definition_exactly(monkeypatch, select_at) -> None:
    monkeypatch.setattr(intervals, "CHUNK_CELLS", 0)  # never form every candidate
    monkeypatch.setattr(order_stats, "SELECT_AT", select_at)
    for seed in range(40):
        mu, parts, spread, ks, n_inf = _case(seed)
        spread[-2:] = [np.inf, np.nan] if spread.size > 4 else spread[-2:]
        mu[0, -3] = np.nan if mu.shape[1] > 5 else mu[0, -3]  # takes the definition
        fine = np.isfinite(spread)
        for k in ks:
            for upper in (True, False):
                if not upper and k <= n_inf:  # such an end is unbounded (see cv_plus)
                    continue
                got = intervals._kth_of_folds(mu, parts, spread, k, upper)
                want = _definition(mu[:, fine], parts, spread[fine], k, upper)
                assert_array_equal(got[fine], want, err_msg=f"seed {seed}, k {k}")
                assert np.all(got[~fine] == (np.inf if upper else -np.inf))


def test_a_wrong_count_is_caught_by_the_certificate(monkeypatch) -> None:
    """Positions off by one in every count (as rounding might misplace a candidate) still
    give the definition: the rank argument rejects what it cannot certify."""
    monkeypatch.setattr(intervals, "CHUNK_CELLS", 0)
    count = order_stats._positions
    monkeypatch.setattr(
        order_stats, "_positions", lambda mu, ps, q, v: np.maximum(count(mu, ps, q, v) - 1, 0)
    )
    for seed in (1, 2, 7):
        mu, parts, spread, ks, _ = _case(seed)
        for k in ks:
            got = intervals._kth_of_folds(mu, parts, spread, k, True)
            assert_array_equal(got, _definition(mu, parts, spread, k, True))


@pytest.mark.parametrize(("upper", "k"), [(True, 18_000), (False, 2_000)])
@pytest.mark.parametrize("differ", [0.05, 0.0])  # 0: the folds agree, the bracket is exact
def test_the_search_needs_few_counting_passes(monkeypatch, upper, k, differ) -> None:
    rng = np.random.default_rng(5)
    n = m = 20_000
    mu = rng.normal(size=m) + rng.normal(0, differ, (5, m))
    resid = np.abs(rng.normal(size=n))
    parts = [np.sort(resid[f::5]) for f in range(5)]
    calls = []
    count = order_stats._positions
    monkeypatch.setattr(order_stats, "_positions", lambda *a: calls.append(1) or count(*a))
    got = intervals._kth_of_folds(mu, parts, np.ones(m), k, upper)
    # 2 counts for the bracket's ends and 2 per step: 4 steps when the folds' predictions
    # differ by about 0.05 (none when they agree), where a bisection to full precision takes
    # about 60 counts
    assert len(calls) <= 10, len(calls)
    assert_array_equal(got[:50], _definition(mu[:, :50], parts, np.ones(50), k, upper))


# ------------------------------------------------------------------------- jackknife+
def _sparse_case(seed: int):
    """A fit's predictions, residuals and a window of changed leave-one-out predictions per
    row (NaN among them: undefined), with ties among residuals and among predictions."""
    rng = np.random.default_rng(100 + seed)
    n, m = int(rng.integers(10, 400)), int(rng.integers(1, 200))
    w = int(rng.integers(1, min(n, 30) + 1))
    resid = np.abs(rng.normal(size=n))
    if seed % 2 == 0:
        resid = np.round(resid, 1)
    if seed % 5 == 0:
        resid[:2] = np.nan  # undefined: infinitely large scores
    base = np.round(rng.normal(size=m), 1 if seed % 3 == 0 else 12)
    ind = np.array([rng.choice(n, w, replace=False) for _ in range(m)])
    value = base[:, None] + np.round(rng.normal(0, 0.3, (m, w)), 1 if seed % 3 == 0 else 12)
    value[0, 0] = np.nan
    spread = rng.uniform(0.5, 2.0, m) if seed % 4 else None
    return n, m, resid, base, ind, value, spread


def test_fast_jackknife_plus_equals_the_definition_exactly() -> None:
    for seed in range(40):
        n, m, resid, base, ind, value, spread = _sparse_case(seed)
        dense = np.repeat(base[:, None], n, axis=1)
        dense[np.arange(m)[:, None], ind] = value

        def groups(rows, ind=ind, value=value):
            yield np.arange(rows.size), ind[rows], value[rows]

        for level in (0.5, 0.8, 0.9, 0.95):
            want = intervals.jackknife_plus(lambda r, d=dense: d[r], m, resid, level, spread)
            got = intervals.jackknife_plus(
                lambda r: pytest.fail("took the dense route"),
                m,
                resid,
                level,
                spread,
                changes=(base, groups),
            )
            assert_array_equal(got[0], want[0], err_msg=f"seed {seed}, level {level}")
            assert_array_equal(got[1], want[1], err_msg=f"seed {seed}, level {level}")


def test_jackknife_plus_rows_without_a_finite_spread_take_the_dense_route() -> None:
    n, m, resid, base, ind, value, _ = _sparse_case(1)
    spread = np.ones(m)
    spread[0] = np.inf
    dense = np.repeat(base[:, None], n, axis=1)
    dense[np.arange(m)[:, None], ind] = value
    asked = []

    def loo(rows):
        asked.append(rows.tolist())
        return dense[rows]

    got = intervals.jackknife_plus(
        loo,
        m,
        resid,
        0.9,
        spread,
        changes=(base, lambda r: iter([(np.arange(r.size), ind[r], value[r])])),
    )
    want = intervals.jackknife_plus(lambda r: dense[r], m, resid, 0.9, spread)
    assert asked == [[0]]
    assert_array_equal(got[0], want[0])
    assert_array_equal(got[1], want[1])


def _knn_fit(rng, n, weights, tied, row_w=None):
    X = rng.uniform(0, 1, (n, 2))
    if tied:
        X = np.round(X * 4) / 4  # many rows at equal distances
    y = np.sin(6 * X[:, 0]) + X[:, 1] + rng.normal(0, 0.3, n)
    method = KNN()
    settings = method.settings({"weights": weights})
    work = None if row_w is None else {"weights": row_w}
    return method.fit(X, y, settings, 7, work), X, y


@pytest.mark.parametrize("weights", ["uniform", "distance"])
@pytest.mark.parametrize("tied", [False, True])
@pytest.mark.parametrize("row_w", [False, True])
def test_knn_changed_predictions_are_its_leave_one_out_predictions(weights, tied, row_w) -> None:
    rng = np.random.default_rng(8)
    w = rng.uniform(0.5, 2.0, 300) if row_w else None
    model, X, _ = _knn_fit(rng, 300, weights, tied, w)
    Xq = np.vstack([X[:40], rng.uniform(0, 1, (40, 2))])  # training rows and new rows
    base, groups = model.loo_changes(Xq)
    dense = model.loo_predictions(Xq)(np.arange(Xq.shape[0]))
    assert_allclose(base, model.predict(Xq), rtol=0, atol=0)
    rebuilt = np.repeat(base[:, None], X.shape[0], axis=1)
    seen = np.zeros(Xq.shape[0], dtype=bool)
    for sub, ind, value in groups(np.arange(Xq.shape[0])):
        rebuilt[sub[:, None], ind] = value
        seen[sub] = True
    assert seen.all()
    # the leave-one-out lemma by a sum less one term: equal to rounding
    assert_allclose(rebuilt, dense, rtol=1e-12, atol=1e-12)


def test_knn_jackknife_plus_with_changes_equals_the_dense_route() -> None:
    rng = np.random.default_rng(9)
    model, X, _ = _knn_fit(rng, 400, "uniform", False)
    resid = np.abs(rng.normal(0, 0.3, X.shape[0]))
    Xq = np.vstack([X, rng.uniform(0, 1, (50, 2))])
    m = Xq.shape[0]
    for level in (0.8, 0.95):
        want = intervals.jackknife_plus(model.loo_predictions(Xq), m, resid, level)
        got = intervals.jackknife_plus(
            model.loo_predictions(Xq), m, resid, level, changes=model.loo_changes(Xq)
        )
        assert_allclose(got[0], want[0], rtol=0, atol=1e-12)
        assert_allclose(got[1], want[1], rtol=0, atol=1e-12)


# ------------------------------------------------------------------ fold predictions
def test_answers_at_training_rows_take_their_own_fold_from_the_tuning() -> None:
    """At a training row, its own fold model's prediction is its out-of-fold prediction:
    taken from the tuning, the fold predictions equal every fold model's own (K-fold CV+,
    Barber et al. 2021, section 3)."""
    rng = np.random.default_rng(3)
    n = 500
    X = rng.uniform(0, 1, (n, 2))
    X[1] = X[0]  # a repeated row: either copy's fold serves
    y = np.sin(6 * X[:, 0]) + rng.normal(0, 0.3, n)
    folds = make_folds(n, TuningSpec(folds=5, seed=0))
    method = KNN()
    path = method.path(X, y, folds, method.settings({}), [9, 4])
    Xq = np.vstack([X[::-1], rng.uniform(0, 1, (20, 2))])  # training rows in another order
    own = uncertainty.own_fold(X, Xq, folds.fold_id[0], path.oof[1, 0])
    assert (own[0][:n] >= 0).all() and (own[0][n:] == -1).all()
    fold = folds.fold_id[0]
    assert_array_equal(own[0][: n - 2], fold[::-1][: n - 2])
    assert own[0][n - 2] == own[0][n - 1] == fold[0]
    fast = uncertainty.fold_predictions(path.fold_models, Xq, 1, n, own)
    every = uncertainty.fold_predictions(path.fold_models, Xq, 1, n)
    assert_allclose(fast, every, rtol=0, atol=1e-12)
