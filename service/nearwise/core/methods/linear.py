"""Least squares on a polynomial basis, with every degree scored from one QR per fold.

Terms the data cannot tell apart from earlier ones (a constant feature, two proportional
features, a squared feature with two distinct values) are aliased: they are dropped from the
fit, as a rank-revealing QR shows, and named in the ``rank_deficient`` warning.

References
----------
Golub, G. H. & Van Loan, C. F. (2013). *Matrix Computations*, 4th ed., section 5.3.
Montgomery, D. C., Peck, E. A. & Vining, G. G. (2012). *Introduction to Linear Regression
Analysis*, 5th ed., Wiley: t tests, prediction intervals, leverage and hidden extrapolation
(section 3.8).
Belsley, D. A., Kuh, E. & Welsch, R. E. (1980). *Regression Diagnostics*, Wiley: the
deletion formulas behind leave-one-out updates.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import linalg, stats

from nearwise.core.data import Scaler
from nearwise.core.errors import InvalidValue, TooFewRows, Where
from nearwise.core.methods.base import Method, Param, PathResult
from nearwise.core.methods.polynomial import (
    design,
    monomials,
    qr_kept,
    raw_transform,
    row_norms,
    term_name,
)
from nearwise.core.results import Notice


@dataclass(frozen=True)
class FoldLinear:
    """The coefficients of every degree on one training fold."""

    scaler: Scaler
    terms: list[tuple[int, ...]]
    betas: tuple[tuple[np.ndarray, np.ndarray], ...]  # (columns used, coefficients)

    def predict(self, Xq: np.ndarray, c: int) -> np.ndarray:
        cols, beta = self.betas[c]
        return design(self.scaler.transform(Xq), self.terms)[:, cols] @ beta


@dataclass
class FittedLinear:
    """A polynomial least-squares fit on all usable rows (aliased terms dropped)."""

    terms: list[tuple[int, ...]]  # every term of the degree
    kept: np.ndarray  # the determined ones, in order
    scaler: Scaler
    beta: np.ndarray  # on the standardised basis, kept terms only
    Q: np.ndarray
    R: np.ndarray
    y: np.ndarray
    fitted: np.ndarray
    sigma: float
    r2: float
    names: tuple[str, ...]

    @property
    def df(self) -> float:
        return float(self.kept.size)

    @property
    def n(self) -> int:
        return int(self.y.size)

    def _design(self, Xq: np.ndarray) -> np.ndarray:
        return design(self.scaler.transform(Xq), self.terms)[:, self.kept]

    def predict(self, Xq: np.ndarray) -> np.ndarray:
        return self._design(Xq) @ self.beta

    def _a(self, Xq: np.ndarray) -> np.ndarray:
        """R^-T d0 per query row: x0'(X'X)^-1 x0 = |a0|^2 and x0'(X'X)^-1 x_i = a0'q_i."""
        return linalg.solve_triangular(self.R, self._design(Xq).T, trans="T").T

    def leverage_root(self, Xq: np.ndarray) -> np.ndarray:
        """sqrt(x0'(X'X)^-1 x0), by QR (never an inverse of X'X), without overflow."""
        return row_norms(self._a(Xq))

    def std_error(self, Xq: np.ndarray, sigma_cv: float) -> np.ndarray:
        """Standard error of the fitted mean: sigma sqrt(h0)."""
        return self.sigma * self.leverage_root(Xq)

    def model_interval(self, Xq: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
        """Classical t interval for a new observation: f +/- t sigma sqrt(1 + h0)."""
        t = stats.t.ppf(0.5 + level / 2, self.n - self.kept.size)
        root = self.leverage_root(Xq)
        half = t * self.sigma * np.hypot(1.0, root)
        f = self.predict(Xq)
        return f - half, f + half

    def _leverage_train(self) -> np.ndarray:
        return np.sum(self.Q**2, axis=1)

    def loo_residuals(self) -> np.ndarray:
        """e_i / (1 - h_i); NaN where h_i = 1 (the row alone determines a term)."""
        h = self._leverage_train()
        with np.errstate(divide="ignore", invalid="ignore"):
            out = (self.y - self.fitted) / (1.0 - h)
        return np.where(h < 1 - 1e-10, out, np.nan)

    def loo_predictions(self, Xq: np.ndarray):
        """mu_{-i}(x0) = mu(x0) - a0'q_i e_i / (1 - h_i) for every training row i (Belsley,
        Kuh & Welsch 1980)."""
        A = self._a(Xq)
        base = A @ (self.Q.T @ self.y)  # equals predict(Xq)
        step = self.loo_residuals()

        def block(rows: np.ndarray) -> np.ndarray:
            return base[rows, None] - (A[rows] @ self.Q.T) * step[None, :]

        return block

    def query_notices(self, Xq: np.ndarray) -> list[Notice]:
        """``high_leverage``: h0 above the largest training leverage, the hidden
        extrapolation of Montgomery, Peck & Vining (2012, section 3.8)."""
        h_max = float(np.max(self._leverage_train()))
        rows = np.flatnonzero(self.leverage_root(Xq) > np.sqrt(h_max) * (1 + 1e-9))
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

    def aliased(self) -> list[str]:
        dropped = sorted(set(range(len(self.terms))) - set(self.kept.tolist()))
        return [term_name(self.terms[j], self.names) for j in dropped]

    def notices(self) -> list[Notice]:
        names = self.aliased()
        if not names:
            return []
        return [
            Notice(
                "rank_deficient",
                f"the terms {', '.join(names)} cannot be told apart from the other terms in "
                "these data (too few distinct values, or features that move together); they "
                "were dropped from the fit.",
            )
        ]

    def summary(self, names: tuple[str, ...]) -> dict[str, Any]:
        kept_terms = [self.terms[j] for j in self.kept]
        T = raw_transform(kept_terms, self.scaler.shift, self.scaler.scale)
        est = T @ self.beta
        Rinv = linalg.solve_triangular(self.R, np.eye(self.R.shape[0]))
        se = self.sigma * row_norms(T @ Rinv)
        dof = self.n - self.kept.size
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            t = np.where(se > 0, est / se, np.nan)
        p = 2 * stats.t.sf(np.abs(t), dof)
        rows = [
            {
                "name": term_name(e, names),
                "estimate": float(est[i]),
                "std_error": float(se[i]),
                "t": None if np.isnan(t[i]) else float(t[i]),
                "p_value": None if np.isnan(p[i]) else float(p[i]),
            }
            for i, e in enumerate(kept_terms)
        ]
        return {
            "terms": rows,
            "aliased_terms": self.aliased(),
            "sigma": self.sigma,
            "r2": self.r2,
            "residual_df": dof,
        }


class Linear(Method):
    """Polynomial least squares."""

    name = "linear"
    summary = (
        "Least squares on a polynomial basis of the features, solved by QR. Larger "
        "degree is more flexible."
    )
    tuned = "degree"
    interval_kinds = ("cv_plus", "model")
    default_grid = (
        "degree = 1, 2, 3 (a degree with as many terms as a training fold has rows is left out)"
    )
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

    def candidates(self, X, y, folds, settings, grid, work=None):
        p = X.shape[1]
        if "degree" in settings:
            values, source = [settings["degree"]], ("params", "degree")
        elif grid is not None:
            values, source = self.order(grid), ("grid", "degree")
        else:
            values, source = [1, 2, 3], None
        sc = Scaler.fit(X, "standard")
        top = self._terms(p, max(values), settings)
        _, _, kept = qr_kept(design(sc.transform(X), top))
        ok = []
        for i, d in enumerate(values):
            determined = int(np.count_nonzero(kept < len(self._terms(p, d, settings))))
            if determined < folds.min_train:
                ok.append(d)
            elif source is not None:
                where = source if source[0] == "params" else (*source, i)
                raise InvalidValue(
                    f"degree {d} cannot be fitted: its {determined} determined terms need more "
                    f"rows than the smallest training fold holds ({folds.min_train}). Use a "
                    "lower degree or fewer folds.",
                    [Where(where, "degree too high for these data")],
                )
        if not ok:
            raise TooFewRows(
                f"even a straight line needs more rows: {X.shape[0]} usable rows with "
                f"{folds.min_train} in the smallest training fold.",
                [Where(("train", "rows"), "too few rows")],
            )
        if len(ok) < len(values) and work is not None:
            left = [d for d in values if d not in ok]
            work.setdefault("notices", []).append(
                Notice(
                    "grid_reduced",
                    f"degree(s) {', '.join(map(str, left))} left out of the default grid: they "
                    "have as many terms as a training fold has rows.",
                )
            )
        return ok

    def path(self, X, y, folds, settings, values, work=None):
        n, p = X.shape
        sc = Scaler.fit(X, "standard")
        top = self._terms(p, max(values), settings)
        D = design(sc.transform(X), top)
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
                    models.append(FoldLinear(sc, top, tuple(betas)))
            _, _, kept = qr_kept(D)
            df = np.array([np.count_nonzero(kept < size) for size in sizes], dtype=float)
            return PathResult(oof, df, fold_models=tuple(models))
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
        sc = Scaler.fit(X, "standard")
        D = design(sc.transform(X), terms)
        Q, R, kept = qr_kept(D)
        if n <= kept.size:
            raise InvalidValue(
                f"degree {value} cannot be fitted to {n} rows: {kept.size} of its terms are "
                "determined, which leaves no residual degrees of freedom. Use a lower degree.",
                [Where(("params", "degree"), "degree too high for these data")],
            )
        beta = linalg.solve_triangular(R, Q.T @ y)
        fitted = D[:, kept] @ beta
        rss = float(np.sum((y - fitted) ** 2))
        tss = float(np.sum((y - y.mean()) ** 2))
        sigma = float(np.sqrt(rss / (n - kept.size)))
        r2 = 1.0 - rss / tss if tss > 0 else 1.0
        names = tuple((work or {}).get("features") or (f"x{j}" for j in range(p)))
        return FittedLinear(terms, kept, sc, beta, Q, R, y, fitted, sigma, r2, names)
