"""Polynomial bases on standardised features, rank-revealing QR, and raw-unit expansion.

The basis is built on standardised features (for conditioning) with monomials ordered by
total degree, so the design of each degree is a leading block of columns of the top-degree
design: one Householder QR gives every nested fit. Coefficients are reported in the original
units by expanding the standardised monomials.

References
----------
Golub, G. H. & Van Loan, C. F. (2013). *Matrix Computations*, 4th ed., section 5.3 (least
squares by QR).
Montgomery, D. C., Peck, E. A. & Vining, G. G. (2012). *Introduction to Linear Regression
Analysis*, 5th ed., Wiley (t tests on coefficients; leverage).
"""

from __future__ import annotations

import itertools
from math import comb

import numpy as np

from nearwise.core.data import Scaler
from nearwise.core.results import Notice

ALIAS_TOL = 1e-9


def monomials(p: int, degree: int, interactions: bool) -> list[tuple[int, ...]]:
    """Exponent vectors ordered by total degree (then as ``combinations_with_replacement``)."""
    out = [tuple([0] * p)]
    for deg in range(1, degree + 1):
        combos = (
            itertools.combinations_with_replacement(range(p), deg)
            if interactions
            else ((j,) * deg for j in range(p))
        )
        for c in combos:
            e = [0] * p
            for j in c:
                e[j] += 1
            out.append(tuple(e))
    return out


def design(Z: np.ndarray, terms: list[tuple[int, ...]]) -> np.ndarray:
    """Columns prod_j Z[:, j] ** e_j for each exponent vector e."""
    D = np.ones((Z.shape[0], len(terms)))
    for c, e in enumerate(terms):
        for j, power in enumerate(e):
            if power:
                D[:, c] *= Z[:, j] ** power
    return D


def term_name(e: tuple[int, ...], names: tuple[str, ...]) -> str:
    parts = [n if k == 1 else f"{n}^{k}" for n, k in zip(names, e, strict=True) if k]
    return "*".join(parts) if parts else "intercept"


def qr_kept(D: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Reduced QR of ``D`` after dropping columns that lie in the span of earlier ones.

    Returns ``(Q, R, kept)`` where ``kept`` indexes the columns of ``D`` that were kept, in
    order, so the leading blocks of ``Q`` and ``R`` give the fit on any leading set of columns.
    """
    Q, R = np.linalg.qr(D)
    r = min(D.shape)
    norms = np.linalg.norm(D, axis=0)[:r]
    # A column whose R_jj is tiny against its own norm lies in the span of the earlier ones;
    # columns beyond the number of rows always do.
    kept = np.flatnonzero(np.abs(np.diag(R)[:r]) > ALIAS_TOL * np.where(norms > 0, norms, 1.0))
    if kept.size < D.shape[1]:
        Q, R = np.linalg.qr(D[:, kept])
    return Q, R, kept


def weighted_scaler(X: np.ndarray, w: np.ndarray | None) -> Scaler:
    """Standardization by the weighted mean and the weighted sd (ddof 0), as scikit-learn's
    ``StandardScaler().fit(X, sample_weight=w)``; ``Scaler.fit(X, "standard")`` when ``w`` is
    None. A column whose spread is rounding noise is divided by 1, as in :class:`Scaler`."""
    if w is None:
        return Scaler.fit(X, "standard")
    shift = np.average(X, axis=0, weights=w)
    scale = np.sqrt(np.average((X - shift) ** 2, axis=0, weights=w))
    noise = 64 * np.finfo(float).eps * np.max(np.abs(X), axis=0) if X.size else 0.0
    return Scaler(shift, np.where(scale > noise, scale, 1.0))


def weighted_sums(y: np.ndarray, fitted: np.ndarray, w: np.ndarray | None) -> tuple[float, float]:
    """The residual and the total sum of squares about the mean, both weighted by ``w``
    (R^2 = 1 - RSS / TSS, as statsmodels' WLS reports it)."""
    wt = np.ones_like(y) if w is None else w
    ybar = float(np.sum(wt * y) / np.sum(wt))
    return float(np.sum(wt * (y - fitted) ** 2)), float(np.sum(wt * (y - ybar) ** 2))


def raw_transform(terms: list[tuple[int, ...]], shift: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """T with raw-monomial coefficients = T @ standardised-monomial coefficients.

    z_j = (x_j - m_j) / s_j, so z^b = prod_j s_j^-b_j sum_{a_j <= b_j} C(b_j, a_j) x_j^a_j
    (-m_j)^(b_j - a_j); the monomial set is closed under a <= b, so T maps it into itself.
    """
    index = {e: i for i, e in enumerate(terms)}
    T = np.zeros((len(terms), len(terms)))
    for b_i, b in enumerate(terms):
        for a in itertools.product(*[range(bj + 1) for bj in b]):
            c = 1.0
            for aj, bj, m, s in zip(a, b, shift, scale, strict=True):
                c *= comb(bj, aj) * (-m) ** (bj - aj) / s**bj
            T[index[a], b_i] += c
    return T


def row_norms(A: np.ndarray) -> np.ndarray:
    """Euclidean norm of each row without overflow in the squares."""
    big = np.max(np.abs(A), axis=1)
    safe = np.where(big > 0, big, 1.0)
    return big * np.sqrt(np.sum((A / safe[:, None]) ** 2, axis=1))


def deletion_residuals(y: np.ndarray, fitted: np.ndarray, h: np.ndarray) -> np.ndarray:
    """Leave-one-out residuals e_i / (1 - h_i) of a least-squares-type fit with leverages h;
    NaN where h_i = 1 (the row alone determines a term)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        out = (y - fitted) / (1.0 - h)
    return np.where(h < 1 - 1e-10, out, np.nan)


def high_leverage(root_query: np.ndarray, h_train: np.ndarray, how: str) -> list[Notice]:
    """The ``high_leverage`` notice: query rows whose leverage (given as its square root)
    exceeds the largest training leverage, the hidden extrapolation of Montgomery, Peck &
    Vining (2012, section 3.8). ``how`` names the leverage in the message."""
    h_max = float(np.max(h_train))
    rows = np.flatnonzero(root_query > np.sqrt(h_max) * (1 + 1e-9))
    if not rows.size:
        return []
    return [
        Notice(
            "high_leverage",
            f"{rows.size} row(s) have leverage {how} above the largest among the training "
            f"rows ({h_max:.3g}): the polynomial extrapolates there, even if each feature lies "
            "inside its range.",
            tuple(int(i) for i in rows),
        )
    ]
