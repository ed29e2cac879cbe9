"""Rows in time order: reading `order_by`, the window and blocks folds, the default gap, and
the fast leave-a-window-out paths against refits without the window.

References for the refits: scipy ``make_smoothing_spline`` and ``RBFInterpolator``,
scikit-learn ``KNeighborsRegressor`` and ``Ridge``, numpy ``lstsq``.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.interpolate import RBFInterpolator, make_smoothing_spline
from sklearn.linear_model import Ridge
from sklearn.neighbors import KNeighborsRegressor

from nearwise.core import sequence, serial, tuning
from nearwise.core.data import Scaler, Table
from nearwise.core.errors import BadCell, NotApplicable, TooFewRows, UnknownName
from nearwise.core.methods import METHODS
from nearwise.core.methods.polynomial import design
from nearwise.core.spec import TuningSpec


def _labels(cells: list) -> Table:
    values = np.array([c if isinstance(c, float | int) else np.nan for c in cells], dtype=float)
    labels = {0: np.array(cells, dtype=object)} if any(isinstance(c, str) for c in cells) else {}
    return Table("train", ("t",), values[:, None], labels)


# -- reading order_by ---------------------------------------------------------------------
def test_numbers_dates_and_offsets_give_sortable_steps() -> None:
    line = sequence.timeline(_labels([3.0, 1.0, 2.0, 1.0]), "t")
    assert line.kind == "number" and line.steps == 3
    assert line.step.tolist() == [2, 0, 1, 0]  # ties share a step
    dates = sequence.timeline(_labels(["2026-03-01", "2026-02-28", "2026-03-02"]), "t")
    assert dates.kind == "date" and dates.step.tolist() == [1, 0, 2]
    assert dates.key[2] - dates.key[0] == 86400.0  # one day in seconds
    # The same instant written with two offsets is one step (compared in UTC).
    zoned = sequence.timeline(
        _labels(["2026-03-01T12:00:00+02:00", "2026-03-01T10:00:00Z", "2026-03-01T11:00:00Z"]),
        "t",
    )
    assert zoned.kind == "datetime" and zoned.step.tolist() == [0, 0, 1]


@pytest.mark.parametrize(
    ("cells", "row", "words"),
    [
        ([1.0, np.nan, 3.0], 1, "missing"),
        ([1.0, "2026-01-01", 3.0], 0, "mixes numbers and text"),
        (["2026-01-01", "01/02/2026"], 1, "not an ISO 8601"),
        (["2026-01-01", "2026-01-02T00:00:00"], 1, "mixes forms"),
        (["2026-01-01T00:00:00", "2026-01-02T00:00:00Z"], 1, "mixes forms"),
    ],
)
def test_bad_order_by_cells_name_their_row(cells, row, words) -> None:
    with pytest.raises(BadCell, match=words) as info:
        sequence.timeline(_labels(cells), "t")
    assert info.value.where[0].path == ("train", "rows", row, 0)


def test_unknown_order_by_column() -> None:
    with pytest.raises(UnknownName, match="not in the train table"):
        sequence.timeline(_labels([1.0, 2.0]), "time")


# -- folds ------------------------------------------------------------------------------
def test_blocks_are_contiguous_and_leave_the_gap_out() -> None:
    step = np.repeat(np.arange(20), 2)
    spec = TuningSpec(scheme="blocks", folds=4, order_by="t")
    folds = tuning.ordered_folds(spec, step, 20, 2)
    assert folds.n_folds == 4 and folds.keep_models
    assert folds.fold_id[0].tolist() == np.repeat(np.arange(4), 10).tolist()
    for _r, f, train, test in folds.splits():
        lo, hi = 5 * f, 5 * f + 4  # the steps of fold f
        assert set(step[test]) == set(range(lo, hi + 1))
        assert set(step[train]) == set(range(20)) - set(range(lo - 2, hi + 3))
    assert folds.min_train == 40 - 2 * (5 + 4)  # an inner block loses 2 steps each side


def test_window_folds_are_one_per_step() -> None:
    step = np.array([0, 1, 1, 2, 3, 4, 5, 6, 7, 8])
    folds = tuning.ordered_folds(TuningSpec(scheme="window", order_by="t"), step, 9, 1)
    assert folds.n_folds == 9 and not folds.keep_models
    for _r, f, train, test in folds.splits():
        assert np.all(step[test] == f)
        assert np.all(np.abs(step[train] - f) > 1)
        assert np.count_nonzero(np.abs(step - f) > 1) == train.size
    assert folds.min_train == 10 - 4  # steps 0-2 hold 4 rows around step 1


def test_gap_leaving_two_rows_is_accepted_and_one_refused() -> None:
    spec = TuningSpec(scheme="window", order_by="t")
    # 11 steps, gap 4: the middle step leaves out 9 steps and keeps 2 rows (just enough).
    assert tuning.ordered_folds(spec, np.arange(11), 11, 4).min_train == 2
    # 10 steps, gap 4: steps 4 and 5 keep only 1 row.
    with pytest.raises(TooFewRows, match="leaves 1 training row") as info:
        tuning.ordered_folds(spec, np.arange(10), 10, 4)
    assert info.value.where[0].path == ("tuning", "gap")
    blocks = TuningSpec(scheme="blocks", folds=5, order_by="t")
    with pytest.raises(TooFewRows, match="more folds"):
        tuning.ordered_folds(blocks, np.arange(10), 10, 4)  # steps 4-5 keep none
    assert tuning.ordered_folds(blocks, np.arange(10), 10, 3).min_train == 2


def test_ordered_schemes_need_order_by_and_refuse_misplaced_options() -> None:
    with pytest.raises(NotApplicable, match="order_by") as info:
        tuning.check_spec(TuningSpec(scheme="window"))
    assert info.value.where[0].path == ("tuning", "order_by")
    with pytest.raises(NotApplicable) as info:
        tuning.check_spec(TuningSpec(scheme="kfold", gap=2))
    assert info.value.where[0].path == ("tuning", "gap")
    with pytest.raises(NotApplicable) as info:
        tuning.check_spec(TuningSpec(scheme="blocks", order_by="t", group_by="site"))
    assert info.value.where[0].path == ("tuning", "group_by")
    tuning.check_spec(TuningSpec(scheme="kfold", order_by="t", group_by="site"))  # allowed


# -- the default gap ----------------------------------------------------------------------
@pytest.mark.parametrize(
    ("phi", "gap"),
    [(0.0, 0), (0.099, 0), (0.1, 1), (0.31, 1), (0.32, 2), (0.5, 3), (0.6, 4), (0.9, 21)],
)
def test_gap_is_the_last_lag_with_correlation_at_least_a_tenth(phi, gap) -> None:
    # phi^gap >= 0.1 > phi^(gap + 1): 0.31^2 = 0.096 < 0.1 <= 0.32^2 = 0.1024.
    assert sequence.default_gap(phi, 1000) == (gap, False)


def test_gap_is_at_most_a_tenth_of_the_steps() -> None:
    assert sequence.default_gap(0.9, 210) == (21, False)
    assert sequence.default_gap(0.9, 209) == (20, True)
    assert sequence.default_gap(0.9, 9) == (0, False)


def test_difference_estimate_sees_the_noise_under_a_trend() -> None:
    """phi = 1 + 2 corr(d_t, d_t+1) for AR(1) noise (the lag-1 correlation of the differences
    of an AR(1) series is -(1 - phi) / 2: a standard identity), on a series with a strong
    slow trend that the differences remove."""
    rng = np.random.default_rng(0)
    n = 4000
    for phi in (0.0, 0.6, 0.9):
        e = np.zeros(n)
        for i in range(1, n):
            e[i] = phi * e[i - 1] + rng.normal()
        trend = 20 * np.sin(np.linspace(0, 3, n))
        est = sequence.difference_lag1(trend + e, np.zeros(n, dtype=int))
        assert abs(est - phi) < 0.06, (phi, est)  # sd of the estimate ~ 2 / sqrt(n) = 0.03
    # Pairs across pieces are not used: a jump between pieces changes nothing.
    x = rng.normal(size=200)
    piece = np.repeat([0, 1], 100)
    jumped = x + np.where(piece == 1, 50.0, 0.0)
    assert sequence.difference_lag1(jumped, piece) == sequence.difference_lag1(x, piece)


def test_pilot_gap_on_independent_and_dependent_rows() -> None:
    rng = np.random.default_rng(1)
    n = 600
    t = np.arange(n)
    x = (t / n)[:, None]
    signal = np.sin(6 * x[:, 0])
    e = np.zeros(n)
    for i in range(1, n):
        e[i] = 0.8 * e[i - 1] + rng.normal(0, 0.3)
    line = sequence.timeline(Table("train", ("t",), t[:, None].astype(float)), "t")
    dependent = serial.noise_lag1(x, signal + e, line.step, lambda: None)
    independent = serial.noise_lag1(x, signal + rng.normal(0, 0.3, n), line.step, lambda: None)
    assert dependent is not None and independent is not None
    assert dependent[1] == independent[1] == n
    assert abs(dependent[0] - 0.8) < 0.1 and independent[0] < 0.15
    gap = sequence.default_gap(dependent[0], n)[0]
    assert sequence.default_gap(independent[0], n)[0] <= 1 < 5 <= gap <= 20  # 0.8^10 = 0.107


def test_pilot_reads_only_the_first_steps() -> None:
    rng = np.random.default_rng(2)
    n = serial.PILOT_STEPS + 500
    x = rng.uniform(0, 1, (n, 1))
    y = np.sin(6 * x[:, 0]) + rng.normal(0, 0.3, n)
    step = np.arange(n)
    first = serial.noise_lag1(x, y, step, lambda: None)
    y[serial.PILOT_STEPS :] = 1e6  # the rows past the stretch play no part
    assert serial.noise_lag1(x, y, step, lambda: None) == first
    assert first is not None and first[1] == serial.PILOT_STEPS


def test_dependence_is_found_just_past_each_threshold() -> None:
    def dep(p=0.5, lag1=0.0, noise=None, steps=200):
        return sequence.Dependence(lag1, p, 10, 100.0, "order_by", noise, steps)

    assert dep(p=0.0099, lag1=0.2).found and not dep(p=0.0101, lag1=0.2).found
    assert dep(p=0.001, lag1=-0.2).found and not dep(p=0.001, lag1=0.199).found
    limit = 3.09 * np.sqrt(2 / 200)  # 0.309 > 0.1
    assert dep(noise=limit + 1e-9).found and not dep(noise=limit - 1e-9).found
    assert dep(noise=0.1, steps=10**6).found and not dep(noise=0.0999, steps=10**6).found
    assert dep(noise=0.99, steps=50).found and not dep(noise=0.99, steps=49).found


# -- fast paths against refits ----------------------------------------------------------
def _window(n_steps: int, per: int, gap: int, seed: int):
    rng = np.random.default_rng(seed)
    step = np.repeat(np.arange(n_steps), per)
    rng.shuffle(step)
    folds = tuning.ordered_folds(TuningSpec(scheme="window", order_by="t"), step, n_steps, gap)
    return rng, step, folds


@pytest.mark.parametrize("weights", ["uniform", "distance"])
def test_knn_window_equals_refits_without_the_window(weights) -> None:
    rng, step, folds = _window(60, 2, 3, 0)
    X = rng.uniform(0, 1, (120, 2))  # continuous: no ties, so scikit-learn's order is ours
    y = X[:, 0] + rng.normal(0, 0.1, 120)
    values = [1, 4, 9, 20]
    settings = {"weights": weights, "scale": "standard"}
    path = METHODS["knn"].path(X, y, folds, settings, values)
    Xs = Scaler.fit(X, "standard").transform(X)  # scaled once with all rows, as loo is
    worst = 0.0
    for f in range(folds.n_folds):
        train, test = np.abs(step - f) > 3, step == f
        for c, k in enumerate(values):
            ref = KNeighborsRegressor(n_neighbors=k, weights=weights).fit(Xs[train], y[train])
            worst = max(worst, float(np.max(np.abs(ref.predict(Xs[test]) - path.oof[c, 0, test]))))
    assert worst < 1e-12  # the same averages; rounding only


def test_knn_window_shares_ties_out_as_a_refit_does() -> None:
    """With ties at the k-th distance the fast path equals our own refit (which shares tied
    neighbors out) on the rows outside the window."""
    from nearwise.core.methods.knn import _index, predict_all_k

    rng, step, folds = _window(50, 3, 2, 1)
    X = np.round(rng.uniform(0, 1, (150, 1)), 1)
    y = rng.normal(size=150)
    path = METHODS["knn"].path(X, y, folds, {"weights": "uniform", "scale": "none"}, [3, 7])
    for f in range(folds.n_folds):
        train, test = np.abs(step - f) > 2, step == f
        ref = predict_all_k(_index(X[train]), y[train], X[test], 7, "uniform")
        assert_allclose(path.oof[:, 0, test], ref[:, [2, 6]].T, atol=1e-12)


def test_spline_window_equals_scipy_refits() -> None:
    rng, step, folds = _window(80, 2, 3, 2)
    # Distinct x at least 0.01 apart (no knot merging), in random time order.
    x = rng.permutation(np.linspace(0, 10, 160) + rng.uniform(-0.02, 0.02, 160))
    x[np.argmin(x)] = -0.5  # an end row held out: the refit extrapolates
    y = np.sin(x) + rng.normal(0, 0.2, 160)
    lams = [1e-3, 0.1, 10.0]
    path = METHODS["spline"].path(x[:, None], y, folds, {}, lams)
    scale = float(np.ptp(y))
    for f in range(folds.n_folds):
        train, test = np.abs(step - f) > 3, step == f
        xt, yt = x[train], y[train]
        o = np.argsort(xt)
        for c, lam in enumerate(lams):
            s = make_smoothing_spline(xt[o], yt[o], lam=lam)
            lo, hi = xt.min(), xt.max()
            xq = x[test]
            # scipy's B-spline continues its end cubic; a natural spline is linear outside.
            ref = np.where(
                xq < lo,
                s(lo) + (xq - lo) * s.derivative()(lo),
                np.where(xq > hi, s(hi) + (xq - hi) * s.derivative()(hi), s(xq)),
            )
            assert_allclose(path.oof[c, 0, test], ref, atol=1e-8 * scale)


def test_linear_and_ridge_window_equal_least_squares_refits() -> None:
    rng, step, folds = _window(70, 2, 2, 3)
    X = rng.uniform(0, 1, (140, 2))
    y = np.sin(3 * X[:, 0]) + X[:, 1] ** 2 + rng.normal(0, 0.2, 140)
    lin = METHODS["linear"]
    plain = {"penalty": "none"}
    path = lin.path(X, y, folds, plain, [1, 2, 3])
    Z = Scaler.fit(X, "standard").transform(X)
    ridge = lin.path(X, y, folds, {"penalty": "ridge", "degree": 1}, [0.1, 1.0, 10.0])
    for f in range(folds.n_folds):
        train, test = np.abs(step - f) > 2, step == f
        for c, d in enumerate([1, 2, 3]):
            D = design(Z, lin._terms(2, d, plain))
            beta = np.linalg.lstsq(D[train], y[train], rcond=None)[0]
            assert_allclose(path.oof[c, 0, test], D[test] @ beta, atol=1e-10)
        for c, alpha in enumerate([0.1, 1.0, 10.0]):
            ref = Ridge(alpha=alpha).fit(Z[train], y[train]).predict(Z[test])
            assert_allclose(ridge.oof[c, 0, test], ref, atol=1e-10)


def test_thin_plate_window_equals_rbf_refits() -> None:
    """Thin-plate has no window fast path: every step is refitted (bounded by the cost
    limit); with scale none each refit is exactly scipy's RBFInterpolator."""
    rng, step, folds = _window(30, 2, 1, 4)
    X = rng.uniform(0, 1, (60, 2))
    y = X[:, 0] * X[:, 1] + rng.normal(0, 0.05, 60)
    path = METHODS["spline"].path(X, y, folds, {"scale": "none"}, [0.01, 1.0])
    for f in range(folds.n_folds):
        train, test = np.abs(step - f) > 1, step == f
        for c, lam in enumerate([0.01, 1.0]):
            rbf = RBFInterpolator(X[train], y[train], kernel="thin_plate_spline", smoothing=lam)
            assert_allclose(path.oof[c, 0, test], rbf(X[test]), atol=1e-8)


def test_additive_window_equals_refits_with_the_weights_held() -> None:
    from nearwise.core.methods.additive_basis import evaluate, reduce_rows
    from nearwise.core.methods.additive_solve import Reduced, Smoother

    rng, step, folds = _window(60, 2, 2, 5)
    X = rng.uniform(0, 1, (120, 2))
    y = np.sin(3 * X[:, 0]) + X[:, 1] ** 2 + rng.normal(0, 0.2, 120)
    additive, work = METHODS["additive"], {}
    settings = additive.settings({})
    values = np.array([0.1, 1.0, 10.0])
    path = additive.path(X, y, folds, settings, values.tolist(), work)
    basis, full = additive._basis(X, settings, work), work["full"]
    blocks = [b for _, b in basis.blocks]
    for f in range(folds.n_folds):
        train, test = np.abs(step - f) > 2, step == f
        red = Reduced.of(reduce_rows(basis, X[train], y[train], lambda: None), basis.k, 0)
        sm = Smoother.of(red, blocks, lam=full.lam_hat)
        ref = evaluate(basis, X[test], sm.red.kept, sm.coefs(values)).T
        assert_allclose(path.oof[:, 0, test], ref, atol=1e-10)


def test_lasso_window_and_knn_blocks_equal_scikit_learn_refits() -> None:
    """Without a fast path each step (or block) is refitted on its training rows, scaled on
    those rows: the lasso equals StandardScaler + Lasso (tolerance: both solve to a small
    duality gap, as in test_penalized_reference.py), kNN blocks equal StandardScaler +
    KNeighborsRegressor (continuous features: no ties)."""
    from sklearn.linear_model import Lasso
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    from nearwise.core.methods import penalized

    rng, step, folds = _window(40, 2, 2, 6)
    X = rng.uniform(0, 1, (80, 3))
    y = 2 * X[:, 0] - X[:, 1] + rng.normal(0, 0.2, 80)
    values = [0.1, 0.01]
    path = METHODS["linear"].path(X, y, folds, {"penalty": "lasso", "degree": 1}, values)
    for f in range(folds.n_folds):
        train, test = np.abs(step - f) > 2, step == f
        for c, alpha in enumerate(values):
            ref = make_pipeline(
                StandardScaler(), Lasso(alpha=alpha, tol=penalized.LASSO_TOL, max_iter=100_000)
            ).fit(X[train], y[train])
            assert_allclose(path.oof[c, 0, test], ref.predict(X[test]), atol=1e-6)
    blocks = tuning.ordered_folds(TuningSpec(scheme="blocks", folds=4, order_by="t"), step, 40, 3)
    path = METHODS["knn"].path(X, y, blocks, {"weights": "uniform", "scale": "standard"}, [3, 8])
    for _r, _f, train, test in blocks.splits():
        for c, k in enumerate([3, 8]):
            ref = make_pipeline(StandardScaler(), KNeighborsRegressor(n_neighbors=k))
            ref.fit(X[train], y[train])
            assert_allclose(path.oof[c, 0, test], ref.predict(X[test]), atol=1e-12)


def test_the_gap_rule_is_reported_with_its_cap() -> None:
    line = sequence.timeline(Table("train", ("t",), np.arange(100.0)[:, None]), "t")
    spec = TuningSpec(scheme="window", order_by="t")
    _, gap = serial.make_folds(spec, line, (0.5, 100), lambda: None)
    assert (gap.steps, gap.capped) == (3, False) and "0.5^h >= 0.1" in gap.rule
    _, gap = serial.make_folds(spec, line, (0.95, 100), lambda: None)
    assert (gap.steps, gap.capped) == (10, True) and "capped at a tenth of the 100" in gap.rule
    _, gap = serial.make_folds(spec, line, None, lambda: None)
    assert gap.steps == 0 and "too short" in gap.rule
    given = TuningSpec(scheme="window", order_by="t", gap=7)
    _, gap = serial.make_folds(given, line, (0.95, 100), lambda: None)
    assert (gap.steps, gap.source) == (7, "caller")


def test_knn_window_in_row_blocks_equals_one_block(monkeypatch) -> None:
    from nearwise.core.methods import knn

    rng, _step, folds = _window(50, 3, 2, 8)
    X = rng.uniform(0, 1, (150, 2))
    y = rng.normal(size=150)
    settings = {"weights": "uniform", "scale": "standard"}
    whole = METHODS["knn"].path(X, y, folds, settings, [1, 5, 12]).oof
    monkeypatch.setattr(knn, "FIT_BLOCK_CELLS", 40)  # 40 // (12 + 1 + 15) = 1 row per block
    blocked = METHODS["knn"].path(X, y, folds, settings, [1, 5, 12]).oof
    assert_allclose(blocked, whole, rtol=0, atol=0)


def test_a_window_that_leaves_the_fit_undetermined_is_not_scored() -> None:
    """Rows 10-12 alone hold x != 0: without step 11's window a cubic is not determined, and
    I - H_SS is singular to rounding. The window gets NaN (an unbounded error), not a number
    from a solve of a singular system."""
    x = np.zeros(30)
    x[10:13] = [1.0, 2.0, 3.0]
    y = np.random.default_rng(0).normal(size=30)
    folds = tuning.ordered_folds(TuningSpec(scheme="window", order_by="t"), np.arange(30), 30, 1)
    path = METHODS["linear"].path(x[:, None], y, folds, {"penalty": "none"}, [1, 3])
    assert np.isnan(path.oof[1, 0, 11])  # degree 3 at step 11
    assert np.isfinite(path.oof[0, 0, :10]).all()


def test_knn_window_when_the_window_holds_the_nearest_rows() -> None:
    """x follows time, so each row's window holds its nearest rows: every one of them must be
    fetched and skipped (scikit-learn refits on the rows outside the window as reference)."""
    rng = np.random.default_rng(9)
    step = np.repeat(np.arange(60), 2)
    x = (step + rng.uniform(0, 0.5, 120))[:, None]
    y = np.sin(x[:, 0] / 5) + rng.normal(0, 0.1, 120)
    folds = tuning.ordered_folds(TuningSpec(scheme="window", order_by="t"), step, 60, 3)
    path = METHODS["knn"].path(x, y, folds, {"weights": "uniform", "scale": "none"}, [1, 6])
    for f in range(60):
        train, test = np.abs(step - f) > 3, step == f
        for c, k in enumerate([1, 6]):
            ref = KNeighborsRegressor(n_neighbors=k).fit(x[train], y[train]).predict(x[test])
            assert_allclose(path.oof[c, 0, test], ref, atol=1e-12)
