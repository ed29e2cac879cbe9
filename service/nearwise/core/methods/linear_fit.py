"""The least-squares fit on all rows and the fold models kept from its path.

References
----------
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
from nearwise.core.methods.polynomial import (
    deletion_residuals,
    design,
    high_leverage,
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
        return deletion_residuals(self.y, self.fitted, self._leverage_train())

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
        return high_leverage(self.leverage_root(Xq), self._leverage_train(), "x0'(X'X)^-1 x0")

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
