"""The basis of an additive model: one natural cubic regression spline per feature.

Each feature x_j is mapped to u = (x - lo) / span with lo and span from the rows the basis is
built on, so the arithmetic is the same whatever the units. K knots sit at evenly spaced
quantiles of the distinct u values (knots closer than ``MIN_GAP`` are merged). On those knots
the natural cubic splines form a K-dimensional space, parametrized by the values g at the knots;
their second derivatives there are gamma = F g (zero at both ends), and the roughness penalty
is the integral of f''(u)^2 du = g' S g with S = Q R^-1 Q' (the matrices of the Reinsch
algorithm, Green & Silverman 1994, section 2.1). A natural spline is linear beyond its end
knots, so predictions extrapolate linearly, as the one-feature smoothing spline does.

The columns of feature j are its centered u (the unpenalized straight line) and K - 2 "wiggly"
columns: the eigenvectors of S with positive eigenvalues e, scaled by e^(-1/2), so that the
penalty on their coefficients b is exactly b'b = integral of f''(u)^2 du. Every column is
centered over the rows of the basis (the usual sum-to-zero identifiability constraint of
additive models; Wood 2017, section 5.4.1), so an intercept plus the columns of all features
describe alpha + sum_j f_j(x_j).

The design of many rows is reduced block by block to the triangular factor of its QR
decomposition, with y appended as a last column (Golub & Van Loan 2013, section 5.3):
R of a union of row sets is the R of the stacked R factors, so every training fold and the
whole data set are reduced from one pass over the rows.

References
----------
Green, P. J. & Silverman, B. W. (1994). *Nonparametric Regression and Generalized Linear
Models*, Chapman & Hall, sections 2.1-2.3.
Wood, S. N. (2017). *Generalized Additive Models: An Introduction with R*, 2nd ed., CRC,
sections 5.3.1 (cubic regression splines) and 5.4.1 (identifiability constraints).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import linalg

from nearwise.core.categories import Categories

DEFAULT_KNOTS = 20
WIGGLY_BUDGET = 240  # default: about this many penalized columns over all features
MIN_KNOTS_MANY = 4  # default knots per feature however many features there are
MIN_GAP = 1e-3  # knots closer than this share of the range are merged
BLOCK = 4096  # rows per block when reducing or evaluating a design


def default_knots(p: int) -> int:
    """Knots per feature when not given: 20, fewer past 12 features (about 240 penalized
    columns in all, at least 4 knots each) so that each smoothing evaluation stays cheap."""
    return int(min(DEFAULT_KNOTS, max(MIN_KNOTS_MANY, 2 + WIGGLY_BUDGET // p)))


def place_knots(u: np.ndarray, k: int) -> np.ndarray:
    """At most k knots at evenly spaced quantiles of the distinct values of u (in [0, 1]),
    always both ends, none closer than MIN_GAP to the previous one."""
    t = np.unique(u)
    if t.size <= 2 or k <= 2:
        return t[[0, -1]] if t.size >= 2 and k >= 2 else t[:1]
    idx = np.unique(np.rint(np.linspace(0, t.size - 1, min(k, t.size))).astype(int))
    kept = [t[idx[0]]]
    for v in t[idx[1:]]:
        if v - kept[-1] >= MIN_GAP:
            kept.append(v)
    if kept[-1] != t[-1]:  # the last knot was merged away: the end of the range replaces it
        kept[-1] = t[-1]
        if len(kept) > 2 and kept[-1] - kept[-2] < MIN_GAP:
            del kept[-2]
    return np.asarray(kept)


def reinsch(knots: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """F (K, K) with gamma = F g, and the penalty S (K, K) with integral f''^2 = g' S g."""
    k = knots.size
    F = np.zeros((k, k))
    if k < 3:
        return F, np.zeros((k, k))
    h = np.diff(knots)
    Qt = np.zeros((k - 2, k))
    i = np.arange(k - 2)
    Qt[i, i] = 1.0 / h[:-1]
    Qt[i, i + 1] = -1.0 / h[:-1] - 1.0 / h[1:]
    Qt[i, i + 2] = 1.0 / h[1:]
    R = np.diag((h[:-1] + h[1:]) / 3.0)
    R[i[:-1], i[:-1] + 1] = R[i[:-1] + 1, i[:-1]] = h[1:-1] / 6.0
    F[1:-1] = linalg.solve(R, Qt, assume_a="pos")
    return F, Qt.T @ F[1:-1]


@dataclass(frozen=True)
class FeatureBasis:
    """One feature's natural cubic spline columns (see the module notes)."""

    lo: float
    span: float
    knots: np.ndarray  # in u
    F: np.ndarray
    wiggly: np.ndarray  # (K, q): knot values of the wiggly functions, penalty identity
    u_mean: float
    w_mean: np.ndarray  # (q,)

    @property
    def q(self) -> int:
        return int(self.wiggly.shape[1])

    @property
    def linear(self) -> bool:
        return self.knots.size >= 2

    @classmethod
    def build(cls, x: np.ndarray, k: int) -> FeatureBasis:
        lo, hi = float(x.min()), float(x.max())
        span = hi - lo if hi > lo else 1.0
        u = (x - lo) / span
        knots = place_knots(u, k)
        F, S = reinsch(knots)
        if knots.size >= 3:
            e, E = linalg.eigh(S)
            wiggly = E[:, 2:] / np.sqrt(e[2:])  # the two null directions (1, u) come first
        else:
            wiggly = np.zeros((knots.size, 0))
        raw = cls(lo, span, knots, F, wiggly, 0.0, np.zeros(wiggly.shape[1]))
        lin, W = raw.columns(x)
        return cls(lo, span, knots, F, wiggly, float(lin.mean()), W.mean(axis=0))

    def spline(self, u: np.ndarray, G: np.ndarray) -> np.ndarray:
        """(rows, c): the natural splines with knot values G (K, c) at u. On [t_i, t_i+1],
        with d = u - t_i, f = g_i + s_i d + gamma_i d^2 / 2 + (gamma_i+1 - gamma_i) d^3 / 6h
        (Green & Silverman 1994, section 2.1.2); beyond the end knots, the end tangents."""
        t, k = self.knots, self.knots.size
        if k == 1:
            return np.broadcast_to(G[0], (u.size, G.shape[1])).copy()
        Gam = self.F @ G
        h = np.diff(t)[:, None]
        slope = (G[1:] - G[:-1]) / h - h * (2 * Gam[:-1] + Gam[1:]) / 6.0
        poly = np.stack([G[:-1], slope, Gam[:-1] / 2, (Gam[1:] - Gam[:-1]) / (6 * h)], axis=1)
        i = np.clip(np.searchsorted(t, u, side="right") - 1, 0, k - 2)
        d = np.clip(u - t[i], 0.0, h[i, 0])  # inside the knots; the ends below
        powers = np.column_stack([np.ones_like(d), d, d * d, d**3])
        out = np.einsum("rk,rkc->rc", powers, poly[i])
        below, above = u < t[0], u > t[-1]
        if below.any() or above.any():
            end_slope = slope[-1] + h[-1] * Gam[-2] / 2  # the tangent at the last knot
            out[below] = G[0] + (u[below] - t[0])[:, None] * slope[0]
            out[above] = G[-1] + (u[above] - t[-1])[:, None] * end_slope
        return out

    def columns(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The centered straight-line column and the centered wiggly columns at x."""
        u = (x - self.lo) / self.span
        W = self.spline(u, self.wiggly) if self.q else np.zeros((x.size, 0))
        return u - self.u_mean, W - self.w_mean


@dataclass(frozen=True)
class Basis:
    """The columns of every feature: [1, lines of the non-constant features, dummies of the
    categorical features, wiggly blocks].

    ``features`` holds one spline basis per numeric feature, ``columns`` the column of ``X``
    each is built on; ``cats`` (None without categorical features) gives the treatment-coded
    0/1 columns, unpenalized and not centered (the intercept is then the reference levels'
    mean, as in ``y ~ C(site) + s(x)``), appended to the straight lines.
    """

    features: tuple[FeatureBasis, ...]
    columns: tuple[int, ...] = ()
    cats: Categories | None = None

    @classmethod
    def build(cls, X: np.ndarray, knots: int, cats: Categories | None = None) -> Basis:
        cols = tuple(range(X.shape[1])) if cats is None else cats.numeric
        return cls(tuple(FeatureBasis.build(X[:, j], knots) for j in cols), cols, cats)

    @property
    def lines(self) -> list[int]:
        """Features with a straight-line column (more than one distinct value)."""
        return [j for j, f in enumerate(self.features) if f.linear]

    @property
    def dummies(self) -> int:
        return 0 if self.cats is None else self.cats.n_dummies

    @property
    def k(self) -> int:
        return 1 + len(self.lines) + self.dummies

    def column(self, j: int) -> int:
        """The column of ``X`` of numeric feature j."""
        return self.columns[j] if self.columns else j

    @property
    def q(self) -> int:
        return sum(f.q for f in self.features)

    @property
    def blocks(self) -> list[tuple[int, slice]]:
        """(feature, its wiggly columns) for the features that have any."""
        out, start = [], 0
        for j, f in enumerate(self.features):
            if f.q:
                out.append((j, slice(start, start + f.q)))
                start += f.q
        return out

    def design(self, X: np.ndarray, only: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """N (rows, k): intercept, lines and dummies; W (rows, q): wiggly columns. With
        ``only``, the columns of that one numeric feature (the others, the dummies and the
        intercept zero): its component."""
        m = X.shape[0]
        N = np.zeros((m, self.k))
        N[:, 0] = 1.0 if only is None else 0.0
        W = np.zeros((m, self.q))
        c, start = 1, 0
        for j, f in enumerate(self.features):
            if only is None or only == j:
                lin, Wj = f.columns(X[:, self.column(j)])
                if f.linear:
                    N[:, c] = lin
                W[:, start : start + f.q] = Wj
            c += f.linear
            start += f.q
        if self.cats is not None and only is None:
            N[:, c:] = self.cats.dummies(X)
        return N, W


def reduce_rows(
    basis: Basis,
    X: np.ndarray,
    y: np.ndarray,
    check: Callable[[], None],
    w: np.ndarray | None = None,
) -> np.ndarray:
    """R of the QR decomposition of [N, W, y] over the given rows, block by block; with row
    weights ``w``, of the rows times sqrt(w) (weighted least squares)."""
    parts = []
    for start in range(0, X.shape[0], BLOCK):
        check()
        N, W = basis.design(X[start : start + BLOCK])
        D = np.column_stack([N, W, y[start : start + BLOCK]])
        if w is not None:
            D *= np.sqrt(w[start : start + BLOCK])[:, None]
        parts.append(np.linalg.qr(D, mode="r"))
    return stack(parts)


def stack(parts: list[np.ndarray]) -> np.ndarray:
    """R of the union of row sets whose R factors are given."""
    if len(parts) == 1:
        return parts[0]
    return np.linalg.qr(np.vstack(parts), mode="r")


def evaluate(basis: Basis, X: np.ndarray, kept: np.ndarray, coef: np.ndarray) -> np.ndarray:
    """The fit at X for coefficients ``coef`` (kept N columns, then W; one column per fit)."""
    out = np.empty((X.shape[0], *coef.shape[1:]))
    k = kept.size
    for start in range(0, X.shape[0], BLOCK):
        N, W = basis.design(X[start : start + BLOCK])
        out[start : start + BLOCK] = N[:, kept] @ coef[:k] + W @ coef[k:]
    return out
