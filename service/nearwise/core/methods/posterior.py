"""Smoothing splines as posterior means: smoother weights and posterior variance anywhere.

A smoothing spline is the posterior mean of f under a Gaussian prior made of a flat linear
part and a process with generalized covariance b phi, with noise of variance sigma^2 / w_i and
lam = sigma^2 / b (Wahba 1978, 1983). Its value at x0 is omega' y, where
[[Phi + lam W^-1, P], [P', 0]] [omega; nu] = [phi_0; p_0], and its posterior variance is
sigma^2 (phi(x0, x0) - omega' phi_0 - nu' p_0) / lam. At a training point this equals
sigma^2 A_ii / w_i, the quantity behind the Bayesian band f +/- z sigma sqrt(A_ii).
phi is r^2 log r for the thin-plate spline (as scipy's RBFInterpolator) and |r|^3 / 12 for
the cubic smoothing spline with penalty integral f''^2.

References
----------
Wahba, G. (1983). Bayesian "confidence intervals" for the cross-validated smoothing spline.
*JRSS B* 45, 133-150.
Nychka, D. (1988). Bayesian confidence intervals for smoothing splines. *JASA* 83, 1134-1143:
the band's coverage holds on average over the design points, not at every point.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, stats

from nearwise.core.budget import checkpoint

#: Right-hand sides solved at once: each block's solution and its copy of the cross
#: covariances hold (n + k) x SOLVE_COLUMNS numbers (48 MB at 3,000 rows).
SOLVE_COLUMNS = 1024


class Posterior:
    """The dense augmented system of one fit, factored once."""

    def __init__(self, Phi: np.ndarray, P: np.ndarray, nugget: np.ndarray, lam: float) -> None:
        n, k = P.shape
        A = np.zeros((n + k, n + k))
        A[:n, :n] = Phi
        A[np.arange(n), np.arange(n)] += nugget
        A[:n, n:] = P
        A[n:, :n] = P.T
        self.lu = linalg.lu_factor(A, check_finite=False)
        self.n, self.lam = n, lam

    def weights(self, Phi0: np.ndarray, P0: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Smoother weights omega (m, n) and drift multipliers nu (m, k) at m points."""
        checkpoint()
        sol = linalg.lu_solve(self.lu, np.hstack([Phi0, P0]).T, check_finite=False)
        return sol[: self.n].T, sol[self.n :].T

    def variance(self, Phi0: np.ndarray, P0: np.ndarray, phi00: np.ndarray) -> np.ndarray:
        """Posterior variance in units of sigma^2 (NaN when lam = 0: no noise model).

        Solved for SOLVE_COLUMNS points at a time, the budget checked before each block."""
        m = Phi0.shape[0]
        if self.lam <= 0:
            return np.full(m, np.nan)
        v = np.empty(m)
        for start in range(0, m, SOLVE_COLUMNS):
            at = slice(start, start + SOLVE_COLUMNS)
            omega, nu = self.weights(Phi0[at], P0[at])
            v[at] = (
                phi00[at]
                - np.einsum("ij,ij->i", omega, Phi0[at])
                - np.einsum("ij,ij->i", nu, P0[at])
            )
        return np.maximum(v, 0.0) / self.lam


def cubic_phi(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """|a - b|^3 / 12: the generalized covariance of the cubic smoothing spline."""
    return np.abs(a[:, None] - b[None, :]) ** 3 / 12.0


class BayesianBand:
    """std_error and the model interval of a fit that offers ``predict``, ``sigma2()`` and
    ``variance(Xq)`` (the posterior variance of f(x0) in units of sigma^2)."""

    def std_error(self, Xq: np.ndarray, sigma_cv: float) -> np.ndarray:
        """Posterior standard deviation of the fitted mean (Wahba 1983)."""
        with np.errstate(invalid="ignore"):
            return np.sqrt(self.sigma2() * self.variance(Xq))

    def model_interval(
        self, Xq: np.ndarray, level: float, w0: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """The Bayesian band for a new observation: f +/- z sqrt(sigma^2 (1 + v(x0))); for a
        new observation of weight w0 (noise variance sigma^2 / w0), f +/- z sqrt(sigma^2
        (1 / w0 + v(x0)))."""
        z = stats.norm.ppf(0.5 + level / 2)
        noise = 1.0 if w0 is None else 1.0 / w0
        with np.errstate(invalid="ignore"):
            half = z * np.sqrt(self.sigma2() * (noise + self.variance(Xq)))
        f = self.predict(Xq)
        return f - half, f + half
