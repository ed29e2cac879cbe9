"""Categorical features in the core: reading levels, their checks, the fast paths with level
columns, unseen levels, locality within level combinations and the limits.

Outside references are named beside each check; the slow way of the fast-path checks is the
method's own ``fit`` on each training fold, whose agreement with statsmodels and scikit-learn
is checked in tests/reference/test_categorical_reference.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nearwise.core import categories, compare, hull, locality, pipeline, tuning
from nearwise.core.categories import MAX_LEVELS, Categories, cell_name, sort_levels
from nearwise.core.data import Table, prepare
from nearwise.core.errors import BadCell, InvalidValue, NotApplicable, OverLimit, UnknownName
from nearwise.core.level_locality import query_flags
from nearwise.core.methods.additive import Additive
from nearwise.core.methods.knn import KNN
from nearwise.core.methods.linear import Linear
from nearwise.core.spec import Caps, IntervalSpec, Job, TuningSpec

LEVELS = np.array(["east", "north", "south"])


def _table(cols, values, labels=None, name="train"):
    return Table(name, tuple(cols), np.asarray(values, dtype=float), labels or {})


def _site_data(n=60, seed=0):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    site = LEVELS[rng.integers(0, 3, n)]
    y = np.sin(x) + np.select([site == "north", site == "south"], [1.0, -1.5], 0.0)
    y = y + rng.normal(0, 0.2, n)
    return x, site, y


def _train(x, site, y):
    values = np.column_stack([x, np.full(x.size, np.nan), y])
    return _table(["x", "site", "y"], values, {1: site.astype(object)})


def _query(x, site):
    values = np.column_stack([x, np.full(len(x), np.nan)])
    return _table(["x", "site"], values, {1: np.array(site, dtype=object)}, "query")


# -- reading levels ---------------------------------------------------------------------------


def test_numbers_are_levels_named_by_their_shortest_form():
    assert [cell_name(v) for v in (1, 1.0, "1", 2.5, -0.0, 1e20)] == [
        "1",
        "1",
        "1",
        "2.5",
        "0",
        "1e+20",
    ]
    assert cell_name("1.0") == "1.0"  # text is taken as sent
    assert cell_name(None) is None and cell_name("  ") is None and cell_name(float("nan")) is None


def test_levels_sort_as_numbers_only_when_all_are_numbers():
    assert sort_levels(["10", "2", "1"]) == ("1", "2", "10")
    assert sort_levels(["10", "2", "b"]) == ("10", "2", "b")
    assert sort_levels(["b", "B", "a"]) == ("B", "a", "b")  # code points: no case folding


def test_a_column_of_numbers_declared_categorical_is_coded_by_level():
    x = np.arange(12.0)
    dock = np.array([3, 1, 2, 10] * 3, dtype=float)
    t = _table(["x", "dock", "y"], np.column_stack([x, dock, x]))
    data = prepare(t, "y", None, None, None, categorical=["dock"], reference={"dock": 2})
    cats = data.categories
    assert cats.levels == (("1", "2", "3", "10"),)
    assert cats.levels[0][cats.reference[0]] == "2"
    assert cats.dummy_names() == ["dock[1]", "dock[3]", "dock[10]"]
    assert_allclose(data.X_all[:, 1], [2, 0, 1, 3] * 3)


def test_mixed_json_numbers_and_text_name_the_same_level():
    labels = {1: np.array([1, "1", 1.0, "a", "a", 2.0], dtype=object)}
    values = np.column_stack([np.arange(6.0), np.full(6, np.nan), np.arange(6.0)])
    data = prepare(
        _table(["x", "g", "y"], values, labels), "y", None, None, None, categorical=["g"]
    )
    assert data.categories.levels == (("1", "2", "a"),)
    assert_allclose(data.X_all[:, 1], [0, 0, 0, 2, 2, 1])


def test_levels_come_from_the_usable_rows_only():
    """A level held only by a row without a target is not a level of the fit: that row is
    answered with unseen_level when fitted values are asked for."""
    x, site, y = _site_data(40)
    site[5] = "west"
    y[5] = np.nan
    result = pipeline.run(
        Job(method="linear", train=_train(x, site, y), target="y", categorical=["site"])
    )
    assert result.model["categorical"][0]["levels"] == list(LEVELS)
    assert np.isnan(result.predictions.value[5])
    assert result.predictions.flags[5] == ("unseen_level",)


@pytest.mark.parametrize(
    ("cells", "error", "where"),
    [
        (["a", None, "b"], BadCell, ("train", "rows", 1, 1)),
        (["a", "b", "   "], BadCell, ("train", "rows", 2, 1)),
    ],
)
def test_a_missing_level_is_refused_at_its_cell(cells, error, where):
    cells = [*cells, "a", "b", "a"]
    values = np.column_stack([np.arange(6.0), np.full(6, np.nan), np.arange(6.0)])
    t = _table(["x", "g", "y"], values, {1: np.array(cells, dtype=object)})
    with pytest.raises(error) as info:
        prepare(t, "y", None, None, None, categorical=["g"])
    assert info.value.where[0].path == where


def test_undeclared_text_names_both_ways_out():
    x, site, y = _site_data(12)
    with pytest.raises(BadCell, match=r"`categorical`.*`features`") as info:
        prepare(_train(x, site, y), "y", None, None, None)
    assert info.value.where[0].path == ("train", "rows", 0, 1)


@pytest.mark.parametrize(
    ("kwargs", "error", "path"),
    [
        ({"categorical": ["nope"]}, UnknownName, ("categorical", 0)),
        ({"categorical": ["y"]}, InvalidValue, ("categorical", 0)),
        ({"categorical": ["site", "site"]}, InvalidValue, ("categorical", 1)),
        ({"categorical": ["site"], "features": ["x"]}, InvalidValue, ("categorical", 0)),
        (
            {"categorical": ["site"], "reference": {"x": "a"}},
            InvalidValue,
            ("categorical_reference", "x"),
        ),
        (
            {"categorical": ["site"], "reference": {"site": "west"}},
            InvalidValue,
            ("categorical_reference", "site"),
        ),
        (
            {"categorical": ["site"], "reference": {"site": True}},
            InvalidValue,
            ("categorical_reference", "site"),
        ),
    ],
)
def test_declarations_are_checked(kwargs, error, path):
    x, site, y = _site_data(12)
    features = kwargs.pop("features", None)
    with pytest.raises(error) as info:
        prepare(_train(x, site, y), "y", features, None, None, **kwargs)
    assert info.value.where[0].path == path


@pytest.mark.parametrize(("levels", "ok"), [(MAX_LEVELS, True), (MAX_LEVELS + 1, False)])
def test_levels_per_column_just_inside_and_outside_the_limit(levels, ok):
    n = 2 * (MAX_LEVELS + 1)
    codes = np.arange(n) % levels
    t = _table(["x", "g", "y"], np.column_stack([np.arange(n), codes, np.arange(n)]))
    if ok:
        data = prepare(t, "y", None, None, None, categorical=["g"])
        assert len(data.categories.levels[0]) == levels
    else:
        with pytest.raises(OverLimit) as info:
            prepare(t, "y", None, None, None, categorical=["g"])
        assert info.value.where[0].path == ("categorical", 0)


@pytest.mark.parametrize(("cap", "ok"), [(60 * 4, True), (60 * 4 - 1, False)])
def test_the_coded_design_counts_against_the_cells_limit(cap, ok):
    """60 rows x (1 numeric + 3 levels) = 240 cells of the widest coding (kNN's one-hot)."""
    x, site, y = _site_data(60)
    job = Job(
        method="knn",
        train=_train(x, site, y),
        target="y",
        categorical=["site"],
        caps=Caps(cells=cap, names={"cells": "NEARWISE_MAX_CELLS"}),
    )
    if ok:
        assert pipeline.run(job).method == "knn"
    else:
        with pytest.raises(OverLimit, match="NEARWISE_MAX_CELLS = 239"):
            pipeline.run(job)


def test_the_cost_estimate_counts_dummy_columns_as_features():
    x, site, y = _site_data(60)
    ctx = pipeline.setup(
        Job(method="linear", train=_train(x, site, y), target="y", categorical=["site"])
    )
    assert pipeline.shape(ctx).p == 1 + 2  # x and the two dummies of three sites


# -- fast paths with level columns --------------------------------------------------------------


def _coded(n=60, seed=1):
    x, site, y = _site_data(n, seed)
    X = np.column_stack([x, np.searchsorted(LEVELS, site).astype(float)])
    cats = Categories(2, (1,), ("site",), (tuple(LEVELS),), (0,))
    return X, y, cats


PATHS = [
    (KNN(), {"weights": "uniform", "scale": "standard", "mismatch": 0.5}, [1, 3, 8]),
    (KNN(), {"weights": "distance", "scale": "range"}, [2, 5]),
    (Linear(), {}, [1, 2, 3]),
    (Linear(), {"penalty": "ridge", "degree": 2, "interactions": True}, [10.0, 1.0, 0.1]),
    (Additive(), {}, [10.0, 1.0, 0.1]),
]


@pytest.mark.parametrize(("method", "settings", "values"), PATHS)
def test_kfold_path_with_levels_equals_refits(method, settings, values):
    X, y, cats = _coded()
    folds = tuning.make_folds(60, TuningSpec(folds=4, seed=3))
    path = method.path(X, y, folds, settings, values, {"categories": cats})
    for r, _f, train, test in folds.splits():
        for c, v in enumerate(values):
            work = {"categories": cats}
            if isinstance(method, Additive):  # the basis of all rows, as the path shares it
                work["basis"] = method._basis(X, settings, {"categories": cats})
            fit = method.fit(X[train], y[train], settings, v, work)
            # Shared factorizations against one fit per fold: 1e-8 relative.
            assert_allclose(path.oof[c, r, test], fit.predict(X[test]), rtol=1e-8, atol=1e-8)


def test_linear_loo_path_with_levels_equals_refits():
    X, y, cats = _coded(30, seed=2)
    folds = tuning.make_folds(30, TuningSpec(scheme="loo"))
    values = [1, 2, 3]
    path = Linear().path(X, y, folds, {}, values, {"categories": cats})
    for i in range(30):
        keep = np.arange(30) != i
        for c, v in enumerate(values):
            fit = Linear().fit(X[keep], y[keep], {}, v, {"categories": cats})
            # The deletion formula is exact; the update costs a few digits.
            assert_allclose(path.oof[c, 0, i], fit.predict(X[i : i + 1])[0], rtol=1e-7, atol=1e-7)


def test_knn_loo_path_with_levels_equals_brute_force():
    """Reference: a direct numpy computation of the mixed distance (squared scaled
    differences + gamma^2 per differing level) and of each row's k nearest others."""
    X, y, cats = _coded(40, seed=5)
    folds = tuning.make_folds(40, TuningSpec(scheme="loo"))
    gamma = 0.8
    path = KNN().path(
        X,
        y,
        folds,
        {"weights": "uniform", "scale": "standard", "mismatch": gamma},
        [4],
        {"categories": cats},
    )
    z = (X[:, 0] - X[:, 0].mean()) / X[:, 0].std()
    d2 = (z[:, None] - z[None, :]) ** 2 + gamma**2 * (X[:, 1][:, None] != X[:, 1][None, :])
    np.fill_diagonal(d2, np.inf)
    expect = np.array([y[np.argsort(row, kind="stable")[:4]].mean() for row in d2])
    assert_allclose(path.oof[0, 0], expect, rtol=1e-12)


def test_answers_do_not_depend_on_row_order():
    x, site, y = _site_data(50)
    q = _query([2.0, 7.0], ["south", "north"])
    perm = np.random.default_rng(3).permutation(50)
    for method in ("knn", "linear", "additive"):
        a = pipeline.run(
            Job(method=method, train=_train(x, site, y), target="y", query=q, categorical=["site"])
        )
        b = pipeline.run(
            Job(
                method=method,
                train=_train(x[perm], site[perm], y[perm]),
                target="y",
                query=q,
                categorical=["site"],
            )
        )
        assert_allclose(a.predictions.value, b.predictions.value, rtol=1e-10)


# -- unseen levels ----------------------------------------------------------------------------


@pytest.mark.parametrize("method", ["knn", "linear", "additive"])
def test_an_unseen_level_is_null_and_flagged_and_leaves_other_rows_alone(method):
    x, site, y = _site_data(60)
    train = _train(x, site, y)
    both = pipeline.run(
        Job(
            method=method,
            train=train,
            target="y",
            query=_query([2.0, 3.0, 8.0], ["north", "west", "south"]),
            categorical=["site"],
        )
    )
    seen = pipeline.run(
        Job(
            method=method,
            train=train,
            target="y",
            query=_query([2.0, 8.0], ["north", "south"]),
            categorical=["site"],
        )
    )
    p = both.predictions
    assert np.isnan(p.value[1]) and np.isnan(p.std_error[1])
    assert np.isnan(p.lower[1]) and np.isnan(p.upper[1])
    assert p.flags[1] == ("unseen_level",)
    assert_allclose(p.value[[0, 2]], seen.predictions.value, rtol=1e-12)
    assert_allclose(p.lower[[0, 2]], seen.predictions.lower, rtol=1e-12)
    notice = [n for n in both.warnings if n.code == "unseen_level"]
    assert len(notice) == 1 and notice[0].rows == (1,)
    assert all(1 not in n.rows for n in both.warnings if n.code != "unseen_level")


def test_spline_refuses_levels_and_compare_leaves_it_out():
    x, site, y = _site_data(60)
    job = Job(method="spline", train=_train(x, site, y), target="y", categorical=["site"])
    with pytest.raises(NotApplicable, match="additive") as info:
        pipeline.run(job)
    assert info.value.where[0].path == ("categorical",)
    result = compare.compare(
        Job(method="compare", train=_train(x, site, y), target="y", categorical=["site"])
    )
    assert {r.method for r in result.ranking} == {"knn", "linear", "additive"}
    skipped = [n.message for n in result.warnings if n.code == "method_skipped"]
    assert len(skipped) == 1 and skipped[0].startswith("spline was left out")


def test_only_categorical_features():
    """linear is the one-way analysis of variance (each level's mean: Montgomery, Peck &
    Vining 2012, section 8.1); additive has nothing to smooth and is left out of compare."""
    _, site, y = _site_data(60)
    t = _table(["site", "y"], np.column_stack([np.full(60, np.nan), y]), {0: site.astype(object)})
    result = pipeline.run(Job(method="linear", train=t, target="y", categorical=["site"]))
    means = {lv: y[site == lv].mean() for lv in LEVELS}
    terms = {r["name"]: r["estimate"] for r in result.model["terms"]}
    assert_allclose(terms["intercept"], means["east"], rtol=1e-10)
    assert_allclose(terms["site[north]"], means["north"] - means["east"], rtol=1e-10)
    assert result.params["degree"] == 1
    with pytest.raises(NotApplicable, match="numeric feature"):
        pipeline.run(Job(method="additive", train=t, target="y", categorical=["site"]))
    auto = pipeline.run(Job(method="auto", train=t, target="y", categorical=["site"]))
    assert auto.method in ("knn", "linear")
    knn = pipeline.run(
        Job(method="knn", train=t, target="y", categorical=["site"], params={"k": 1})
    )
    assert not [n for n in knn.warnings if n.code in ("not_local", "wide_neighborhood")]


def test_options_that_do_not_take_levels_are_refused():
    x, site, y = _site_data(30)
    with pytest.raises(NotApplicable) as info:
        pipeline.run(
            Job(
                method="knn",
                train=_train(x, site, y),
                target="y",
                categorical=["site"],
                interval=IntervalSpec(adaptive=True),
            )
        )
    assert info.value.where[0].path == ("interval", "adaptive")
    plain = _table(["x", "y"], np.column_stack([x, y]))
    with pytest.raises(NotApplicable) as info:
        pipeline.run(Job(method="knn", train=plain, target="y", params={"mismatch": 2.0}))
    assert info.value.where[0].path == ("params", "mismatch")


# -- locality within level combinations --------------------------------------------------------


def test_flags_within_a_level_equal_the_flags_of_that_levels_rows():
    """Within one level the flags are those of :func:`locality.query_flags` on the training
    rows of that level alone, scaled as all rows are (checked against it directly)."""
    rng = np.random.default_rng(8)
    Xn = rng.uniform(0, 1, (80, 2))
    lvl = (np.arange(80) % 2).astype(float)
    Xn[lvl == 1] *= 0.3  # level 1 covers only the lower corner
    X = np.column_stack([Xn, lvl])
    cats = Categories(3, (2,), ("g",), (("a", "b"),), (0,))
    Xq = np.array([[0.5, 0.5, 0.0], [0.8, 0.8, 1.0], [0.1, 0.1, 1.0], [0.5, 0.5, 2.0]])
    Xq[3, 2] = -1.0  # an unseen level: no flags here
    got = query_flags(X, Xq, "standard", cats)
    mean, sd = Xn.mean(axis=0), Xn.std(axis=0)
    for q, level in ((0, 0.0), (1, 1.0), (2, 1.0)):
        rows = lvl == level
        ref = locality.query_flags((Xn[rows] - mean) / sd, (Xq[q : q + 1, :2] - mean) / sd, "none")
        assert got.flags[q] == ref.flags[0], q
        assert_allclose(got.nearest[q], ref.nearest[0], rtol=1e-12)
    assert got.flags[0] == () and "outside_range" in got.flags[1] and got.flags[3] == ()
    assert np.isnan(got.nearest[3])


def test_a_combination_no_training_row_holds_is_outside_the_hull():
    """Two categorical columns seen as (a, x), (a, y), (b, x): the query (b, y) holds seen
    levels only, in a combination outside the training rows' hull in one-hot coding (a vertex
    of a product of simplices that is not a training row). Checked with the hull test itself
    on the one-hot rows."""
    combos = np.array([[0, 0], [0, 1], [1, 0]] * 10, dtype=float)
    x = np.linspace(0, 1, 30)
    X = np.column_stack([x, combos])
    cats = Categories(3, (1, 2), ("g", "h"), (("a", "b"), ("x", "y")), (0, 0))
    Xq = np.array([[0.5, 1.0, 1.0], [0.5, 0.0, 1.0]])
    got = query_flags(X, Xq, "standard", cats)
    assert got.flags[0] == ("outside_hull",) and got.flags[1] == ()
    assert np.isnan(got.nearest[0])
    one_hot = cats.onehot(X)
    assert hull.hull_test(one_hot, cats.onehot(Xq), route="lp").outside.tolist() == [True, False]
    only = Categories(2, (0, 1), ("g", "h"), cats.levels, (0, 0))
    flags = query_flags(combos, Xq[:, 1:], "standard", only)
    assert flags.flags == (("outside_hull",), ())
    assert np.isnan(flags.nearest).all()


def test_unseen_notices_drop_the_rows_from_other_codes():
    from nearwise.core.results import Notice

    cats = Categories(2, (1,), ("g",), (("a", "b"),), (0,))
    notices = [
        Notice("outside_range", "m", (0, 2)),
        Notice("far_from_data", "m", (2,)),
        Notice("few_rows", "m"),
    ]
    out = categories.unseen_notices(notices, np.array([False, False, True]), cats, True)
    assert [(n.code, n.rows) for n in out] == [
        ("outside_range", (0,)),
        ("few_rows", ()),
        ("unseen_level", (2,)),
    ]


def test_an_error_points_at_the_column_as_named_in_categorical():
    """Columns are coded in the order of the features; a refusal still points at the place
    of the column in `categorical` as sent."""
    n = 2 * (MAX_LEVELS + 1)
    values = np.column_stack([np.arange(n) % 3, np.arange(n), np.arange(n), np.arange(n)])
    t = _table(["small", "x", "big", "y"], values)
    with pytest.raises(OverLimit) as info:
        prepare(t, "y", None, None, None, categorical=["big", "small"])
    assert info.value.where[0].path == ("categorical", 0)
