"""Low-rank thin-plate smoothing: a penalized thin-plate regression spline on m knots, for
more rows than a dense n x n solve affords.

f(x) = sum_j c_j phi(|x - kappa_j|) + b_0 + b' x over knots kappa_1..m, with phi(r) = r^2 log r
and the side condition P_kappa' c = 0 (P_kappa = [1, kappa]), minimizing

    sum_i w_i (y_i - f(x_i))^2 + lam c' K_kappa c,        K_kappa = [phi(|kappa_j - kappa_l|)],

the thin-plate penalty of f restricted to the span of the knots' kernel functions (Ruppert,
Wand & Carroll 2003, *Semiparametric Regression*, section 13.4). With a knot at every row it
is the exact thin-plate smoothing spline (its minimizer lies in that span), the system of
``RBFInterpolator(kernel="thin_plate_spline", smoothing=lam / w)``.

Basis. P_kappa = Q [R; 0]; c = Q2 d removes the side condition, and the penalty becomes
d' Omega d with Omega = Q2' K_kappa Q2, positive definite for distinct knots that span the
space. Its eigendecomposition Omega = V diag(s) V' whitens it: d = V diag(s^-1/2) u, so the
penalty is lam |u|^2 and the design is A = [P(x), K(x, kappa) T] with T = Q2 V diag(s^-1/2).
Directions with s below RANK_TOL of the largest (knots that nearly coincide) are dropped:
``rank`` counts the columns kept, at most m.

Path. Rows enter through the R factor of the weighted design [sqrt(w) A, sqrt(w) y]. With
R = [[R11, R12, c1], [0, R22, c2], [., ., .]] and R22 = U diag(S) V2' (an SVD),
u(lam) = V2 diag(S / (S^2 + lam)) U' c2 and b(lam) = R11^-1 (c1 - R12 u): every lam from one
factorization, df(lam) = (p + 1) + sum S^2 / (S^2 + lam). For K-fold the R factor of each
fold's rows is computed once; a training set's is the R factor of the other folds' R
factors stacked (O(K m^3) per training set instead of O(n m^2)).

Knots. The rule (:func:`choose_knots`): greedy maximin (farthest-point) selection among the
distinct scaled rows, starting from the row nearest their mean; at each step the row
farthest from every knot so far joins, ties going to the first in the rows' order (sorted
by content, so the choice does not depend on the order rows were sent). It is deterministic
and space-filling: no row is farther from a knot than the smallest distance between two
knots (Gonzalez 1985). The knots depend on the feature values only, never the targets, and
are chosen once from all rows and shared by the folds (as the additive basis is).

Posterior. The same criterion is the posterior mode of f with b flat and u ~ N(0, sigma^2 /
lam I); the posterior variance of f(x0) in units of sigma^2 is a0' (A'WA + lam J)^-1 a0
(J = diag(0, I); Ruppert, Wand & Carroll 2003, section 6.4), which equals A_ii / w_i at a
row, as the exact spline's does.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import linalg

from nearwise.core.budget import checkpoint
from nearwise.core.methods.thinplate import kernel, poly

#: Rows above which the thin-plate spline is fitted on knots instead of by the exact solve.
EXACT_ROWS = 3000
#: Knots by number of features past EXACT_ROWS (fewer when fewer distinct rows).
KNOTS = {2: 400, 3: 600}
#: Eigenvalues of the whitened penalty below this share of the largest are dropped.
RANK_TOL = 1e-13
#: Rows per block when the design is built or applied (bounds the kernel blocks in memory).
BLOCK_CELLS = 2_000_000
KNOT_RULE = (
    "greedy maximin (farthest-point) selection among the distinct scaled rows, starting from "
    "the row nearest their mean"
)


def knot_count(distinct: int, p: int) -> int:
    """The knots the low-rank fit uses: KNOTS[p], or every distinct row when fewer."""
    return min(distinct, KNOTS[min(max(p, 2), 3)])


def choose_knots(Z: np.ndarray, m: int) -> np.ndarray:
    """Indices of m rows of Z chosen by greedy maximin (see the module notes); fewer when Z
    holds fewer than m distinct rows."""
    n = Z.shape[0]
    m = min(m, n)
    d2 = np.sum((Z - Z.mean(axis=0)) ** 2, axis=1)
    first = int(np.argmin(d2))
    chosen = np.empty(m, dtype=np.intp)
    chosen[0] = first
    near = np.sum((Z - Z[first]) ** 2, axis=1)
    for j in range(1, m):
        if j % 256 == 0:
            checkpoint()
        nxt = int(np.argmax(near))
        if near[nxt] <= 0.0:  # every row coincides with a knot
            return chosen[:j]
        chosen[j] = nxt
        np.minimum(near, np.sum((Z - Z[nxt]) ** 2, axis=1), out=near)
    return chosen


class Basis:
    """The whitened thin-plate basis of a set of knots (scaled features)."""

    def __init__(self, knots: np.ndarray) -> None:
        self.knots = knots
        m, k = knots.shape[0], knots.shape[1] + 1
        Q, _ = linalg.qr(poly(knots))
        Q2 = Q[:, k:]
        omega = Q2.T @ kernel(knots, knots) @ Q2
        s, V = linalg.eigh(omega, check_finite=False)
        keep = s > RANK_TOL * max(s[-1], np.finfo(float).tiny)
        self.T = Q2 @ (V[:, keep] / np.sqrt(s[keep]))  # m x (rank - k): u -> knot weights c
        self.n_poly = k
        self.rank = k + int(keep.sum())
        self.m = m

    def design(self, Z: np.ndarray) -> np.ndarray:
        """A = [P(Z), K(Z, kappa) T], rows x rank."""
        out = np.empty((Z.shape[0], self.rank))
        step = max(1, BLOCK_CELLS // max(self.m, 1))
        for s in range(0, Z.shape[0], step):
            checkpoint()
            Zb = Z[s : s + step]
            out[s : s + step, : self.n_poly] = poly(Zb)
            out[s : s + step, self.n_poly :] = kernel(Zb, self.knots) @ self.T
        return out

    def predict(self, C: np.ndarray, B: np.ndarray, Zq: np.ndarray) -> np.ndarray:
        """f at Zq for knot weights C (m, L) and polynomial coefficients B (k, L), in blocks
        of about BLOCK_CELLS kernel entries."""
        out = np.empty((Zq.shape[0], C.shape[1]))
        step = max(1, BLOCK_CELLS // max(self.m, 1))
        for s in range(0, Zq.shape[0], step):
            checkpoint()
            Zb = Zq[s : s + step]
            out[s : s + step] = kernel(Zb, self.knots) @ C + poly(Zb) @ B
        return out


def r_factor(A: np.ndarray, y: np.ndarray, sw: np.ndarray | None) -> np.ndarray:
    """The R factor of [sqrt(w) A, sqrt(w) y] (at most rank + 1 rows)."""
    Ay = np.column_stack([A, y])
    if sw is not None:
        Ay *= sw[:, None]
    return linalg.qr(Ay, mode="r", overwrite_a=True, check_finite=False)[0][: Ay.shape[1]]


def stack(parts: list[np.ndarray]) -> np.ndarray:
    """The R factor of several stacked R factors (that of their rows together)."""
    M = np.vstack(parts)
    return linalg.qr(M, mode="r", overwrite_a=True, check_finite=False)[0][: M.shape[1]]


@dataclass(frozen=True)
class Path:
    """Every smoothing value of one training set, from its R factor."""

    basis: Basis
    R11: np.ndarray
    R12: np.ndarray
    c1: np.ndarray
    U: np.ndarray
    S: np.ndarray
    V2: np.ndarray
    c2: np.ndarray  # U' times the rows' projected targets
    R: np.ndarray  # the square R factor of the weighted design (rank x rank)
    _inv: np.ndarray | None = field(default=None, repr=False, compare=False)

    @classmethod
    def of(cls, basis: Basis, R: np.ndarray) -> Path:
        r, k = basis.rank, basis.n_poly
        full = np.zeros((r + 1, r + 1))
        full[: R.shape[0]] = R[: r + 1]
        Rd = full[:r, :r]
        U, S, V2t = linalg.svd(Rd[k:, k:], check_finite=False, lapack_driver="gesdd")
        return cls(
            basis,
            Rd[:k, :k],
            Rd[:k, k:],
            full[:k, r],
            U,
            S,
            V2t.T,
            U.T @ full[k:r, r],
            Rd,
        )

    def df(self, lams: np.ndarray) -> np.ndarray:
        S2 = self.S**2
        with np.errstate(divide="ignore", invalid="ignore"):
            frac = np.where(
                S2[None, :] + lams[:, None] > 0, S2[None, :] / (S2[None, :] + lams[:, None]), 1.0
            )
        return self.basis.n_poly + frac.sum(axis=1)

    def whitened(self, lams: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """u (rank - k, L) and b (k, L) for each lam."""
        with np.errstate(divide="ignore", invalid="ignore"):
            shrink = self.S[:, None] / (self.S[:, None] ** 2 + lams[None, :])
        u = self.V2 @ (shrink * self.c2[:, None])
        b = linalg.solve_triangular(self.R11, self.c1[:, None] - self.R12 @ u, check_finite=False)
        return u, b

    def coefficients(self, lams: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Knot weights C (m, L) and polynomial coefficients B (k, L) for each lam."""
        u, b = self.whitened(lams)
        return self.basis.T @ u, b

    def g(self, A: np.ndarray) -> np.ndarray:
        """R^-T a for each row a of A (rank x rows), its trailing part rotated by U', as one
        product with the triangular inverse (cheaper than a triangular solve per row block)."""
        if self._inv is None:
            H = linalg.solve_triangular(self.R, np.eye(self.R.shape[0]), check_finite=False)
            k = self.basis.n_poly
            H[:, k:] = H[:, k:] @ self.U
            object.__setattr__(self, "_inv", H)
        return (A @ self._inv).T

    def _shrink(self, lam: float) -> np.ndarray:
        S2 = self.S**2
        with np.errstate(divide="ignore", invalid="ignore"):
            tail = np.where(S2 + lam > 0, S2 / (S2 + lam), 1.0)
        return np.concatenate([np.ones(self.basis.n_poly), tail])

    def variance(self, A0: np.ndarray, lam: float) -> np.ndarray:
        """a0' (A'WA + lam J)^-1 a0 for each row a0 of A0: the posterior variance of f in
        units of sigma^2 (the leverage over w_i at a row)."""
        G = self.g(A0)
        return (G**2 * self._shrink(lam)[:, None]).sum(axis=0)

    def leverages(self, A: np.ndarray, sw: np.ndarray | None, lams: np.ndarray) -> np.ndarray:
        """Diagonal of the smoother matrix, (L, rows), for the rows of A (unweighted design)
        with sqrt-weights sw."""
        Aw = A if sw is None else A * sw[:, None]
        G2 = self.g(Aw) ** 2
        k = self.basis.n_poly
        S2 = self.S**2
        with np.errstate(divide="ignore", invalid="ignore"):
            frac = np.where(
                S2[None, :] + lams[:, None] > 0, S2[None, :] / (S2[None, :] + lams[:, None]), 1.0
            )
        return G2[:k].sum(axis=0)[None, :] + frac @ G2[k:]

    def weights(self, A0: np.ndarray, G: np.ndarray, w: np.ndarray | None, lam: float):
        """Smoother weights (q, rows): f(x0) = sum_i omega_i(x0) y_i at the rows of A0, for
        rows whose ``g`` (of their unweighted design) is G."""
        G0 = self.g(A0) * self._shrink(lam)[:, None]
        out = G0.T @ G
        return out if w is None else out * w[None, :]
