"""Thin-plate smoothing spline in two or three variables, with a whole smoothing path from one
eigendecomposition.

f(x) = sum_i c_i phi(|x - x_i|) + b_0 + b' x with phi(r) = r^2 log r, and
[[K + lam I, P], [P', 0]] [c; b] = [y; 0]: the system solved by
``scipy.interpolate.RBFInterpolator(kernel="thin_plate_spline", smoothing=lam)``.

Write P = [Q1 Q2] [R; 0]. Then c = Q2 d with (Q2' K Q2 + lam I) d = Q2' y. One symmetric
eigendecomposition Q2' K Q2 = U diag(ev) U' gives c for every lam at the cost of a
matrix-vector product, the effective degrees of freedom df(lam) = (p + 1) + sum ev/(ev + lam),
and the leave-one-out residuals c_i / sum_j G_ij^2 / (ev_j + lam) with G = Q2 U.

Kernels trust their inputs: P has full column rank.

References
----------
Wahba, G. (1990). *Spline Models for Observational Data*, SIAM, chapters 2 and 4.
Green & Silverman (1994), *Nonparametric Regression and Generalized Linear Models*, ch. 7.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy import linalg
from scipy.spatial.distance import cdist


def kernel(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """phi(|a - b|) = r^2 log r, with phi(0) = 0."""
    r = cdist(A, B)
    with np.errstate(divide="ignore", invalid="ignore"):
        k = r**2 * np.log(r)
    k[r == 0] = 0.0
    return k


def poly(X: np.ndarray) -> np.ndarray:
    return np.hstack([np.ones((X.shape[0], 1)), X])


def _reflect(M: np.ndarray, v: np.ndarray, tau: float) -> np.ndarray:
    """(I - tau v v') M."""
    return M - tau * np.outer(v, v @ M)


@dataclass(frozen=True)
class Eigen:
    """The decomposition of one training set, reusable for any smoothing value."""

    X: np.ndarray
    K: np.ndarray
    refl: tuple[tuple[np.ndarray, float], ...]
    R: np.ndarray
    ev: np.ndarray
    G: np.ndarray

    @classmethod
    def build(cls, X: np.ndarray, vectors: bool = True) -> Eigen:
        n, m = X.shape[0], X.shape[1] + 1
        K = kernel(X, X)
        (qr, tau), R = linalg.qr(poly(X), mode="raw")
        refl = []
        for j in range(m):
            v = np.zeros(n)
            v[j] = 1.0
            v[j + 1 :] = qr[j + 1 :, j]
            refl.append((v, float(tau[j])))
        M = K.copy()
        for v, t in refl:  # M <- H M H, H = I - t v v' symmetric
            M = _reflect(M, v, t)
            M = _reflect(M.T, v, t).T
        M2 = M[m:, m:]
        M2 = (M2 + M2.T) / 2
        if not vectors:
            ev = linalg.eigvalsh(M2, check_finite=False)
            return cls(X, K, tuple(refl), np.triu(R[:m, :m]), ev, np.empty((0, 0)))
        ev, U = linalg.eigh(M2, check_finite=False)
        G = np.vstack([np.zeros((m, U.shape[1])), U])
        for v, t in reversed(refl):
            G = _reflect(G, v, t)
        return cls(X, K, tuple(refl), np.triu(R[:m, :m]), ev, G)

    @property
    def n_poly(self) -> int:
        return self.X.shape[1] + 1

    def df(self, lams: np.ndarray) -> np.ndarray:
        ev = np.maximum(self.ev, 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            frac = np.where(
                ev[None, :] + lams[:, None] > 0, ev[None, :] / (ev[None, :] + lams[:, None]), 1.0
            )
        return self.n_poly + frac.sum(axis=1)

    def coefficients(self, y: np.ndarray, lams: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Kernel weights C (n, L) and polynomial coefficients B (p + 1, L) for each lam."""
        z = self.G.T @ y
        with np.errstate(divide="ignore", invalid="ignore"):
            C = self.G @ (z[:, None] / (self.ev[:, None] + lams[None, :]))
        rest = y[:, None] - self.K @ C
        for v, t in self.refl:
            rest = _reflect(rest, v, t)
        B = linalg.solve_triangular(self.R, rest[: self.n_poly])
        return C, B

    def predict(self, C: np.ndarray, B: np.ndarray, Xq: np.ndarray) -> np.ndarray:
        return kernel(Xq, self.X) @ C + poly(Xq) @ B

    def loo_residuals(self, C: np.ndarray, lams: np.ndarray) -> np.ndarray:
        """Leave-one-out residuals (n, L): c_i / sum_j G_ij^2 / (ev_j + lam)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return C / ((self.G**2) @ (1.0 / (self.ev[:, None] + lams[None, :])))


def lam_for_df(ev: np.ndarray, n_poly: int, targets: np.ndarray) -> np.ndarray:
    """Smoothing values whose effective df (from eigenvalues ``ev``) equal ``targets``."""
    ev = np.maximum(ev, 0.0)
    top = ev.max() if ev.size and ev.max() > 0 else 1.0
    lo = np.full(targets.shape, np.log(top) - 60.0)
    hi = np.full(targets.shape, np.log(top) + 30.0)
    for _ in range(80):
        mid = (lo + hi) / 2
        df = n_poly + (ev[None, :] / (ev[None, :] + np.exp(mid)[:, None])).sum(axis=1)
        too_rough = df > targets
        lo = np.where(too_rough, mid, lo)
        hi = np.where(too_rough, hi, mid)
    return np.exp((lo + hi) / 2)


def solve_direct(X: np.ndarray, y: np.ndarray, lam: float) -> tuple[np.ndarray, np.ndarray]:
    """Kernel weights c and polynomial coefficients b from the augmented system."""
    n, m = X.shape[0], X.shape[1] + 1
    A = np.zeros((n + m, n + m))
    A[:n, :n] = kernel(X, X) + lam * np.eye(n)
    P = poly(X)
    A[:n, n:] = P
    A[n:, :n] = P.T
    with warnings.catch_warnings():
        warnings.simplefilter("error", linalg.LinAlgWarning)
        try:
            sol = linalg.solve(A, np.concatenate([y, np.zeros(m)]), assume_a="sym")
        except linalg.LinAlgWarning as exc:
            raise linalg.LinAlgError(str(exc)) from None
    return sol[:n], sol[n:]
