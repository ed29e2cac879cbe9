"""A ridge or lasso fit on all rows: predictions, standard errors, leave-one-out, term table.

Both fits are written as f(x0) = b0 + z0'w with the centered basis Zc = U diag(d) V' (for the
lasso: the SVD of the kept columns only), and two weights per direction: ``g_hat`` for the
hat matrix, H = 11'/n + Zc V diag(g_hat) V' Zc', and ``g_var`` for the variance of w,
Cov(w) = sigma^2 V diag(g_var) V'.

- ridge: g_hat = 1 / (d^2 + alpha), g_var = d^2 / (d^2 + alpha)^2, the variance of the
  ridge estimator at fixed alpha, (Z'Z + alpha I)^-1 Z'Z (Z'Z + alpha I)^-1, which ignores its
  bias (Hoerl & Kennard 1970);
- lasso: g_hat = g_var = 1 / d^2, the least-squares variance on the kept terms,
  (Z_A'Z_A)^-1. It treats the kept set as fixed: it ignores the selection and the shrinkage,
  so it understates the uncertainty of a selected model.

sigma^2 = RSS / (n - df), with df = 1 + sum d^2 / (d^2 + alpha) for ridge and 1 + the number
of nonzero coefficients for the lasso (Zou, Hastie & Tibshirani 2007).

With row weights w_i (``row_w``), Zc and U are the weighted-centered rows times sqrt(w_i):
1/n becomes 1/sum w, RSS = sum w_i e_i^2 and sigma^2 is the variance of a row of weight 1
(Var(noise_i) = sigma^2 / w_i); h_ii = w_i / sum w + sum_j U_ij^2 d_j^2 g_hat_j.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from nearwise.core.errors import NotApplicable, Where
from nearwise.core.methods.coding import term_names, term_owners
from nearwise.core.methods.polynomial import (
    deletion_residuals,
    high_leverage,
    raw_transform,
    row_norms,
    term_name,
    weighted_sums,
)
from nearwise.core.results import Notice


def _num(v: float) -> float | None:
    return float(v) if np.isfinite(v) else None


@dataclass
class FittedPenalized:
    """Ridge or lasso on the standardized polynomial basis, fitted to all usable rows."""

    basis: Any  # penalized.Basis
    penalty: str
    alpha: float
    b0: float
    w: np.ndarray
    zbar: np.ndarray
    U: np.ndarray
    d: np.ndarray
    V: np.ndarray
    g_hat: np.ndarray
    g_var: np.ndarray
    y: np.ndarray
    fitted: np.ndarray
    names: tuple[str, ...]
    converged: bool = True
    row_w: np.ndarray | None = None  # row weights (None: all 1)

    @property
    def n(self) -> int:
        return int(self.y.size)

    @property
    def _wt(self) -> np.ndarray:
        return np.ones(self.y.size) if self.row_w is None else self.row_w

    @property
    def _total(self) -> float:
        """sum w (n without weights): 1 / sum w is the variance factor of the intercept."""
        return float(self.n) if self.row_w is None else float(np.sum(self.row_w))

    @property
    def df(self) -> float:
        if self.penalty == "lasso":
            return 1.0 + float(np.count_nonzero(self.w))
        return 1.0 + float(np.sum(self.d**2 * self.g_hat))

    @property
    def sigma(self) -> float:
        rss = float(np.sum(self._wt * (self.y - self.fitted) ** 2))
        dof = self.n - self.df
        return float(np.sqrt(rss / dof)) if dof > 0 else float("nan")

    def predict(self, Xq: np.ndarray) -> np.ndarray:
        return self.b0 + self.basis.transform(Xq) @ self.w

    def _proj(self, Xq: np.ndarray) -> np.ndarray:
        return (self.basis.transform(Xq) - self.zbar) @ self.V

    def _root(self, P: np.ndarray, g: np.ndarray) -> np.ndarray:
        """sqrt(1/n + sum_j P_j^2 g_j) per row (1 / sum w with weights), without overflow."""
        first = np.full((P.shape[0], 1), 1.0 / np.sqrt(self._total))
        return row_norms(np.hstack([first, P * np.sqrt(g)]))

    def std_error(self, Xq: np.ndarray, sigma_cv: float) -> np.ndarray:
        """sigma sqrt(1/n + z0'V diag(g_var) V'z0): the standard error of the fitted mean."""
        return self.sigma * self._root(self._proj(Xq), self.g_var)

    def leverage_root(self, Xq: np.ndarray) -> np.ndarray:
        return self._root(self._proj(Xq), self.g_hat)

    def _leverage_train(self) -> np.ndarray:
        return self._wt / self._total + self.U**2 @ (self.d**2 * self.g_hat)

    def model_interval(self, Xq: np.ndarray, level: float, w0=None):
        raise NotApplicable(
            f"linear with `penalty: {self.penalty}` has no model interval: the t interval "
            "assumes unbiased least squares. Use `interval.kind: cv_plus`.",
            [Where(("interval", "kind"), "not offered with a penalty")],
        )

    def loo_residuals(self) -> np.ndarray:
        """e_i / (1 - h_ii), exact for ridge with the standardization fixed; NaN at h_ii = 1."""
        return deletion_residuals(self.y, self.fitted, self._leverage_train())

    def loo_predictions(self, Xq: np.ndarray):
        """mu_{-i}(x0) = mu(x0) - s_i(x0) e_i / (1 - h_ii), with s_i(x0) = 1/n +
        z0'V diag(g_hat) V'z_i the weight of row i at x0 (penalized least squares with a fixed
        design; exact for ridge). With weights, s_i(x0) = w_i / sum w + sqrt(w_i) z0'V
        diag(g_hat) d U_i'."""
        base = self.predict(Xq)
        P = self._proj(Xq)
        right = self.U * (self.d * self.g_hat)[None, :] * np.sqrt(self._wt)[:, None]
        step = self.loo_residuals()
        first = self._wt / self._total

        def block(rows: np.ndarray) -> np.ndarray:
            weight = first[None, :] + P[rows] @ right.T
            return base[rows, None] - weight * step[None, :]

        return block

    def query_notices(self, Xq: np.ndarray) -> list[Notice]:
        """``high_leverage``: h0 = 1/n + z0'V diag(g_hat) V'z0 above the largest training
        leverage (the fit's own hat matrix; with weights, the leverages divided by them)."""
        return high_leverage(
            self.leverage_root(Xq),
            self._leverage_train() / self._wt,
            f"(the {self.penalty} fit's hat matrix)",
        )

    def _names(self, idx, names) -> list[str]:
        return [term_name(self.basis.terms[1 + j], names) for j in idx]

    def notices(self) -> list[Notice]:
        names = term_names(self.basis.scaler, self.names)
        constant = self._names(np.flatnonzero(self.basis.constant), names)
        if not constant:
            return []
        return [
            Notice(
                "rank_deficient",
                f"the terms {', '.join(constant)} are constant in these data and cannot be told "
                "apart from the intercept; they were dropped from the fit.",
            )
        ]

    def summary(self, names: tuple[str, ...]) -> dict[str, Any]:
        b = self.basis
        inputs = names
        owner = term_owners(b.scaler, len(names))
        names = term_names(b.scaler, names)  # with dummies: `column[level]` too
        q = self.w.size
        # beta (standardized-feature monomials) = L theta, theta = (b0 + zbar'w, w).
        L = np.zeros((q + 1, q + 1))
        L[0, 0] = 1.0
        L[0, 1:] = -(self.zbar + b.mean / b.sd)
        L[1:, 1:] = np.diag(1.0 / b.sd)
        theta = np.concatenate([[self.b0 + self.zbar @ self.w], self.w])
        G = np.zeros((q + 1, self.d.size + 1))
        G[0, 0] = 1.0 / np.sqrt(self._total)
        G[1:, 1:] = self.V * np.sqrt(self.g_var)[None, :]
        TL = raw_transform(b.terms, b.scaler.shift, b.scaler.scale) @ L
        est = TL @ theta
        se = self.sigma * row_norms(TL @ G)
        lasso = self.penalty == "lasso"
        dropped = np.flatnonzero((self.w == 0) & ~b.constant) if lasso else np.array([], int)
        unset = {1 + int(j) for j in dropped} | {1 + int(j) for j in np.flatnonzero(b.constant)}
        rows = [
            {
                "name": term_name(e, names),
                "estimate": float(est[i]),
                "std_error": None if i in unset else _num(se[i]),
                "t": None,
                "p_value": None,
            }
            for i, e in enumerate(b.terms)
        ]
        out: dict[str, Any] = {
            "penalty": self.penalty,
            "alpha": self.alpha,
            "terms": rows,
            "aliased_terms": self._names(np.flatnonzero(b.constant), names),
            "sigma": _num(self.sigma),
            "r2": self._r2(),
            "df": self.df,
            "residual_df": self.n - self.df,
        }
        if lasso:
            kept = np.flatnonzero(self.w)
            used = np.zeros(len(inputs), dtype=bool)
            for j in kept:
                for col in np.flatnonzero(np.asarray(b.terms[1 + j]) > 0):
                    used[owner[col]] = True
            out["dropped_terms"] = self._names(dropped, names)
            out["kept_inputs"] = [n for n, u in zip(inputs, used, strict=True) if u]
            out["dropped_inputs"] = [n for n, u in zip(inputs, used, strict=True) if not u]
            out["converged"] = self.converged
        return out

    def _r2(self) -> float:
        rss, tss = weighted_sums(self.y, self.fitted, self.row_w)
        return 1.0 - rss / tss if tss > 0 else 1.0
