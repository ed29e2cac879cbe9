"""Least squares on a polynomial basis, with every degree scored from one QR per fold.

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
from dataclasses import dataclass
from math import comb
from typing import Any

import numpy as np
from scipy import linalg, stats

from nearwise.core.errors import InvalidValue, TooFewRows, Where
from nearwise.core.methods.base import Method, Param, PathResult
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
    norms = np.linalg.norm(D, axis=0)
    kept = np.flatnonzero(np.abs(np.diag(R)) > ALIAS_TOL * np.where(norms > 0, norms, 1.0))
    if kept.size < D.shape[1]:
        Q, R = np.linalg.qr(D[:, kept])
    return Q, R, kept


@dataclass(frozen=True)
class FoldLinear:
    """The coefficients of every degree on one training fold."""

    shift: np.ndarray
    scale: np.ndarray
    terms: list[tuple[int, ...]]
    betas: tuple[tuple[np.ndarray, np.ndarray], ...]  # (columns used, coefficients)

    def predict(self, Xq: np.ndarray, c: int) -> np.ndarray:
        cols, beta = self.betas[c]
        return design((Xq - self.shift) / self.scale, self.terms)[:, cols] @ beta


@dataclass
class FittedLinear:
    """A polynomial least-squares fit on all usable rows."""

    terms: list[tuple[int, ...]]
    shift: np.ndarray
    scale: np.ndarray
    beta: np.ndarray  # on the standardised basis
    R: np.ndarray
    sigma: float
    r2: float
    n: int
    fitted: np.ndarray
    df: float
    Q: np.ndarray
    y: np.ndarray

    def predict(self, Xq: np.ndarray) -> np.ndarray:
        return design((Xq - self.shift) / self.scale, self.terms) @ self.beta

    def _a(self, Xq: np.ndarray) -> np.ndarray:
        """R^-T d0 for each query row: then x0'(X'X)^-1 x0 = |a0|^2 and x0'(X'X)^-1 xi = a0'qi."""
        D0 = design((Xq - self.shift) / self.scale, self.terms)
        return linalg.solve_triangular(self.R, D0.T, trans="T").T

    def query_notices(self, Xq: np.ndarray) -> list[Notice]:
        """``high_leverage``: h0 = x0'(X'X)^-1 x0 above the largest training leverage, the
        hidden extrapolation of Montgomery, Peck & Vining (2012, section 3.8)."""
        h_max = float(np.max(np.sum(self.Q**2, axis=1)))
        rows = np.flatnonzero(self.leverage(Xq) > h_max * (1 + 1e-9))
        if not rows.size:
            return []
        return [
            Notice(
                "high_leverage",
                f"{rows.size} row(s) have leverage x0'(X'X)^-1 x0 above the largest among the "
                f"training rows ({h_max:.3g}): the polynomial extrapolates there, even if each "
                "feature lies inside its range.",
                tuple(int(i) for i in rows),
            )
        ]

    def leverage(self, Xq: np.ndarray) -> np.ndarray:
        """h0 = x0'(X'X)^-1 x0, by QR (never an inverse of X'X)."""
        return np.sum(self._a(Xq) ** 2, axis=1)

    def std_error(self, Xq: np.ndarray, sigma_cv: float) -> np.ndarray:
        """Standard error of the fitted mean: sigma sqrt(h0)."""
        return self.sigma * np.sqrt(self.leverage(Xq))

    def model_interval(self, Xq: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
        """Classical t interval for a new observation: f +/- t sigma sqrt(1 + h0)."""
        t = stats.t.ppf(0.5 + level / 2, self.n - len(self.terms))
        half = t * self.sigma * np.sqrt(1.0 + self.leverage(Xq))
        f = self.predict(Xq)
        return f - half, f + half

    def loo_residuals(self) -> np.ndarray:
        h = np.sum(self.Q**2, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            return (self.y - self.fitted) / (1.0 - h)

    def loo_predictions(self, Xq: np.ndarray):
        """mu_{-i}(x0) = mu(x0) - a0'q_i e_i / (1 - h_i): the deletion formula of least
        squares (Belsley, Kuh & Welsch 1980), for every training row i."""
        A = self._a(Xq)
        base = A @ (self.Q.T @ self.y)  # equals predict(Xq)
        step = self.loo_residuals()

        def block(rows: np.ndarray) -> np.ndarray:
            return base[rows, None] - (A[rows] @ self.Q.T) * step[None, :]

        return block

    def raw_transform(self) -> np.ndarray:
        """T with raw coefficients = T @ standardised coefficients (same monomial set)."""
        index = {e: i for i, e in enumerate(self.terms)}
        T = np.zeros((len(self.terms), len(self.terms)))
        for b_i, b in enumerate(self.terms):
            ranges = [range(bj + 1) for bj in b]
            for a in itertools.product(*ranges):
                c = 1.0
                for aj, bj, m, s in zip(a, b, self.shift, self.scale, strict=True):
                    c *= comb(bj, aj) * (-m) ** (bj - aj) / s**bj
                T[index[a], b_i] += c
        return T

    def notices(self) -> list:
        return []

    def summary(self, names: tuple[str, ...]) -> dict[str, Any]:
        T = self.raw_transform()
        est = T @ self.beta
        Rinv = linalg.solve_triangular(self.R, np.eye(self.R.shape[0]))
        cov_s = self.sigma**2 * (Rinv @ Rinv.T)
        se = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", T, cov_s, T), 0.0))
        dof = self.n - len(self.terms)
        with np.errstate(divide="ignore", invalid="ignore"):
            t = np.where(se > 0, est / se, np.nan)
        p = 2 * stats.t.sf(np.abs(t), dof)
        rows = []
        for i, e in enumerate(self.terms):
            rows.append(
                {
                    "name": term_name(e, names),
                    "estimate": float(est[i]),
                    "std_error": float(se[i]),
                    "t": None if np.isnan(t[i]) else float(t[i]),
                    "p_value": None if np.isnan(p[i]) else float(p[i]),
                }
            )
        return {"terms": rows, "sigma": self.sigma, "r2": self.r2, "residual_df": dof}


class Linear(Method):
    """Polynomial least squares."""

    name = "linear"
    summary = (
        "Least squares on a polynomial basis of the features, solved by QR. Larger "
        "degree is more flexible."
    )
    tuned = "degree"
    interval_kinds = ("cv_plus", "model")
    default_grid = "degree = 1, 2, 3 (degrees the data cannot determine are left out)"
    params = (
        Param(
            "degree",
            "integer",
            None,
            "total polynomial degree",
            low=1,
            high=5,
            tunable=True,
            simpler="smaller",
        ),
        Param(
            "interactions",
            "boolean",
            None,
            "include products of different features (default: true when degree > 1)",
        ),
    )
    std_error_doc = (
        "standard error of the fitted mean, sigma * sqrt(x0' (X'X)^-1 x0), "
        "computed from the QR factor R"
    )
    model_interval_doc = (
        "t interval for a new observation: f +/- t(n - p, (1 + level) / 2) sigma "
        "sqrt(1 + x0' (X'X)^-1 x0); exact when the polynomial is the true mean and the noise "
        "is normal with constant variance"
    )
    references = (
        "Montgomery, Peck & Vining (2012), Introduction to Linear Regression Analysis, 5th ed.",
    )

    def order(self, values):
        return sorted(values)

    def is_bound(self, value, folds):
        return value in (1, 5)

    def _terms(self, p: int, degree: int, settings) -> list[tuple[int, ...]]:
        inter = settings.get("interactions")
        return monomials(p, degree, True if inter is None else inter)

    def _standardise(self, X):
        shift = X.mean(axis=0)
        scale = X.std(axis=0)
        return shift, np.where(scale > 0, scale, 1.0)

    def candidates(self, X, y, folds, settings, grid, work=None):
        n, p = X.shape
        if "degree" in settings:
            values, source = [settings["degree"]], ("params", "degree")
        elif grid is not None:
            values, source = self.order(grid), ("grid", "degree")
        else:
            values, source = [1, 2, 3], None
        shift, scale = self._standardise(X)
        top = self._terms(p, max(values), settings)
        _, _, kept = qr_kept(design((X - shift) / scale, top))
        names = tuple((work or {}).get("features") or (f"x{j}" for j in range(p)))
        aliased = [j for j in range(len(top)) if j not in set(kept.tolist())]

        def undetermined(size: int) -> str:
            return ", ".join(term_name(top[j], names) for j in aliased if j < size)

        ok = []
        for d in values:
            size = len(self._terms(p, d, settings))
            full = np.count_nonzero(kept < size) == size
            if full and folds.min_train > size:
                ok.append(d)
            elif source is not None:
                why = (
                    f"the degree-{d} basis has {size} terms, but the data determine only "
                    f"{np.count_nonzero(kept < size)} of them ({undetermined(size)} cannot be "
                    "told apart from lower terms: too few distinct values)"
                    if not full
                    else f"the degree-{d} basis has {size} terms, and the smallest training "
                    f"fold holds only {folds.min_train} rows"
                )
                raise InvalidValue(
                    f"degree {d} cannot be fitted: {why}. Use a lower degree.",
                    [
                        Where(
                            source if source[0] == "params" else (*source, values.index(d)),
                            "degree too high for these data",
                        )
                    ],
                )
        dropped = [d for d in values if d not in ok]
        if dropped and work is not None:
            terms = undetermined(len(top))
            why = (f"the terms {terms} cannot be told apart from lower terms (too few distinct "
                   "values)" if terms else "a training fold holds too few rows for them")
            work.setdefault("notices", []).append(
                Notice(
                    "rank_deficient",
                    f"degree(s) {', '.join(map(str, dropped))} left out of the grid: {why}.",
                )
            )
        if not ok:
            raise TooFewRows(
                f"even a straight line needs more rows: {n} usable rows with "
                f"{folds.min_train} in the smallest training fold.",
                [Where(("train", "rows"), "too few rows")],
            )
        return ok

    def path(self, X, y, folds, settings, values, work=None):
        n, p = X.shape
        shift, scale = self._standardise(X)
        top = self._terms(p, max(values), settings)
        D = design((X - shift) / scale, top)
        sizes = [len(self._terms(p, d, settings)) for d in values]
        if folds.scheme == "kfold":
            oof = np.empty((len(values), folds.repeats, n))
            models = []
            for r, _f, train, test in folds.splits():
                Q, R, kept = qr_kept(D[train])
                qty = Q.T @ y[train]
                betas = []
                for c, size in enumerate(sizes):
                    q = int(np.count_nonzero(kept < size))
                    beta = linalg.solve_triangular(R[:q, :q], qty[:q])
                    oof[c, r, test] = D[np.ix_(test, kept[:q])] @ beta
                    betas.append((kept[:q], beta))
                if r == 0:
                    models.append(FoldLinear(shift, scale, top, tuple(betas)))
            return PathResult(oof, np.asarray(sizes, dtype=float), fold_models=tuple(models))
        Q, R, kept = qr_kept(D)
        qty = Q.T @ y
        fits = np.cumsum(Q * qty[None, :], axis=1)
        lev = np.cumsum(Q**2, axis=1)
        qs = [int(np.count_nonzero(kept < size)) - 1 for size in sizes]
        fitted = fits[:, qs].T  # (candidates, n)
        df = np.asarray([q + 1 for q in qs], dtype=float)
        if folds.scheme == "gcv":
            return PathResult(fitted[:, None, :], df, gcv_scale=1 - df / n)
        h = lev[:, qs].T
        with np.errstate(divide="ignore", invalid="ignore"):
            loo = y[None, :] - (y[None, :] - fitted) / (1 - h)
        loo = np.where(h < 1 - 1e-10, loo, np.nan)
        return PathResult(loo[:, None, :], df)

    def fit(self, X, y, settings, value, work=None):
        n, p = X.shape
        terms = self._terms(p, int(value), settings)
        shift, scale = self._standardise(X)
        D = design((X - shift) / scale, terms)
        Q, R, kept = qr_kept(D)
        if kept.size < len(terms) or n <= len(terms):
            raise InvalidValue(
                f"degree {value} cannot be fitted to {n} rows: its basis has {len(terms)} terms.",
                [Where(("params", "degree"), "degree too high for these data")],
            )
        beta = linalg.solve_triangular(R, Q.T @ y)
        fitted = D @ beta
        rss = float(np.sum((y - fitted) ** 2))
        tss = float(np.sum((y - y.mean()) ** 2))
        sigma = float(np.sqrt(rss / (n - len(terms))))
        r2 = 1.0 - rss / tss if tss > 0 else 1.0
        return FittedLinear(
            terms, shift, scale, beta, R, sigma, r2, n, fitted, float(len(terms)), Q, y
        )
