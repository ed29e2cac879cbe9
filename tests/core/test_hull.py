"""The hull test from four to eight dimensions (core/hull.py, core/hull_simplex.py): every
verdict equals the linear program solved by scipy's ``linprog`` (HiGHS) on the same rows, on
random designs in 2 to 8 dimensions, for query rows inside, outside, on facets and just off
them; its tolerance sits where the module says; its work cap leaves rows untested, the same
rows each time, and says why.

Reference: the membership program as written in any linear-programming text (x0 is in the
hull of rows x_i iff lambda >= 0, sum lambda = 1, X'lambda = x0 is feasible), solved by
``scipy.optimize.linprog(method="highs")`` over every row.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from scipy.optimize import linprog

from nearwise.core import hull, hull_simplex, locality
from nearwise.core.spec import Caps


def lp_outside(X: np.ndarray, x0: np.ndarray) -> bool:
    """scipy HiGHS: is the membership program infeasible?"""
    A = np.vstack([X.T, np.ones(len(X))])
    res = linprog(np.zeros(len(X)), A_eq=A, b_eq=np.append(x0, 1), method="highs")
    assert res.status in (0, 2), res.message
    return res.status == 2


def design(p: int, seed: int, n: int = 300) -> tuple[np.ndarray, np.ndarray]:
    """Training rows in [0, 1]^p (a mixture of a cube, a ball and a few corners) with a known
    facet x_1 = 1 held by p rows; query rows inside, outside, on that facet (its points, the
    midpoints of its edges) and 1e-4 on either side of it, and training rows themselves."""
    rng = np.random.default_rng(seed)
    cube = rng.uniform(0, 0.95, (n // 2, p))
    ball = rng.standard_normal((n - n // 2 - p, p))
    ball = 0.45 + 0.4 * ball / np.linalg.norm(ball, axis=1)[:, None] * rng.uniform(
        0, 1, (len(ball), 1)
    )
    face = np.column_stack([np.ones(p), rng.uniform(0.1, 0.9, (p, p - 1))])  # x_1 = 1
    X = np.vstack([cube, ball, face])
    X[0], X[1] = 0.0, 0.0  # so that every range is [0, 1]
    X[1, 1:] = 1.0
    w = rng.dirichlet(np.ones(p), 40)
    on = w @ face  # on the facet, inside the face
    edge = 0.5 * (face[rng.integers(0, p, 20)] + face[rng.integers(0, p, 20)])
    e1 = np.eye(p)[0]
    Xq = np.vstack(
        [
            rng.uniform(0.2, 0.8, (60, p)),  # mostly inside
            rng.uniform(-0.2, 1.2, (60, p)),  # mostly outside
            on,
            edge,
            on - 1e-4 * e1,  # just inside
            on + 1e-4 * e1,  # just outside
            X[rng.integers(0, n, 20)],  # training rows
        ]
    )
    return X, Xq


@pytest.mark.parametrize("p", [2, 3, 4, 5, 6, 7, 8])
def test_hull_verdicts_equal_highs_on_every_row(p: int) -> None:
    X, Xq = design(p, seed=p)
    expected = np.array([lp_outside(X, x) for x in Xq])
    for route in ("auto", "lp"):
        test = hull.hull_test(X, Xq, route=route)
        assert test.tested.all() and test.dim == p
        assert test.route == ("facets" if route == "auto" and p <= 3 else "lp")
        assert_array_equal(test.outside, expected)
    on = slice(120, 180)  # on the facet: inside, by the program and by the test
    assert not expected[on].any() and expected[220:260].all() and not expected[180:220].any()
    assert 10 < expected[:120].sum() < 110  # both verdicts among the random rows


@pytest.mark.parametrize("p", [4, 8])
def test_rows_the_simplex_leaves_go_to_highs_with_the_same_verdicts(monkeypatch, p) -> None:
    X, Xq = design(p, seed=10 + p)
    expected = np.array([lp_outside(X, x) for x in Xq])
    monkeypatch.setattr(hull_simplex, "MAX_PIVOTS", 0)  # the simplex decides nothing
    monkeypatch.setattr(hull, "MAX_ROUNDS", 2)  # HiGHS: one round on the seeds, then all rows
    sizes = []
    solve = hull._solve_block

    def spy(W, Wq, sets):
        sizes.append([S.size for S in sets])
        return solve(W, Wq, sets)

    monkeypatch.setattr(hull, "_solve_block", spy)
    monkeypatch.setattr(hull, "BATCH", len(Xq))
    test = hull.hull_test(X, Xq)
    assert test.tested.all()
    assert_array_equal(test.outside, expected)
    # at most two programs per row, the second over every training row
    assert len(sizes) <= 2 and all(size == len(X) for size in sizes[-1])


@pytest.mark.parametrize("stall", [hull_simplex.STALL, 0])
def test_the_simplex_decides_every_row_itself_on_degenerate_designs(monkeypatch, stall) -> None:
    # Rows on a lattice with duplicates, the corners of a cube with some missing, and query
    # rows on the lattice, between its points and on the corners: degenerate programs, where
    # pivots make no progress and Bland's rule takes over (stall = 0: from the first pivot).
    monkeypatch.setattr(hull_simplex, "STALL", stall)
    rng = np.random.default_rng(7)
    corners = np.array(np.meshgrid(*[[0.0, 1.0]] * 6)).reshape(6, -1).T
    for X, Xq in [
        (rng.integers(0, 3, (2000, 6)) / 2.0, rng.integers(0, 5, (150, 6)) / 4.0),
        (
            corners[rng.random(64) < 0.7],
            np.vstack([corners, 0.25 + rng.integers(0, 2, (50, 6)) / 2]),
        ),
    ]:
        c, s = X.mean(axis=0), np.ptp(X, axis=0).max()
        W, Wq = (X - c) / s, (Xq - c) / s
        out, done, _ = hull_simplex.decide(W, Wq, np.arange(0, len(X), 7), hull.HULL_TOL, 1 << 16)
        assert done.all()
        assert_array_equal(out, [lp_outside(X, x) for x in Xq])


@pytest.mark.parametrize("p", [4, 8])
def test_the_tolerance_is_an_l1_distance_of_1e_7_of_the_largest_range(p: int) -> None:
    # A point beyond the facet x_1 = 1 by t (largest range 1) is at Euclidean distance t; in
    # the test's rotated coordinates its L1 distance lies between t and sqrt(p) t. So
    # t = 0.5 HULL_TOL / sqrt(p) must count as inside, t = 2 HULL_TOL as outside.
    X, Xq = design(p, seed=20 + p)
    on = Xq[120:160]
    e1 = np.eye(p)[0]
    near = on + 0.5 * hull.HULL_TOL / np.sqrt(p) * e1
    far = on + 2 * hull.HULL_TOL * e1
    test = hull.hull_test(X, np.vstack([near, far]))
    assert test.tested.all()
    assert not test.outside[:40].any() and test.outside[40:].all()


def test_the_cap_leaves_the_same_rows_untested_and_the_message_says_it_is_about_cost(
    monkeypatch,
) -> None:
    monkeypatch.setattr(hull_simplex, "QUERY_BLOCK", 32)
    rng = np.random.default_rng(5)
    X = rng.standard_normal((2000, 6))
    X /= np.linalg.norm(X, axis=1)[:, None]  # every row a vertex: several rounds per row
    Xq = 0.9 * rng.uniform(-0.5, 0.5, (200, 6))
    whole = hull.hull_test(X, Xq)
    assert whole.tested.all() and whole.cost_s > 0
    assert not hull.hull_test(X, Xq, max_cost_s=0.0).tested.any()
    # the first round of the first block always runs, and nothing after it
    first = hull.hull_test(X, Xq, max_cost_s=1e-12).tested
    assert 0 < first.sum() < 32 and not first[32:].any()
    # the counted work is the cap's measure: reaching it exactly tests every row ...
    assert hull.hull_test(X, Xq, max_cost_s=whole.cost_s).tested.all()
    # ... and a third of it leaves rows untested, the same ones each time
    part = hull.hull_test(X, Xq, max_cost_s=whole.cost_s / 3)
    again = hull.hull_test(X, Xq, max_cost_s=whole.cost_s / 3)
    assert 0 < part.tested.sum() < 200
    assert_array_equal(part.tested, again.tested) and part.cost_s == again.cost_s
    assert_array_equal(part.outside[part.tested], whole.outside[part.tested])
    caps = Caps(hull_cost_s=whole.cost_s / 3, names={"hull_cost_s": "NEARWISE_MAX_HULL_COST_S"})
    loc = locality.query_flags(X, Xq, scale="none", caps=caps)
    untested = [i for i, f in enumerate(loc.flags) if "hull_not_tested" in f]
    assert untested == np.flatnonzero(~part.tested).tolist()
    (notice,) = [n for n in loc.notices if n.code == "hull_not_tested"]
    assert notice.rows == tuple(untested)
    assert "NEARWISE_MAX_HULL_COST_S" in notice.message and "not about these rows" in notice.message
    assert not any("hull_not_tested" in f for f in locality.query_flags(X, Xq, "none").flags)


def test_a_thousand_query_rows_in_eight_dimensions_are_all_decided_under_the_default_cap() -> None:
    # The case: 1,000 query rows; default cap of the service (web/settings.py).
    from nearwise.web.settings import Settings

    rng = np.random.default_rng(6)
    X, Xq = rng.uniform(size=(5000, 8)), rng.uniform(size=(1000, 8))
    test = hull.hull_test(X, Xq, max_cost_s=Settings().max_hull_cost_s)
    assert test.tested.all() and test.cost_s < Settings().max_hull_cost_s / 10


def test_within_level_combinations_the_verdicts_are_highs_on_that_levels_rows() -> None:
    # core/level_locality.py: the hull of the training rows with the query row's level only.
    from nearwise.core import level_locality
    from nearwise.core.categories import Categories

    rng = np.random.default_rng(9)
    Xa, Qa = design(5, seed=31, n=200)
    Xb, _ = design(5, seed=32, n=200)
    Xb = 0.2 + 0.6 * Xb  # level b: a smaller box, so level a's rows are often outside it
    X = np.vstack([np.column_stack([Xa, np.zeros(200)]), np.column_stack([Xb, np.ones(200)])])
    Xq = np.vstack(
        [np.column_stack([Qa, np.zeros(len(Qa))]), np.column_stack([Qa, np.ones(len(Qa))])]
    )
    order = rng.permutation(len(Xq))
    Xq = Xq[order]
    cats = Categories(6, (5,), ("g",), (("a", "b"),), (0,))
    got = level_locality.query_flags(X, Xq, "standard", cats)
    for i, row in enumerate(Xq):
        own = X[X[:, 5] == row[5], :5]
        in_range = ((row[:5] >= own.min(axis=0)) & (row[:5] <= own.max(axis=0))).all()
        expected = in_range and lp_outside(own, row[:5])
        assert ("outside_hull" in got.flags[i]) == expected, i
        assert "hull_not_tested" not in got.flags[i]
    # the cap is spent group after group: level a's work exactly, and level b gets none
    Z = (X[:, :5] - X[:, :5].mean(axis=0)) / X[:, :5].std(axis=0)
    Zq = (Xq[:, :5] - X[:, :5].mean(axis=0)) / X[:, :5].std(axis=0)
    qa, ta = Xq[:, 5] == 0, X[:, 5] == 0
    in_a = ((Zq[qa] >= Z[ta].min(axis=0)) & (Zq[qa] <= Z[ta].max(axis=0))).all(axis=1)
    spent_a = hull.hull_test(Z[ta], Zq[qa], np.flatnonzero(in_a)).cost_s
    capped = level_locality.query_flags(X, Xq, "standard", cats, Caps(hull_cost_s=spent_a))
    untested = np.array(["hull_not_tested" in f for f in capped.flags])
    in_b = np.array(["outside_range" not in f for f in capped.flags]) & ~qa
    hull_out = np.array(["outside_hull" in f for f in capped.flags])
    assert not untested[qa].any() and not (untested & ~in_b).any()
    # level b: only the separating directions (step a, not counted) decide rows
    assert (untested | hull_out)[in_b].all() and untested.sum() > 20
    (notice,) = [n for n in capped.notices if n.code == "hull_not_tested"]
    assert "not about these rows" in notice.message and "same levels" in notice.message


@pytest.mark.parametrize("p", [4, 8])
def test_the_cost_estimate_prices_the_programs_as_the_test_counts_them(p: int) -> None:
    # core/locality_cost.py estimates the linear programs before they run; the test counts
    # the same work as it runs (hull_simplex.SOLVE_S, PRICE_S). On rows in a cube the two
    # agree within a factor of 3, and the cap bounds the estimate exactly.
    from nearwise.core import locality_cost
    from nearwise.core.data import Scaler

    rng = np.random.default_rng(40 + p)
    X, Xq = rng.uniform(size=(5000, p)), rng.uniform(size=(1000, p))
    probe = locality_cost.measure(X, Xq)
    lp = probe.hull() - replace(probe, hull_cap_s=0.0).hull()
    sc = Scaler.fit(X, "standard")
    counted = hull.hull_test(sc.transform(X), sc.transform(Xq)).cost_s
    assert 1 / 3 < lp / counted < 3, (lp, counted)
    base = replace(probe, hull_cap_s=0.0).hull()
    assert replace(probe, hull_cap_s=0.99 * lp).hull() - base == pytest.approx(0.99 * lp)
    assert replace(probe, hull_cap_s=1.01 * lp).hull() - base == pytest.approx(lp)


def test_a_predict_flags_the_rows_past_the_cap_and_names_the_setting() -> None:
    from nearwise.core import pipeline
    from nearwise.core.data import Table
    from nearwise.core.spec import Job

    rng = np.random.default_rng(12)
    X, Xq = rng.uniform(size=(400, 5)), rng.uniform(0.3, 0.7, size=(30, 5))
    cols = ("a", "b", "c", "d", "e")
    train = Table("train", (*cols, "y"), np.column_stack([X, X.sum(axis=1)]))
    name = {"hull_cost_s": "NEARWISE_MAX_HULL_COST_S"}
    job = Job("knn", train, "y", query=Table("query", cols, Xq), params={"k": 5})
    for cap, untested in ((0.0, tuple(range(30))), (None, None)):
        result = pipeline.run(replace(job, caps=Caps(hull_cost_s=cap, names=name)))
        got = [w for w in result.warnings if w.code == "hull_not_tested"]
        if untested is None:
            assert not got
        else:
            assert got[0].rows == untested
            assert "NEARWISE_MAX_HULL_COST_S = 0" in got[0].message
