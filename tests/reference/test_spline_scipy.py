"""Smoothing splines against scipy.interpolate.

References: ``scipy.interpolate.make_smoothing_spline(x, y, w, lam)`` for one feature and
``scipy.interpolate.RBFInterpolator(kernel="thin_plate_spline", smoothing=lam)`` for two or
three, with ``scale: none``.
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.interpolate import RBFInterpolator, make_smoothing_spline

from nearwise.core.methods.spline import Spline


@pytest.mark.parametrize("lam", [0.0, 1e-4, 0.05, 3.0, 300.0])
def test_one_feature_equals_make_smoothing_spline(lam):
    rng = np.random.default_rng(21)
    # A jittered grid: no two x closer than 1/10,000 of the range, so no knot is merged.
    x = np.linspace(0, 10, 150) + rng.uniform(-0.02, 0.02, 150)
    y = np.sin(x) + rng.normal(0, 0.3, 150)
    fitted = Spline().fit(x[:, None], y, {}, lam)
    assert fitted.summary(("x",))["knot_placement"] == "exact"
    ref = make_smoothing_spline(x, y, lam=lam)
    xq = np.linspace(0, 10, 301).clip(x[0], x[-1])
    scale = np.abs(y).max()
    # Both solve ill-conditioned banded systems whose accuracy falls as lam grows: against a
    # 40-digit solve of the same system (measured once with mpmath) the fitted values here
    # erred by 6e-9 and scipy's by 1.2e-8 at lam = 300. Allow 5e-8 of the data scale.
    assert_allclose(fitted.predict(xq[:, None]), ref(xq), atol=5e-8 * scale)
    assert_allclose(fitted.fitted, ref(x), atol=5e-8 * scale)


def test_repeated_x_equals_weighted_spline_of_means():
    rng = np.random.default_rng(22)
    x = rng.integers(0, 40, 300) / 4.0
    y = np.cos(x) + rng.normal(0, 0.2, 300)
    fitted = Spline().fit(x[:, None], y, {}, 0.02)
    t, inv, counts = np.unique(x, return_inverse=True, return_counts=True)
    means = np.bincount(inv, weights=y) / counts
    ref = make_smoothing_spline(t, means, w=counts.astype(float), lam=0.02)
    # Two banded solvers on well-spaced knots (step 0.25): agreement to 1e-10.
    assert_allclose(fitted.predict(t[:, None]), ref(t), atol=1e-10)


def test_outside_the_data_the_natural_spline_is_linear():
    rng = np.random.default_rng(23)
    x = np.linspace(0, 1, 40) + rng.uniform(-0.005, 0.005, 40)
    y = x**2 + rng.normal(0, 0.05, 40)
    fitted = Spline().fit(x[:, None], y, {}, 1e-3)
    ref = make_smoothing_spline(x, y, lam=1e-3)
    slope = ref.derivative(1)(x[-1])
    xq = x[-1] + np.array([0.1, 0.5])
    # scipy's end value and slope carry its own ~1e-10 solve error.
    assert_allclose(fitted.predict(xq[:, None]), ref(x[-1]) + slope * (xq - x[-1]), atol=1e-9)


@pytest.mark.parametrize("p", [2, 3])
@pytest.mark.parametrize("lam", [0.0, 1e-3, 0.1, 10.0])
def test_thin_plate_equals_rbfinterpolator(p, lam):
    rng = np.random.default_rng(24 + p)
    X = rng.uniform(size=(120, p)) * np.arange(1, p + 1)
    y = np.sin(3 * X[:, 0]) + X[:, -1] ** 2 + rng.normal(0, 0.1, 120)
    Xq = rng.uniform(size=(40, p)) * np.arange(1, p + 1)
    fitted = Spline().fit(X, y, {"scale": "none"}, lam)
    ref = RBFInterpolator(X, y, kernel="thin_plate_spline", smoothing=lam)
    # Both solve the same dense symmetric system; conditioning at lam = 0 costs a few digits.
    assert_allclose(fitted.predict(Xq), ref(Xq), atol=1e-8)


def test_smoothing_zero_interpolates_every_training_row():
    """Smoothing 0 reproduces every training target: interpolation, the textbook over-fit."""
    rng = np.random.default_rng(30)
    x = rng.permutation(np.linspace(0, 5, 50))
    y = rng.normal(size=50)
    one = Spline().fit(x[:, None], y, {}, 0.0)
    # Interpolation through 50 points: the banded solve's rounding, ~1e-12.
    assert_allclose(one.predict(x[:, None]), y, atol=1e-9)
    X = rng.uniform(size=(60, 2))
    y2 = rng.normal(size=60)
    two = Spline().fit(X, y2, {}, 0.0)
    # A dense interpolation system of 60 rows: conditioning costs a few digits.
    assert_allclose(two.predict(X), y2, atol=1e-8)
