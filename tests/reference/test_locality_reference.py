"""Locality figures against outside sources: ESL's edge fractions, the volume of a ball, and
scipy's Delaunay triangulation for the convex-hull test; known-answer designs."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.spatial import Delaunay
from scipy.special import gamma

from nearwise.core.hull import HULL_MAX_DIM, hull_test
from nearwise.core.locality import (
    edge_fraction,
    not_local_notice,
    query_flags,
    radius_holding,
)


def test_edge_fractions_of_esl_section_2_5() -> None:
    # Hastie, Tibshirani & Friedman, The Elements of Statistical Learning, 2nd ed., section
    # 2.5: e_10(0.01) = 0.63 and e_10(0.1) = 0.80. The book rounds loosely: 0.1^(1/10) is
    # 0.794, so the check allows 0.01.
    assert edge_fraction(0.01, 10) == pytest.approx(0.63, abs=0.01)
    assert edge_fraction(0.1, 10) == pytest.approx(0.80, abs=0.01)


def ball_radius_for(volume_fraction: float, p: int) -> float:
    """Radius of the ball holding ``volume_fraction`` of the cube [-1, 1]^p, if it fits inside.

    Volume of the p-ball of radius r: pi^(p/2) r^p / Gamma(p/2 + 1) (NIST DLMF 5.19.4; the
    equation number is from memory).
    """
    unit_ball = math.pi ** (p / 2) / gamma(p / 2 + 1)
    return (volume_fraction * 2.0**p / unit_ball) ** (1 / p)


def test_ball_holding_a_tenth_of_the_cube_in_5_dimensions() -> None:
    p, n = 5, 200_000
    X = np.random.default_rng(5).uniform(-1, 1, size=(n, p))
    exact = ball_radius_for(0.1, p)
    assert round(exact, 1) == 0.9  # a fact of the trade: about 0.9 in 5 dimensions
    # The 10 % quantile of the distance to the centre, from 200,000 uniform points: its
    # standard error is about 0.1 %, so 1 % is a safe tolerance.
    assert_allclose(radius_holding(X, np.zeros(p), 0.1), exact, rtol=0.01)


def test_ball_holding_a_tenth_of_the_cube_breaks_out_in_10_dimensions() -> None:
    p, n = 10, 200_000
    X = np.random.default_rng(10).uniform(-1, 1, size=(n, p))
    r = radius_holding(X, np.zeros(p), 0.1)
    # A fact of the trade: more than 1, outside the cube's inscribed ball. Where the ball no
    # longer fits in the cube the volume formula is only a lower bound (about 1.45).
    assert r > 1.0
    assert r > ball_radius_for(0.1, p) * 0.99


def test_query_beyond_the_range_is_flagged_and_one_inside_is_not() -> None:
    # Known-answer design: a 21 x 21 grid on [0, 1]^2.
    g = np.linspace(0, 1, 21)
    X = np.array([(a, b) for a in g for b in g])
    loc = query_flags(X, np.array([[0.5, 0.5], [1.2, 0.5], [0.5, -0.01]]))
    assert loc.flags[0] == ()
    assert "outside_range" in loc.flags[1] and "outside_range" in loc.flags[2]
    assert [n.rows for n in loc.notices if n.code == "outside_range"] == [(1, 2)]


def test_hole_of_an_l_shaped_design_is_flagged() -> None:
    # Known-answer design (hidden extrapolation: Montgomery, Peck & Vining, Introduction to
    # Linear Regression Analysis, 5th ed., section 3.8): rows fill [0,2]x[0,1] and
    # [0,1]x[1,2]; (1.6, 1.6) is inside both ranges but in the missing corner.
    g = np.linspace(0, 2, 41)
    X = np.array([(a, b) for a in g for b in g if b <= 1 or a <= 1])
    loc = query_flags(X, np.array([[1.6, 1.6], [0.5, 1.5], [1.5, 0.5]]))
    assert {"outside_hull", "far_from_data"} & set(loc.flags[0])
    assert "outside_range" not in loc.flags[0]
    assert loc.flags[1] == () and loc.flags[2] == ()


def test_not_local_at_10_dimensions_and_not_at_1() -> None:
    # ESL section 2.5: the same fraction r = 10/1000 spans 0.01 of the range in one
    # dimension and 0.63 in ten.
    assert not_local_notice(10, 1000, 1) is None
    notice = not_local_notice(10, 1000, 10)
    assert notice is not None and notice.code == "not_local" and notice.rows == ()
    assert "0.63" in notice.message


@pytest.mark.parametrize("p", [2, 3])
@pytest.mark.parametrize("route", ["auto", "lp"])
def test_hull_test_agrees_with_delaunay(p: int, route: str) -> None:
    # Reference library: scipy.spatial.Delaunay(...).find_simplex(x) >= 0 iff x is in the
    # hull. Random points almost surely do not lie within 1e-7 of a facet, so the two agree
    # exactly.
    rng = np.random.default_rng(p)
    X = rng.normal(size=(300, p))
    Xq = rng.normal(size=(500, p)) * 1.3
    inside = Delaunay(X).find_simplex(Xq) >= 0
    test = hull_test(X, Xq, route=route)
    assert test.route == ("facets" if route == "auto" else "lp")
    assert test.tested.all()
    np.testing.assert_array_equal(test.outside, ~inside)


@pytest.mark.parametrize("p", [2, 3])
def test_query_flags_outside_hull_agrees_with_delaunay(p: int) -> None:
    # Reference library as above; outside_hull is reported only inside every range.
    rng = np.random.default_rng(10 + p)
    X = rng.uniform(size=(400, p)) ** 2  # skewed, so the hull is far from the box
    Xq = rng.uniform(size=(300, p))
    loc = query_flags(X, Xq)
    in_box = ((Xq >= X.min(axis=0)) & (Xq <= X.max(axis=0))).all(axis=1)
    expected = in_box & (Delaunay(X).find_simplex(Xq) < 0)
    flagged = np.array(["outside_hull" in f for f in loc.flags])
    np.testing.assert_array_equal(flagged, expected)


def test_above_the_dimension_limit_the_hull_test_is_skipped_and_said() -> None:
    # ESL section 2.5 on high dimensions: nearly every new point is outside the hull there.
    p = HULL_MAX_DIM + 1
    rng = np.random.default_rng(9)
    X = rng.normal(size=(500, p))
    loc = query_flags(X, rng.normal(size=(20, p)) * 0.1)
    assert not any("outside_hull" in f for f in loc.flags)
    (skipped,) = [n for n in loc.notices if n.code == "hull_not_tested"]
    assert skipped.rows == () and f"above {HULL_MAX_DIM}" in skipped.message
