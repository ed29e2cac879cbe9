"""Penalized `linear`: fast paths against refits, exact identities, settings and errors.

The slow way is the method's own fit on each training fold (or without each row, with the
standardization learned from all rows held fixed), whose agreement with scikit-learn and
statsmodels is checked in tests/reference/test_penalized_reference.py.
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nearwise.core import tuning
from nearwise.core.data import Table
from nearwise.core.errors import InvalidValue, NotApplicable, UnknownName
from nearwise.core.methods import penalized
from nearwise.core.methods.linear import Linear
from nearwise.core.pipeline import run
from nearwise.core.spec import IntervalSpec, Job, TuningSpec

LINEAR = Linear()
CASES = [
    ({"penalty": "ridge"}, 1),
    ({"penalty": "ridge", "degree": 2}, 2),
    ({"penalty": "lasso"}, 1),
    ({"penalty": "lasso", "degree": 2, "interactions": False}, 2),
]
# Lasso: coordinate descent warm-started along the path against a cold start for one alpha,
# each to a duality gap of 1e-10 of ||y||^2; ridge: the same SVD formulas, rounding only.
TOL = {"ridge": 1e-9, "lasso": 1e-7}


def _data(n=60, p=3, seed=0, ties=False):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 4, size=(n, p)) * np.array([1.0, 10.0, 0.1])[:p]
    if ties:
        X = np.round(X, 0)
    y = np.sin(X[:, 0]) + 0.3 * X[:, 1] + rng.normal(0, 0.2, n)
    return X, y


def _settings(given):
    return LINEAR.settings(given)


def _values(X, y, folds, settings):
    return LINEAR.candidates(X, y, folds, settings, None, {})


@pytest.mark.parametrize("ties", [False, True])
@pytest.mark.parametrize(("given", "degree"), CASES)
def test_kfold_path_equals_refits(given, degree, ties):
    X, y = _data(ties=ties)
    folds = tuning.make_folds(60, TuningSpec(folds=4, repeats=2, seed=3))
    settings = _settings(given)
    values = _values(X, y, folds, settings)
    assert len(values) == penalized.GRID_SIZE
    path = LINEAR.path(X, y, folds, settings, values)
    tol = TOL[settings["penalty"]] * np.std(y)
    for r, _f, train, test in folds.splits():
        for c, v in enumerate(values[::3]):
            expect = LINEAR.fit(X[train], y[train], settings, v).predict(X[test])
            assert_allclose(path.oof[3 * c, r, test], expect, rtol=0, atol=tol)


@pytest.mark.parametrize(("given", "degree"), CASES)
def test_fold_models_reproduce_the_out_of_fold_predictions(given, degree):
    X, y = _data(seed=1)
    folds = tuning.make_folds(60, TuningSpec(folds=4, repeats=2, seed=3))
    settings = _settings(given)
    values = _values(X, y, folds, settings)
    path = LINEAR.path(X, y, folds, settings, values)
    assert len(path.fold_models) == 4
    for f, model in enumerate(path.fold_models):
        test = np.flatnonzero(folds.fold_id[0] == f)
        for c in range(len(values)):
            # Same arrays; a matrix product against a matrix-vector product: rounding.
            assert_allclose(model.predict(X[test], c), path.oof[c, 0, test], rtol=1e-10, atol=1e-12)


def _fixed_refit(X, y, settings, alpha, keep):
    """The fit without some rows, with the basis standardized on all rows (as `loo` does)."""
    basis = penalized.Basis.fit(X, penalized.terms_for(X.shape[1], settings))
    Z = basis.transform(X)
    return basis, penalized.fit_with(basis, Z[keep], y[keep], settings["penalty"], alpha, ())


@pytest.mark.parametrize("degree", [1, 2])
@pytest.mark.parametrize("ties", [False, True])
def test_ridge_leave_one_out_path_equals_refits(degree, ties):
    X, y = _data(n=30, ties=ties)
    folds = tuning.make_folds(30, TuningSpec(scheme="loo"))
    settings = _settings({"penalty": "ridge", "degree": degree})
    values = [*_values(X, y, folds, settings)[::4], 0.0]
    path = LINEAR.path(X, y, folds, settings, values)
    for i in range(30):
        keep = np.arange(30) != i
        for c, v in enumerate(values):
            basis, model = _fixed_refit(X, y, settings, v, keep)
            expect = model.b0 + basis.transform(X[i : i + 1]) @ model.w
            # Exact identity; the update of a mildly conditioned system costs digits.
            assert_allclose(path.oof[c, 0, i], expect[0], rtol=1e-8, atol=1e-8)


@pytest.mark.parametrize("degree", [1, 2])
def test_ridge_gcv_equals_its_definition(degree):
    """GCV(alpha) = n RSS / (n - tr H)^2 (Golub, Heath & Wahba 1979), H built column by
    column from fits to unit vectors (the basis depends on X only)."""
    X, y = _data(n=40, seed=4)
    folds = tuning.make_folds(40, TuningSpec(scheme="gcv"))
    settings = _settings({"penalty": "ridge", "degree": degree})
    values = _values(X, y, folds, settings)[::5]
    path = LINEAR.path(X, y, folds, settings, values)
    scores = tuning.score(y, path.oof, folds, "rmse", path.gcv_scale)
    for c, v in enumerate(values):
        H = np.column_stack([LINEAR.fit(X, e, settings, v).fitted for e in np.eye(40)])
        gcv = 40 * np.sum((y - H @ y) ** 2) / (40 - np.trace(H)) ** 2
        # H from 40 refits: its rounding adds up to about 1e-12 relative.
        assert_allclose(path.df[c], np.trace(H), rtol=1e-9)
        assert_allclose(scores.error[c] ** 2, gcv, rtol=1e-9)


@pytest.mark.parametrize("degree", [1, 2])
def test_ridge_leave_one_out_predictions_and_residuals_equal_refits(degree):
    """The updates behind jackknife+ equal refitting without each row (standardization
    fixed)."""
    X, y = _data(n=30, seed=12)
    Xq = np.random.default_rng(1).uniform(-0.5, 4.5, (6, 3)) * np.array([1.0, 10.0, 0.1])
    settings = _settings({"penalty": "ridge", "degree": degree})
    model = LINEAR.fit(X, y, settings, 0.5)
    loo = model.loo_predictions(Xq)(np.arange(6))
    resid = model.loo_residuals()
    for i in range(30):
        keep = np.arange(30) != i
        basis, refit = _fixed_refit(X, y, settings, 0.5, keep)
        # Exact identities; rounding in the updates: 1e-9.
        assert_allclose(loo[:, i], refit.b0 + basis.transform(Xq) @ refit.w, rtol=1e-9, atol=1e-9)
        pred_i = refit.b0 + basis.transform(X[i : i + 1]) @ refit.w
        assert_allclose(resid[i], y[i] - pred_i[0], rtol=1e-9, atol=1e-9)


@pytest.mark.parametrize("penalty", ["ridge", "lasso"])
@pytest.mark.parametrize("degree", [1, 2])
def test_alpha_zero_is_least_squares(penalty, degree):
    X, y = _data(seed=5)
    Xq = X[:7] + 0.3
    ours = LINEAR.fit(X, y, _settings({"penalty": penalty, "degree": degree}), 0.0)
    plain = LINEAR.fit(X, y, {"interactions": degree > 1}, degree)
    a, b = ours.summary(("a", "b", "c")), plain.summary(("a", "b", "c"))
    # SVD against QR of the same well-conditioned basis: 1e-9 relative.
    for key in ("estimate", "std_error"):
        assert_allclose([t[key] for t in a["terms"]], [t[key] for t in b["terms"]], rtol=1e-9)
    assert_allclose(ours.predict(Xq), plain.predict(Xq), rtol=1e-10)
    assert_allclose(ours.std_error(Xq, 1.0), plain.std_error(Xq, 1.0), rtol=1e-9)
    assert_allclose(ours.leverage_root(Xq), plain.leverage_root(Xq), rtol=1e-9)
    assert_allclose(ours.df, plain.df)
    assert_allclose(a["sigma"], b["sigma"], rtol=1e-10)


@pytest.mark.parametrize("penalty", ["ridge", "lasso"])
def test_default_grid_runs_from_alpha_max_down_four_decades(penalty):
    X, y = _data(n=80, seed=6)
    folds = tuning.make_folds(80, TuningSpec())
    settings = _settings({"penalty": penalty})
    values = _values(X, y, folds, settings)
    assert values == sorted(values, reverse=True)  # simplest (largest alpha) first
    assert_allclose(values[-1] / values[0], penalized.GRID_SPAN, rtol=1e-12)
    assert_allclose(np.diff(np.log(values)), np.log(values[1] / values[0]), rtol=1e-9)
    path = LINEAR.path(X, y, folds, settings, values)
    assert np.all(np.diff(path.df) >= -1e-12)  # df grows along the path
    top = LINEAR.fit(X, y, settings, values[0])
    if penalty == "lasso":
        assert path.df[0] == 1.0 and not np.any(top.w)  # alpha_max: every coefficient zero
        below = LINEAR.fit(X, y, settings, values[0] * 0.9)
        assert np.count_nonzero(below.w) == 1  # and below it one term enters
    else:
        # At alpha_max every direction keeps at most 1/101 of its least-squares size.
        assert top.df - 1 <= 3 / (penalized.RIDGE_TOP + 1) + 1e-12
        assert np.max(np.abs(top.fitted - y.mean())) < 0.01 * np.ptp(y)


def test_raw_unit_terms_reproduce_the_predictions_at_degree_two():
    X, y = _data(n=50, p=2, seed=7)
    Xq = np.random.default_rng(2).uniform(0, 4, (5, 2)) * np.array([1.0, 10.0])
    for penalty, alpha in (("ridge", 3.0), ("lasso", 0.05)):
        model = LINEAR.fit(X, y, _settings({"penalty": penalty, "degree": 2}), alpha)
        terms = model.summary(("a", "b"))["terms"]
        assert [t["name"] for t in terms] == ["intercept", "a", "b", "a^2", "a*b", "b^2"]
        est = np.array([t["estimate"] for t in terms])
        a, b = Xq.T
        D = np.column_stack([np.ones(5), a, b, a**2, a * b, b**2])
        # Expanding standardized monomials into raw ones: rounding at the data's scale.
        assert_allclose(D @ est, model.predict(Xq), rtol=1e-9)


def test_lasso_lists_dropped_terms_and_inputs():
    rng = np.random.default_rng(8)
    X = rng.normal(size=(200, 4))
    y = 2 * X[:, 0] - X[:, 2] + rng.normal(0, 0.5, 200)
    model = LINEAR.fit(X, y, _settings({"penalty": "lasso"}), 0.2)
    s = model.summary(("u", "v", "w", "z"))
    assert s["dropped_terms"] == ["v", "z"]
    assert s["kept_inputs"] == ["u", "w"] and s["dropped_inputs"] == ["v", "z"]
    rows = {t["name"]: t for t in s["terms"]}
    assert rows["v"]["estimate"] == 0.0 and rows["v"]["std_error"] is None
    assert rows["u"]["std_error"] > 0 and rows["u"]["t"] is None
    assert s["df"] == 3.0 and s["converged"] is True
    assert model.df == 3.0


def test_constant_feature_is_named_and_ignored():
    X, y = _data(n=40, seed=9)
    X[:, 1] = 7.0
    for penalty in ("ridge", "lasso"):
        model = LINEAR.fit(X, y, _settings({"penalty": penalty}), 0.1)
        assert model.summary(("a", "b", "c"))["aliased_terms"] == ["b"]
        assert [n.code for n in model.notices()] == ["rank_deficient"]
        assert model.w[1] == 0.0


def _job(**kw):
    X, y = _data(n=50, seed=10)
    table = Table("train", ("a", "b", "c", "y"), np.column_stack([X, y]))
    return Job("linear", table, "y", **kw)


def test_pipeline_reports_alpha_and_the_fixed_degree():
    result = run(_job(params={"penalty": "lasso"}))
    assert set(result.params) == {"penalty", "degree", "interactions", "alpha"}
    assert result.params["degree"] == 1 and result.params["interactions"] is False
    assert [list(e.params) for e in result.tuning.path] == [["alpha"]] * penalized.GRID_SIZE
    assert list(result.tuning.best) == ["alpha"]
    assert result.model["penalty"] == "lasso"
    assert np.all(np.isfinite(result.predictions.lower))
    plain = run(_job())
    assert plain.params["penalty"] == "none" and "alpha" not in plain.params


@pytest.mark.parametrize("scheme", ["loo", "gcv"])
def test_ridge_runs_with_exact_leave_one_out_schemes(scheme):
    result = run(_job(params={"penalty": "ridge"}, tuning=TuningSpec(scheme=scheme)))
    assert result.interval["construction"] == "jackknife_plus"
    assert np.all(result.predictions.lower <= result.predictions.value)


def test_row_order_does_not_matter():
    X, y = _data(n=50, seed=11)
    perm = np.random.default_rng(0).permutation(50)
    answers = []
    for rows in (np.arange(50), perm):
        table = Table("train", ("a", "b", "c", "y"), np.column_stack([X, y])[rows])
        answers.append(run(Job("linear", table, "y", params={"penalty": "lasso"})))
    assert answers[0].params == answers[1].params
    assert answers[0].model == answers[1].model


@pytest.mark.parametrize(
    ("kw", "error", "pointer", "match"),
    [
        ({"params": {"alpha": 1.0}}, NotApplicable, ("params", "alpha"), "penalty"),
        ({"grid": {"alpha": [1.0, 2.0]}}, NotApplicable, ("grid", "alpha"), "penalty"),
        (
            {"params": {"penalty": "ridge"}, "grid": {"degree": [1, 2]}},
            NotApplicable,
            ("grid", "degree"),
            "fixed",
        ),
        (
            {"params": {"penalty": "lasso"}, "tuning": TuningSpec(scheme="loo")},
            NotApplicable,
            ("tuning", "scheme"),
            "kfold",
        ),
        (
            {"params": {"penalty": "ridge"}, "interval": IntervalSpec(kind="model")},
            NotApplicable,
            ("interval", "kind"),
            "cv_plus",
        ),
        ({"params": {"penalty": "elastic"}}, InvalidValue, ("params", "penalty"), "one of"),
        (
            {"params": {"penalty": "ridge", "alpha": -1}},
            InvalidValue,
            ("params", "alpha"),
            "alpha",
        ),
        (
            {"params": {"penalty": "ridge"}, "grid": {"alpha": [1.0, -2.0]}},
            InvalidValue,
            ("grid", "alpha", 1),
            "alpha",
        ),
        (
            {"params": {"penalty": "ridge", "alpha": 1.0}, "grid": {"alpha": [1.0]}},
            InvalidValue,
            ("grid", "alpha"),
            "both",
        ),
        ({"params": {"penalty": "ridge"}, "grid": {"k": [1]}}, UnknownName, ("grid", "k"), "k"),
        (
            {"params": {"penalty": "ridge", "degree": 5}, "features": None},
            None,
            None,
            None,
        ),
    ],
)
def test_errors_point_at_the_field(kw, error, pointer, match):
    kw = {k: v for k, v in kw.items() if k != "features"}
    if error is None:  # 55 terms on 50 rows: fine with a penalty
        assert run(_job(**kw)).params["degree"] == 5
        return
    with pytest.raises(error, match=match) as info:
        run(_job(**kw))
    assert info.value.where[0].path == pointer


def test_too_many_terms_is_refused():
    with pytest.raises(InvalidValue, match="at most 1000") as info:
        penalized.terms_for(12, {"degree": 4})  # 1,819 terms
    assert info.value.where[0].path == ("params", "degree")
    assert len(penalized.terms_for(12, {"degree": 3})) - 1 == 454


def test_tuned_parameter_order_and_bounds_follow_the_penalty():
    folds = tuning.make_folds(20, TuningSpec())
    assert LINEAR.tuned_for({"penalty": "none"}) == "degree"
    assert LINEAR.tuned_for({"penalty": "ridge"}) == "alpha"
    assert LINEAR.order([0.1, 10.0, 1.0]) == [10.0, 1.0, 0.1]
    assert LINEAR.order([3, 1, 2]) == [1, 2, 3]
    assert LINEAR.order([3, 1], settings={"penalty": "lasso"}) == [3, 1]
    assert LINEAR.is_bound(0.0, folds) and not LINEAR.is_bound(1.0, folds)
    assert LINEAR.is_bound(5.0, folds, {"lasso_alpha_max": 4.0})
    assert LINEAR.is_bound(1, folds) and not LINEAR.is_bound(2, folds)
    assert LINEAR.schemes_for({"penalty": "lasso"}) == ("kfold", "window", "blocks")
    assert LINEAR.interval_kinds_for({"penalty": "ridge"}) == ("cv_plus",)
    assert LINEAR.interval_kinds_for({"penalty": "none"}) == ("cv_plus", "model")


def test_catalogue_describes_penalty_and_alpha():
    params = {p["name"]: p for p in LINEAR.describe()["parameters"]}
    assert params["penalty"]["choices"] == ["none", "ridge", "lasso"]
    assert params["penalty"]["default"] == "none"
    alpha = params["alpha"]
    assert alpha["tunable"] and alpha["simpler"] == "larger" and alpha["minimum"] == 0.0
    assert "alpha_max" in LINEAR.describe()["default_grid"]
