"""The least-squares fit on all rows and the fold models kept from its path.

References
----------
Montgomery, D. C., Peck, E. A. & Vining, G. G. (2012). *Introduction to Linear Regression
Analysis*, 5th ed., Wiley: t tests, prediction intervals, leverage and hidden extrapolation
(section 3.8).
Belsley, D. A., Kuh, E. & Welsch, R. E. (1980). *Regression Diagnostics*, Wiley: the
deletion formulas behind leave-one-out updates.
Newey, W. K. & West, K. D. (1987). A simple, positive semi-definite, heteroskedasticity and
autocorrelation consistent covariance matrix. *Econometrica* 55(3), 703-708: the HAC
covariance with Bartlett weights, used when the rows are placed in time (``order_by``).
Newey, W. K. & West, K. D. (1994). Automatic lag selection in covariance matrix estimation.
*Review of Economic Studies* 61(4), 631-653: the lag rule L = floor(4 (n / 100)^(2/9)), a
common choice.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import linalg, stats

from nearwise.core.data import Scaler
from nearwise.core.methods.coding import term_names
from nearwise.core.methods.polynomial import (
    deletion_residuals,
    design,
    high_leverage,
    raw_transform,
    row_norms,
    term_name,
)
from nearwise.core.results import Notice

HAC_RULE = (
    "Newey-West HAC covariance: rows in order_by order, Bartlett weights 1 - l / (L + 1) for "
    "lags l <= L, L = floor(4 (n / 100)^(2/9)) with n the training rows (Newey & West 1994); "
    "no small-sample factor; p-values from the normal distribution"
)


def newey_west_lags(n: int) -> int:
    """The HAC lag L = floor(4 (n / 100)^(2/9)) for ``n`` rows (Newey & West 1994), below n."""
    return max(0, min(int(np.floor(4.0 * (n / 100.0) ** (2.0 / 9.0))), n - 1))


@dataclass(frozen=True)
class FoldLinear:
    """The coefficients of every degree on one training fold."""

    scaler: Scaler  # or coding.Design, with categorical features
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
    scaler: Scaler  # or coding.Design, with categorical features (its columns: ``names``)
    beta: np.ndarray  # on the standardised basis, kept terms only
    Q: np.ndarray
    R: np.ndarray
    y: np.ndarray
    fitted: np.ndarray
    sigma: float
    r2: float
    names: tuple[str, ...]
    # With order_by: C (k x k) with the HAC covariance of ``beta`` = R^-1 C C' R^-T, and L.
    hac: np.ndarray | None = None
    hac_lags: int | None = None
    # Row weights (None: all 1). Weighted least squares: Q R is the QR of the design rows
    # times sqrt(w), sigma^2 = sum w e^2 / (n - p) the variance of a row of weight 1.
    w: np.ndarray | None = None

    @property
    def _sw(self) -> np.ndarray:
        return np.ones(self.y.size) if self.w is None else np.sqrt(self.w)

    @staticmethod
    def hac_root(Q: np.ndarray, resid: np.ndarray, key: np.ndarray) -> tuple[np.ndarray, int]:
        """A root C of the Newey-West meat in the basis of Q, and the lag L used.

        With D = QR the design and u the residuals, (D'D)^-1 d_t u_t = R^-1 q_t u_t, so the
        HAC covariance of the coefficients is R^-1 M R^-T with

            M = sum_t g_t g_t' + sum_{l=1}^{L} w_l sum_t (g_t g_{t-l}' + g_{t-l} g_t'),

        g_t = q_t u_t over the rows sorted by ``key`` (ties kept in the current row order),
        Bartlett weights w_l = 1 - l / (L + 1) and L = :func:`newey_west_lags` (n). Lags
        count rows, not distinct time stamps. No small-sample factor n / (n - p) is applied:
        this is the covariance of statsmodels' default ``OLS(...).fit(cov_type="HAC",
        cov_kwds={"maxlags": L})``, whose ``use_correction`` is False.

        The weight L + 1 - |t - s| of g_t g_s' counts the windows of L + 1 consecutive rows
        holding both, so M = H'H / (L + 1) with H_s the sum of g over window s (windows
        running off either end included): M is positive semi-definite (Newey & West 1987), and
        C = R_H' / sqrt(L + 1) from a QR of H, never forming M.

        References
        ----------
        Newey, W. K. & West, K. D. (1987), *Econometrica* 55(3), 703-708.
        Newey, W. K. & West, K. D. (1994), *Review of Economic Studies* 61(4), 631-653.
        """
        n, k = Q.shape
        lags = newey_west_lags(n)
        order = np.argsort(key, kind="stable")
        G = Q[order] * resid[order, None]
        H = np.zeros((n + lags, k))
        for j in range(lags + 1):
            H[j : j + n] += G
        R_H = np.linalg.qr(H, mode="r")
        return R_H.T / np.sqrt(lags + 1.0), lags

    def _spread(self, A: np.ndarray) -> np.ndarray:
        """sqrt(a' C C' a) per row of A, for rows a' = c' R^-1 (the HAC standard error of
        c' beta)."""
        assert self.hac is not None
        return row_norms(A @ self.hac)

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
        """Standard error of the fitted mean: sigma sqrt(h0); with order_by the HAC one,
        sqrt(x0' V x0) with V the HAC covariance of :meth:`hac_root`."""
        if self.hac is not None:
            return self._spread(self._a(Xq))
        return self.sigma * self.leverage_root(Xq)

    def model_interval(
        self, Xq: np.ndarray, level: float, w0: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """t interval for a new observation, t = t(n - p, (1 + level) / 2).

        Classical: f +/- t sigma sqrt(1 + h0). With order_by: f +/- t sqrt(se_HAC(f)^2 +
        sigma^2), se_HAC(f) the HAC standard error of the fitted mean (:meth:`std_error`).
        A new observation of weight w0 (1 unless given) has noise variance sigma^2 / w0:
        f +/- t sigma sqrt(1 / w0 + h0), as statsmodels' ``WLS.get_prediction(exog,
        weights=w0).summary_frame(obs=True)``.
        """
        t = stats.t.ppf(0.5 + level / 2, self.n - self.kept.size)
        noise = self.sigma if w0 is None else self.sigma / np.sqrt(w0)
        if self.hac is not None:
            half = t * np.hypot(noise, self._spread(self._a(Xq)))
        else:
            root = self.leverage_root(Xq)
            half = t * np.hypot(noise, self.sigma * root)
        f = self.predict(Xq)
        return f - half, f + half

    def _leverage_train(self) -> np.ndarray:
        """h_ii = w_i x_i'(X'WX)^-1 x_i, the diagonal of the (weighted) hat matrix."""
        return np.sum(self.Q**2, axis=1)

    def loo_residuals(self) -> np.ndarray:
        """e_i / (1 - h_i); NaN where h_i = 1 (the row alone determines a term)."""
        return deletion_residuals(self.y, self.fitted, self._leverage_train())

    def loo_predictions(self, Xq: np.ndarray):
        """mu_{-i}(x0) = mu(x0) - a0'q_i e_i / (1 - h_i) for every training row i (Belsley,
        Kuh & Welsch 1980)."""
        A = self._a(Xq)
        sw = self._sw
        base = A @ (self.Q.T @ (self.y * sw))  # equals predict(Xq)
        # With weights, q_i is the row of Q of the scaled design: the step is sqrt(w_i) e_i /
        # (1 - h_i).
        step = self.loo_residuals() * sw

        def block(rows: np.ndarray) -> np.ndarray:
            return base[rows, None] - (A[rows] @ self.Q.T) * step[None, :]

        return block

    def query_notices(self, Xq: np.ndarray) -> list[Notice]:
        """``high_leverage``: h0 above the largest training leverage, the hidden
        extrapolation of Montgomery, Peck & Vining (2012, section 3.8). With weights both
        sides are x'(X'WX)^-1 x, the training rows' leverages divided by their weights."""
        h = self._leverage_train()
        if self.w is not None:
            h = h / self.w
        return high_leverage(self.leverage_root(Xq), h, "x0'(X'X)^-1 x0")

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
        """The term table in original units (estimates T beta, T the raw-monomial expansion).

        Classical: covariance sigma^2 T R^-1 R^-T T', p-values from t(n - p). With order_by:
        the HAC covariance T R^-1 C C' R^-T T' (:meth:`hac_root`; lag L = floor(4 (n /
        100)^(2/9)), Newey & West 1994) and, as statsmodels' default HAC fit, p-values from
        the normal distribution. ``covariance`` says which (with ``hac_lags`` and
        ``hac_rule`` for HAC).
        """
        kept_terms = [self.terms[j] for j in self.kept]
        names = term_names(self.scaler, names)  # with dummies: `column[level]` too
        T = raw_transform(kept_terms, self.scaler.shift, self.scaler.scale)
        est = T @ self.beta
        Rinv = linalg.solve_triangular(self.R, np.eye(self.R.shape[0]))
        if self.hac is not None:
            se = self._spread(T @ Rinv)
        else:
            se = self.sigma * row_norms(T @ Rinv)
        dof = self.n - self.kept.size
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            t = np.where(se > 0, est / se, np.nan)
        if self.hac is not None:
            p = 2 * stats.norm.sf(np.abs(t))
        else:
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
        out: dict[str, Any] = {
            "terms": rows,
            "aliased_terms": self.aliased(),
            "sigma": self.sigma,
            "r2": self.r2,
            "residual_df": dof,
            "covariance": "classical" if self.hac is None else "HAC",
        }
        if self.hac is not None:
            out["hac_lags"] = self.hac_lags
            out["hac_rule"] = HAC_RULE
        return out
