"""The one-feature spline stays accurate on large designs with continuous x.

References: (1) a handbook fact: the roughness penalty vanishes exactly on straight lines, so as
the smoothing grows the smoothing spline tends to the weighted least-squares line (Green &
Silverman 1994, section 2.3), computed here with ``numpy.polyfit``; (2) a 50-digit solve of
the same Reinsch equations with mpmath, a general-purpose arbitrary-precision library.
"""

import mpmath as mp
import numpy as np
import pytest
from numpy.testing import assert_allclose

from nearwise.core.methods import spline1d
from nearwise.core.methods.spline import Spline


@pytest.mark.parametrize("n", [2_000, 50_000])
def test_huge_smoothing_tends_to_the_least_squares_line(n):
    rng = np.random.default_rng(n)
    x = rng.uniform(0, 10, n)
    y = np.sin(x) + 0.3 * x + rng.normal(0, 0.3, n)
    fitted = Spline().fit(x[:, None], y, {}, 1e12)
    snapped = spline1d.Snap.of(x).x  # where the knots put each x (within range / 2000)
    line = np.polyval(np.polyfit(snapped, y, 1), x)
    # The spline's distance from the line shrinks like 1/smoothing: about 1e-9 here.
    assert_allclose(fitted.fitted, line, atol=1e-6)
    assert fitted.df == pytest.approx(2.0, abs=1e-4)
    # Rounding x to the knots moves the line itself by a small fraction of the noise.
    raw_line = np.polyval(np.polyfit(x, y, 1), x)
    assert np.abs(line - raw_line).max() < 0.01 * 0.3


def _reinsch_50_digits(t, w, y, lam):
    mp.mp.dps = 50
    n = len(t)
    T, W, Y, L = ([mp.mpf(float(v)) for v in a] for a in (t, w, y, [lam]))
    L = L[0]
    h = [T[i + 1] - T[i] for i in range(n - 1)]
    N = n - 2
    A = mp.zeros(N, N)
    rhs = mp.zeros(N, 1)
    q = [(1 / h[j], -1 / h[j] - 1 / h[j + 1], 1 / h[j + 1]) for j in range(N)]
    for j in range(N):
        A[j, j] = (h[j] + h[j + 1]) / 3
        if j + 1 < N:
            A[j, j + 1] = A[j + 1, j] = h[j + 1] / 6
        rhs[j] = sum(q[j][k] * Y[j + k] for k in range(3))
        for i in range(max(0, j - 2), min(N, j + 3)):
            A[i, j] += L * sum(
                q[i][k] * q[j][k + i - j] / W[i + k] for k in range(3) if 0 <= k + i - j < 3
            )
    gam = mp.lu_solve(A, rhs)
    out = []
    for i in range(n):
        s = sum(q[j][i - j] * gam[j] for j in range(max(0, i - 2), min(N, i + 1)))
        out.append(float(Y[i] - L * s / W[i]))
    return np.array(out)


@pytest.mark.parametrize("lam", [1e-4, 1.0, 1e4])
def test_rounded_knots_solve_to_within_1e6_of_a_50_digit_solve(lam):
    rng = np.random.default_rng(7)
    x = rng.uniform(0, 10, 3000)
    y = np.sin(x) + rng.normal(0, 0.3, 3000)
    snap = spline1d.Snap.of(x)
    assert snap.how == "grid" and snap.knots <= spline1d.MAX_KNOTS
    t, ybar, w = spline1d.average_ties(snap.x, y)
    t, ybar, w = t[:120], ybar[:120], w[:120]  # a 120-knot stretch keeps mpmath quick
    g, _ = spline1d.Knots.build(t, w).solve(ybar, lam)
    # Measured errors of the double-precision banded solve on evenly spaced knots were below
    # 1e-9; the requirement is 1e-6 of the data scale.
    assert_allclose(g, _reinsch_50_digits(t, w, ybar, lam), atol=1e-6)


def test_rounding_of_x_is_reported_and_the_cv_curve_is_smooth():
    from nearwise.core.data import Table
    from nearwise.core.pipeline import run
    from nearwise.core.spec import Job

    rng = np.random.default_rng(3)
    x = rng.uniform(0, 10, 20_000)
    y = np.sin(x) + rng.normal(0, 0.3, 20_000)
    result = run(Job("spline", Table("train", ("x", "y"), np.column_stack([x, y])), "y"))
    assert [w.code for w in result.warnings if w.code == "x_rounded"] == ["x_rounded"]
    assert result.model["knot_placement"] == "grid"
    errors = np.array([e.error for e in result.tuning.path])
    # The CV error falls from the straight line to a minimum, then rises slowly: once it has
    # started to rise it never drops by more than a whisker (no numerical jumps).
    rising = np.diff(errors[np.argmin(errors) :])
    assert (rising > -1e-4).all()
    assert 0.29 < result.fit.cv_error < 0.31  # the noise sd is 0.3
