"""Thin-plate smoothing spline in two or three variables, with a whole smoothing path from one
factorization per training set.

f(x) = sum_i c_i phi(|x - x_i|) + b_0 + b' x with phi(r) = r^2 log r, and
[[K + lam I, P], [P', 0]] [c; b] = [y; 0]: the system solved by
``scipy.interpolate.RBFInterpolator(kernel="thin_plate_spline", smoothing=lam)``.

Write P = [Q1 Q2] [R; 0]. Then c = Q2 d with (M + lam I) d = Q2' y, M = Q2' K Q2. One
symmetric eigendecomposition M = U diag(ev) U' gives d for every lam by a matrix-vector
product, the effective degrees of freedom df(lam) = (p + 1) + sum ev / (ev + lam), and the
leave-one-out residuals c_i / sum_j G_ij^2 / (ev_j + lam) with G = Q2 U. Where eigenvectors
are not needed, a reduction of M to tridiagonal form serves every lam at one O(n) solve each.

With row weights w_i the criterion is sum_i w_i (y_i - f(x_i))^2 + lam J(f), whose system is
[[K + lam W^-1, P], [P', 0]] [c; b] = [y; 0] (RBFInterpolator with ``smoothing = lam / w``).
With D = W^(1/2) and c = D c~ it is the unweighted system of K~ = D K D, P~ = D P, y~ = D y:
the decompositions below are built on those, and report c and fits in the original units.
The leave-one-out residual of row i is the scaled one divided by sqrt(w_i).

Kernels trust their inputs: P has full column rank, weights are positive.

References
----------
Wahba, G. (1990). *Spline Models for Observational Data*, SIAM, chapters 2 and 4.
Green & Silverman (1994), *Nonparametric Regression and Generalized Linear Models*, ch. 7.
Golub & Van Loan (2013), *Matrix Computations*, 4th ed., sections 5.1 (block reflectors) and
8.3 (tridiagonal reduction).
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import linalg
from scipy.linalg import blas, lapack
from scipy.spatial.distance import cdist
from scipy.special import xlogy


def kernel(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """phi(|a - b|) = r^2 log r = (1/2) r^2 log r^2, with phi(0) = 0."""
    d2 = cdist(A, B, "sqeuclidean")
    return 0.5 * xlogy(d2, d2)


def poly(X: np.ndarray) -> np.ndarray:
    return np.hstack([np.ones((X.shape[0], 1)), X])


class Decomposition:
    """What one training set shares for every smoothing value.

    P = [1, X] = Q [R; 0] with Q = I - V T V' (a block of Householder reflectors), and
    M = Q2' K Q2, the trailing block of Q' K Q, formed by rank-2k updates of K.
    Subclasses factor M: :class:`Eigen` fully (needed for leave-one-out), :class:`Tridiagonal`
    only to tridiagonal form (enough for K-fold predictions and GCV, at a third of the cost).
    """

    def __init__(self, X: np.ndarray, w: np.ndarray | None = None) -> None:
        k = X.shape[1] + 1
        self.X = X
        self.w = np.ones(X.shape[0]) if w is None else w
        self.sw = np.sqrt(self.w)
        self.K = kernel(X, X)
        P = poly(X)
        if w is not None:  # the scaled system K~ = D K D, P~ = D P
            self.K *= self.sw[:, None] * self.sw[None, :]
            P *= self.sw[:, None]
        (qr, tau), R = linalg.qr(P, mode="raw")
        V = np.tril(qr[:, :k], -1)
        V[np.arange(k), np.arange(k)] = 1.0
        T = np.zeros((k, k))
        for i in range(k):  # forward block reflector, as LAPACK's dlarft
            T[i, i] = tau[i]
            T[:i, i] = -tau[i] * T[:i, :i] @ (V[:, :i].T @ V[:, i])
        self.V, self.T, self.R = V, T, np.triu(R[:k, :k])
        Y = self.K @ V
        Z = Y @ T - 0.5 * V @ (T.T @ (V.T @ Y) @ T)
        # Only the lower triangle of M is formed and read (dsytrd and eigh use lower=True).
        self.M = blas.dsyr2k(-1.0, Z[k:], V[k:], beta=1.0, c=self.K[k:, k:], lower=1)
        self.n_poly = k

    def q2t(self, Y: np.ndarray) -> np.ndarray:
        """Q2' Y."""
        return (Y - self.V @ (self.T.T @ (self.V.T @ Y)))[self.n_poly :]

    def q2(self, Z: np.ndarray) -> np.ndarray:
        """Q2 Z."""
        k = self.n_poly
        top = np.zeros((k, *Z.shape[1:]))
        return np.concatenate([top, Z]) - self.V @ (self.T @ (self.V[k:].T @ Z))

    def q1t(self, Y: np.ndarray) -> np.ndarray:
        """Q1' Y."""
        return (Y - self.V @ (self.T.T @ (self.V.T @ Y)))[: self.n_poly]

    def solve(self, z: np.ndarray, lams: np.ndarray) -> np.ndarray:
        """(M + lam I)^-1 z for each lam, shape (n - p - 1, L)."""
        raise NotImplementedError

    def df(self, lams: np.ndarray) -> np.ndarray:
        ev = np.maximum(self.ev, 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            frac = np.where(
                ev[None, :] + lams[:, None] > 0, ev[None, :] / (ev[None, :] + lams[:, None]), 1.0
            )
        return self.n_poly + frac.sum(axis=1)

    def coefficients(self, y: np.ndarray, lams: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Kernel weights C (n, L) and polynomial coefficients B (p + 1, L) for each lam."""
        yw = y * self.sw
        C = self.q2(self.solve(self.q2t(yw), lams))
        # A failed solve leaves NaN in C; it propagates, and the candidate is left unscored.
        B = linalg.solve_triangular(self.R, self.q1t(yw[:, None] - self.K @ C), check_finite=False)
        return C * self.sw[:, None], B

    def predict(self, C: np.ndarray, B: np.ndarray, Xq: np.ndarray) -> np.ndarray:
        return kernel(Xq, self.X) @ C + poly(Xq) @ B


class Eigen(Decomposition):
    """M = U diag(ev) U'; also gives the smoother diagonal, hence leave-one-out residuals."""

    def __init__(self, X: np.ndarray, w: np.ndarray | None = None) -> None:
        super().__init__(X, w)
        self.ev, self.U = linalg.eigh(self.M, driver="evd", check_finite=False)
        self.G = self.q2(self.U)

    def solve(self, z, lams):
        with np.errstate(divide="ignore", invalid="ignore"):
            return self.U @ ((self.U.T @ z)[:, None] / (self.ev[:, None] + lams[None, :]))

    def loo_residuals(self, C: np.ndarray, lams: np.ndarray) -> np.ndarray:
        """Leave-one-out residuals (n, L): c_i / sum_j G_ij^2 / (ev_j + lam); with weights,
        c~_i / sqrt(w_i) over the same sum, c~ = c / sqrt(w) the scaled system's weights."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return C / (
                self.w[:, None] * ((self.G**2) @ (1.0 / (self.ev[:, None] + lams[None, :])))
            )


class Tridiagonal(Decomposition):
    """M = H S H' with S tridiagonal (LAPACK dsytrd): one O(n) solve per smoothing value."""

    def __init__(self, X: np.ndarray, w: np.ndarray | None = None) -> None:
        super().__init__(X, w)
        lwork = int(lapack.dsytrd_lwork(self.M.shape[0], lower=1)[0])
        refl, self.d, self.e, self.tau, info = lapack.dsytrd(self.M, lower=1, lwork=lwork)
        if info != 0:  # pragma: no cover - LAPACK argument errors only
            raise linalg.LinAlgError(f"dsytrd failed ({info})")
        self.refl = refl
        self.ev = lapack.dsterf(self.d, self.e)[0] if self.d.size > 1 else self.d.copy()

    def _apply(self, Y: np.ndarray, transpose: bool) -> np.ndarray:
        """H' Y (transpose) or H Y, with H = H(1) ... H(m-1) from dsytrd's lower storage.

        H = diag(1, Q~), where Q~ holds the same reflectors in the layout of a QR
        factorization of the trailing block, so LAPACK's blocked dormqr applies it.
        """
        m = Y.shape[0]
        out = Y.copy()
        if m < 2:
            return out
        a = self.refl[1:, : m - 1]
        c = np.asfortranarray(Y[1:])
        lwork = max(1, c.shape[1]) * 64
        res, _, info = lapack.dormqr("L", "T" if transpose else "N", a, self.tau, c, lwork)
        if info != 0:  # pragma: no cover - LAPACK argument errors only
            raise linalg.LinAlgError(f"dormqr failed ({info})")
        out[1:] = res
        return out

    def solve(self, z, lams):
        w = self._apply(z[:, None], transpose=True)[:, 0]
        U = np.empty((w.size, lams.size))
        for j, lam in enumerate(lams):
            *_, x, info = lapack.dptsv(self.d + lam, self.e, w[:, None])
            U[:, j] = x[:, 0] if info == 0 else np.nan
        return self._apply(U, transpose=False)


def lam_for_df(ev: np.ndarray, n_poly: int, targets: np.ndarray) -> np.ndarray:
    """Smoothing values whose effective df (from eigenvalues ``ev``) equal ``targets``."""
    ev = np.maximum(ev, 0.0)
    top = ev.max() if ev.size and ev.max() > 0 else 1.0
    lo = np.full(targets.shape, np.log(top) - 23.0)  # lam >= 1e-10 of the largest eigenvalue
    hi = np.full(targets.shape, np.log(top) + 30.0)
    for _ in range(80):
        mid = (lo + hi) / 2
        df = n_poly + (ev[None, :] / (ev[None, :] + np.exp(mid)[:, None])).sum(axis=1)
        too_rough = df > targets
        lo = np.where(too_rough, mid, lo)
        hi = np.where(too_rough, hi, mid)
    return np.exp((lo + hi) / 2)


def solve_direct(
    X: np.ndarray, y: np.ndarray, lam: float, w: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Kernel weights c and polynomial coefficients b from the augmented system (with row
    weights w: the smoothing term lam / w_i on the diagonal)."""
    n, m = X.shape[0], X.shape[1] + 1
    A = np.zeros((n + m, n + m))
    A[:n, :n] = kernel(X, X)
    A[np.arange(n), np.arange(n)] += lam if w is None else lam / w
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
