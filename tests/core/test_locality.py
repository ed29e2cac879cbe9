"""Locality: flags and notices agree, distances are right, the hull test is exact where it runs
and keeps to its budget, and the summary checks its options."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import linprog
from scipy.spatial.distance import cdist

from nearwise.core import hull, locality
from nearwise.core.columns import feature_arrays
from nearwise.core.data import Table
from nearwise.core.errors import BadCell, InvalidValue, TooFewRows, UnknownName
from nearwise.core.locality import CODES, query_flags, summary
from nearwise.core.neighbors import Nearest
from nearwise.core.spec import Caps

RNG = np.random.default_rng(0)
X3 = RNG.uniform(size=(300, 3))
Q3 = RNG.uniform(-0.2, 1.2, size=(50, 3))


def test_flags_follow_the_code_order_and_match_the_notices() -> None:
    loc = query_flags(X3, Q3)
    assert len(loc.flags) == 50 and loc.nearest.shape == (50,) and loc.ratio.shape == (50,)
    for f in loc.flags:
        assert list(f) == [c for c in CODES if c in f]
    for notice in loc.notices:
        assert notice.rows == tuple(i for i, f in enumerate(loc.flags) if notice.code in f)
        assert notice.message
    codes = {c for f in loc.flags for c in f}
    assert codes == {n.code for n in loc.notices}
    assert {"outside_range", "far_from_data"} <= codes


def test_nearest_and_ratio_are_scaled_distances() -> None:
    loc = query_flags(X3, Q3, scale="range")
    lo, span = X3.min(axis=0), np.ptp(X3, axis=0)
    d = cdist((Q3 - lo) / span, (X3 - lo) / span).min(axis=1)
    assert_allclose(loc.nearest, d, rtol=1e-12)  # same distances, another summation order
    spacing = locality.typical_spacing((X3 - lo) / span)
    assert_allclose(loc.ratio, d / spacing, rtol=1e-12)  # one division of the same numbers


def test_typical_spacing_skips_duplicates() -> None:
    X = np.vstack([X3, X3, X3[:50]])
    d = cdist(X, X)
    nearest_other = np.where(d > 0, d, np.inf).min(axis=1)  # duplicates skipped
    assert locality.typical_spacing(X) == np.median(nearest_other)
    assert locality.typical_spacing(X3) == np.median(np.sort(cdist(X3, X3), axis=1)[:, 1])


def test_rows_that_all_coincide() -> None:
    X = np.ones((5, 2))
    loc = query_flags(X, np.array([[1.0, 1.0], [1.0, 2.0]]))
    assert loc.ratio[0] == 0 and np.isinf(loc.ratio[1])
    assert loc.flags == ((), ("outside_range", "far_from_data"))


def test_empty_query() -> None:
    loc = query_flags(X3, np.zeros((0, 3)))
    assert loc.flags == () and loc.notices == () and loc.nearest.shape == (0,)


def test_flags_do_not_depend_on_units_or_row_order() -> None:
    X = RNG.normal(size=(3000, 2))  # more than the spacing sample
    Xq = RNG.normal(size=(40, 2)) * 1.5
    a = query_flags(X, Xq)
    units = np.array([1000.0, 0.001])
    b = query_flags(X[::-1] * units + 7, Xq * units + 7)
    assert a.flags == b.flags
    assert_allclose(a.ratio, b.ratio, rtol=1e-9)  # scaling rounds differently


def test_far_threshold_per_dimension() -> None:
    # The service's own rule, kept in step with the README "Warnings" table: max(3, 10^(1/p)).
    # Three typical spacings is common practice; 10^(1/p) keeps a Poisson scatter's chance of
    # a gap that wide, 2^(-t^p) (Clark & Evans 1954), near 1 in 1,000 in one and two dimensions.
    assert locality.far_threshold(1) == 10
    assert locality.far_threshold(2) == pytest.approx(10**0.5)
    assert locality.far_threshold(3) == locality.far_threshold(7) == 3


def test_flat_data_queries_off_the_plane_are_outside() -> None:
    ab = RNG.uniform(size=(200, 2))
    X = np.column_stack([ab, ab.sum(axis=1)])  # a plane in 3-D
    Xq = np.array([[0.5, 0.5, 1.0], [0.5, 0.5, 1.1], [0.2, 0.3, 0.5]])
    test = hull.hull_test(X, Xq)
    assert test.dim == 2 and test.route == "facets"
    assert test.outside.tolist() == [False, True, False]


def full_lp_outside(X: np.ndarray, x0: np.ndarray) -> bool:
    """The membership program over every row, as written in the module docstring."""
    A = np.vstack([X.T, np.ones(len(X))])
    res = linprog(np.zeros(len(X)), A_eq=A, b_eq=np.append(x0, 1), method="highs")
    return res.status == 2  # infeasible


@pytest.mark.parametrize("p", [4, 6, 8])
def test_column_generation_equals_the_full_program(p: int) -> None:
    rng = np.random.default_rng(p)
    X = rng.normal(size=(400, p))
    Xq = rng.normal(size=(30, p)) * np.repeat([0.3, 1.5], 15)[:, None]
    test = hull.hull_test(X, Xq)
    assert test.route == "lp" and test.tested.all()
    expected = [full_lp_outside(X, x) for x in Xq]
    assert test.outside.tolist() == expected
    assert 0 < sum(expected) < 30  # both verdicts occur


def test_the_cost_cap_leaves_rows_untested_and_says_so() -> None:
    # (the cap's accounting: tests/core/test_hull.py)
    rng = np.random.default_rng(4)
    X = rng.normal(size=(300, 4))
    Xq = rng.normal(size=(40, 4)) * 0.3  # inside: each needs a program
    assert not hull.hull_test(X, Xq, max_cost_s=0.0).tested.any()
    assert hull.hull_test(X, Xq).tested.all()
    caps = Caps(hull_cost_s=0.0)
    loc = query_flags(X, np.vstack([Xq] * 7), caps=caps)
    untested = [i for i, f in enumerate(loc.flags) if "hull_not_tested" in f]
    assert len(untested) == 280
    (notice,) = [n for n in loc.notices if n.code == "hull_not_tested"]
    assert notice.rows == tuple(untested) and "max_hull_cost_s = 0" in notice.message


def test_neighborhood_radii_equal_brute_force() -> None:
    X = np.vstack([X3, X3[:20]])  # duplicates count as other rows
    d = np.sort(cdist(X, X), axis=1)  # column 0 is the row itself
    radii = locality.neighborhood_radii(X, [1, 3, 32])
    # The same distances summed in another order.
    assert_allclose(radii, np.median(d[:, [1, 3, 32]], axis=0), rtol=1e-12, atol=1e-15)


def test_radius_holding() -> None:
    X = np.arange(10.0)[:, None]
    assert locality.radius_holding(X, np.zeros(1), 0.3) == 2.0
    assert locality.radius_holding(X, np.zeros(1), 1.0) == 9.0


def test_summary_shapes_and_the_requested_row() -> None:
    doc = summary(X3, ["a", "b", "c"], k=30, Xq=Q3[:4])
    assert doc["n"] == 300 and doc["p"] == 3 and doc["features"] == ["a", "b", "c"]
    assert [r["name"] for r in doc["ranges"]] == ["a", "b", "c"]
    table = doc["neighborhoods"]
    # The service's own table (README "Locality"): 1 %, 5 %, 10 % and the size asked, k =
    # ceil(fraction n).
    assert [r["fraction"] for r in table] == [0.01, 0.05, 0.1]  # k/n = 0.1 is the 10 % row
    assert [r["k"] for r in table] == [3, 15, 30]
    assert [r["requested"] for r in table] == [False, False, True]
    radii = [r["radius"] for r in table]
    assert radii == sorted(radii)
    assert len(doc["query"]) == 4 and doc["warnings"]
    other = summary(X3, ["a", "b", "c"], fraction=0.2)
    assert [r["requested"] for r in other["neighborhoods"]] == [False] * 3 + [True]
    assert other["neighborhoods"][-1]["k"] == 60 and other["query"] == []


def test_summary_warns_not_local_for_the_size_asked() -> None:
    X = RNG.uniform(size=(100, 6))
    codes = [w["code"] for w in summary(X, list("abcdef"), k=5)["warnings"]]
    # e_6(0.05) = 0.05^(1/6) = 0.61, above the README's cut-off 0.5 (Hastie, Tibshirani &
    # Friedman 2009, section 2.5); the cut-off's both sides: tests/core/test_planted_defects.py
    assert codes == ["not_local"]
    assert summary(X, list("abcdef"))["warnings"] == []


@pytest.mark.parametrize(
    ("kw", "pointers"),
    [
        ({"k": 3, "fraction": 0.1}, [("k",), ("fraction",)]),
        ({"k": 0}, [("k",)]),
        ({"k": 301}, [("k",)]),
        ({"fraction": 1.5}, [("fraction",)]),
        ({"scale": "log"}, [("scale",)]),
    ],
)
def test_summary_refuses_bad_options(kw: dict, pointers: list) -> None:
    with pytest.raises(InvalidValue) as err:
        summary(X3, ["a", "b", "c"], **kw)
    assert [w.path for w in err.value.where] == pointers


def test_summary_needs_two_rows() -> None:
    with pytest.raises(TooFewRows, match="at least 2 training rows"):
        summary(X3[:1], ["a", "b", "c"])


def test_arrays_default_to_every_column_and_check_cells() -> None:
    train = Table("train", ("a", "b"), np.array([[1.0, 2.0], [3.0, 4.0]]))
    query = Table("query", ("b", "a", "c"), np.array([[5.0, 6.0, np.nan]]))
    names, X, Xq = feature_arrays(train, None, query)
    assert names == ("a", "b") and X.tolist() == [[1.0, 2.0], [3.0, 4.0]]
    assert Xq.tolist() == [[6.0, 5.0]]  # extra query column ignored
    with pytest.raises(UnknownName) as err:
        feature_arrays(train, ["a", "z"], None)
    assert err.value.where[0].path == ("features", 1)
    with pytest.raises(UnknownName) as err:
        feature_arrays(train, ["a"], Table("query", ("b",), np.ones((1, 1))))
    assert err.value.where[0].path == ("query", "columns")
    holes = Table("train", ("a", "b"), np.array([[1.0, np.nan], [3.0, 4.0]]))
    with pytest.raises(BadCell) as err:
        feature_arrays(holes, None, None)
    assert err.value.where[0].path == ("train", "rows", 0, 1)
    text = Table(
        "train", ("a",), np.array([[1.0], [np.nan]]), {0: np.array([1.0, "x"], dtype=object)}
    )
    with pytest.raises(BadCell, match="holds text 'x'") as err:
        feature_arrays(text, None, None)
    assert err.value.where[0].path == ("train", "rows", 1, 0)


@pytest.mark.parametrize("p", [3, 15])  # k-d tree, then brute force
def test_nearest_distances_are_exact_and_see_duplicates(p: int) -> None:
    rng = np.random.default_rng(p)
    Z = rng.normal(size=(500, p)) * 100 + 1000  # large norms: the expansion alone would blur 0
    Q = np.vstack([Z[:5], rng.normal(size=(5, p)) * 100 + 1000])
    d = Nearest(Z).distances(Q, 12)
    ref = np.sort(cdist(Q, Z), axis=1)[:, :12]
    assert_allclose(d, ref, rtol=1e-12)  # one summation order against another
    assert (d[:5, 0] == 0).all()
    few = Nearest(Z[:3]).distances(Q[:2], 5)
    assert np.isinf(few[:, 3:]).all() and np.isfinite(few[:, :3]).all()


def test_typical_spacing_skips_duplicates_in_many_dimensions() -> None:
    X = np.random.default_rng(7).normal(size=(200, 15))
    d = cdist(X, X)
    once = np.median(np.sort(d, axis=1)[:, 1])
    # Duplicates must not change it: equal up to summation order.
    assert_allclose(locality.typical_spacing(np.vstack([X, X])), once, rtol=1e-12)
