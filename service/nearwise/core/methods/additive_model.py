"""Fitted additive models: the fold models kept for CV+, and the model on all rows with its
error figures, leave-one-out updates and the per-feature summary."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import stats

from nearwise.core.methods.additive_basis import BLOCK, Basis, evaluate
from nearwise.core.methods.additive_solve import Smoother
from nearwise.core.methods.posterior import BayesianBand
from nearwise.core.results import Notice

CURVE_POINTS = 50
NEAR_LINEAR_DF = 1.5  # a feature whose df is below this is reported as near_linear
INTERPOLATING_SHARE = 0.9  # total df at least this share of the distinct rows: noise is fitted
BAND_Z = 1.96
LEVEL_RULE = (
    "categorical features: treatment coding against the reference level (`categorical` gives "
    "each feature's levels and reference); each term is the unpenalized difference of its "
    "level from the reference, with its posterior standard deviation, t = estimate / "
    "std_error and p from t(n - df)"
)


@dataclass(frozen=True)
class FoldAdditive:
    """The basis and the coefficients of every candidate on one training fold."""

    basis: Basis
    kept: np.ndarray
    coefs: np.ndarray  # (columns, candidates)

    def predict(self, Xq: np.ndarray, c: int) -> np.ndarray:
        return evaluate(self.basis, Xq, self.kept, self.coefs[:, c])


@dataclass
class FittedAdditive(BayesianBand):
    """alpha + sum_j f_j(x_j) at one overall smoothing, fitted to all usable rows."""

    basis: Basis
    smoother: Smoother
    smoothing: float
    X: np.ndarray
    y: np.ndarray
    names: tuple[str, ...]
    # Row weights (None: all 1): the fit is weighted least squares plus the penalties, and
    # sigma^2 = sum w e^2 / (n - df) the noise variance of a row of weight 1.
    row_w: np.ndarray | None = None
    coef: np.ndarray = field(init=False)
    fitted: np.ndarray = field(init=False)
    df: float = field(init=False)
    _train: tuple[np.ndarray, np.ndarray] | None = field(default=None, init=False)

    def __post_init__(self) -> None:
        self.coef = self.smoother.coef(self.smoothing)
        self.fitted = self.predict(self.X)
        self.df = self.smoother.df(self.smoothing)

    @property
    def n(self) -> int:
        return int(self.y.size)

    def predict(self, Xq: np.ndarray) -> np.ndarray:
        return evaluate(self.basis, Xq, self.smoother.red.kept, self.coef)

    # -- error figures --------------------------------------------------------------------
    def sigma2(self) -> float:
        """sigma^2 = RSS / (n - df), the residual variance of a linear smoother."""
        room = self.n - self.df
        if room <= 1e-9:
            return float("nan")
        wt = 1.0 if self.row_w is None else self.row_w
        return float(np.sum(wt * (self.y - self.fitted) ** 2) / room)

    def _pieces(self, Xq: np.ndarray, only: int | None = None):
        parts = [
            self.smoother.pieces(*self.basis.design(Xq[s : s + BLOCK], only))
            for s in range(0, Xq.shape[0], BLOCK)
        ]
        if not parts:
            return np.zeros((0, self.smoother.red.kept.size)), np.zeros((0, self.smoother.red.q))
        return np.vstack([p[0] for p in parts]), np.vstack([p[1] for p in parts])

    def variance(self, Xq: np.ndarray) -> np.ndarray:
        """x0'(X'X + S)^-1 x0: the posterior variance of the fit at x0 in units of sigma^2."""
        out = np.empty(Xq.shape[0])
        for s in range(0, Xq.shape[0], BLOCK):
            pieces = self.smoother.pieces(*self.basis.design(Xq[s : s + BLOCK]))
            out[s : s + BLOCK] = self.smoother.quad(*pieces, self.smoothing)
        return out

    def _train_pieces(self) -> tuple[np.ndarray, np.ndarray]:
        if self._train is None:
            self._train = self._pieces(self.X)
        return self._train

    def leverage(self) -> np.ndarray:
        """A_ii of every training row: w_i x_i'(X'WX + S)^-1 x_i, its posterior variance in
        units of sigma^2 times its weight."""
        h = self.variance(self.X)
        return h if self.row_w is None else h * self.row_w

    def loo_residuals(self) -> np.ndarray:
        """e_i / (1 - A_ii): exact leave-one-out residuals at the same basis and lambdas."""
        h = self.leverage()
        with np.errstate(divide="ignore", invalid="ignore"):
            out = (self.y - self.fitted) / (1.0 - h)
        return np.where(h < 1 - 1e-10, out, np.nan)

    def loo_predictions(self, Xq: np.ndarray):
        """mu_{-i}(x0) = mu(x0) - A(x0, x_i) r_i, with A(x0, x_i) = x0'(X'X + S)^-1 x_i the
        smoother weight and r_i the leave-one-out residual (the leave-one-out lemma of
        penalized least squares; Green & Silverman 1994, section 3.2)."""
        q1t, gt = self._train_pieces()
        q1q, gq = self._pieces(Xq)
        inv = 1.0 / (self.smoother.sig2 + self.smoothing)
        base = self.predict(Xq)
        step = self.loo_residuals()
        if self.row_w is not None:  # the smoother weight of row i carries its weight w_i
            step = step * self.row_w

        def block(rows: np.ndarray) -> np.ndarray:
            weight = q1q[rows] @ q1t.T + (gq[rows] * inv) @ gt.T
            return base[rows, None] - weight * step[None, :]

        return block

    # -- summary and notices --------------------------------------------------------------
    def feature_df(self) -> list[float]:
        """Per feature: 1 for its straight line (if kept) plus its wiggly df."""
        red = self.smoother.red
        lines = self.basis.lines
        kept_lines = {lines[c - 1] for c in red.kept if 0 < c <= len(lines)}
        blocks = self.basis.blocks
        wig = dict(
            zip(
                [j for j, _ in blocks],
                self.smoother.block_df(self.smoothing, [b for _, b in blocks]),
                strict=True,
            )
        )
        return [float(j in kept_lines) + wig.get(j, 0.0) for j in range(len(self.basis.features))]

    def lambdas(self) -> list[float | None]:
        """Penalty weight of each feature on the integral of f_j''(x)^2 in the feature's own
        units (None for a feature without wiggly columns)."""
        out: list[float | None] = [None] * len(self.basis.features)
        for j, b in self.basis.blocks:
            span = self.basis.features[j].span
            out[j] = float(self.smoothing * self.smoother.lam_hat[b][0] * span**3)
        return out

    def component(self, j: int, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """f_j at x (centered over the training rows) and its posterior standard deviation."""
        Xq = np.tile(self.X[:1], (x.size, 1))
        Xq[:, self.basis.column(j)] = x
        N, W = self.basis.design(Xq, only=j)
        kept = self.smoother.red.kept
        f = N[:, kept] @ self.coef[: kept.size] + W @ self.coef[kept.size :]
        v = self.smoother.quad(*self.smoother.pieces(N, W), self.smoothing)
        with np.errstate(invalid="ignore"):
            return f, np.sqrt(self.sigma2() * v)

    def summary(self, names: tuple[str, ...]) -> dict[str, Any]:
        dfs, lams = self.feature_df(), self.lambdas()
        features = []
        for j, fb in enumerate(self.basis.features):
            x = np.linspace(fb.lo, fb.lo + (fb.span if fb.linear else 0.0), CURVE_POINTS)
            f, sd = self.component(j, x)
            features.append(
                {
                    "name": names[self.basis.column(j)],
                    "df": dfs[j],
                    "near_linear": dfs[j] < NEAR_LINEAR_DF,
                    "lambda": lams[j],
                    "knots": int(fb.knots.size),
                    "effect": {
                        "x": x.tolist(),
                        "f": f.tolist(),
                        "lower": (f - BAND_Z * sd).tolist(),
                        "upper": (f + BAND_Z * sd).tolist(),
                    },
                }
            )
        out = {
            "kind": "additive model of penalized cubic regression splines",
            "smoothing": self.smoothing,
            "df": self.df,
            "intercept": float(self.coef[0]),
            "sigma": float(np.sqrt(self.sigma2())) if np.isfinite(self.sigma2()) else None,
            "near_linear_below_df": NEAR_LINEAR_DF,
            "effect_band": f"f_j +/- {BAND_Z} posterior SD of f_j (centered over the training "
            "rows, so the intercept's uncertainty is not included)",
            "features": features,
        }
        if self.basis.cats is not None:
            out["terms"] = self.level_terms()
            out["terms_rule"] = LEVEL_RULE
        return out

    def level_terms(self) -> list[dict[str, Any]]:
        """The level effects of the categorical features (treatment coding): per dummy
        ``column[level]`` its estimate, posterior standard deviation sigma sqrt(e'(X'X +
        S)^-1 e) (the coefficient's entry of the posterior covariance; Wood 2017, section
        6.10), t = estimate / std_error and its two-sided p-value from t(n - df). A level
        the data cannot tell apart from the others (aliased) has null figures."""
        cats, red = self.basis.cats, self.smoother.red
        assert cats is not None
        first = 1 + len(self.basis.lines)
        kept = red.kept.tolist()
        sigma2 = self.sigma2()
        dof = self.n - self.df
        rows = []
        for d, name in enumerate(cats.dummy_names()):
            col = first + d
            if col not in kept:
                rows.append(
                    {"name": name, "estimate": None, "std_error": None, "t": None, "p_value": None}
                )
                continue
            est = float(self.coef[kept.index(col)])
            N = np.zeros((1, self.basis.k))
            N[0, col] = 1.0
            v = self.smoother.quad(
                *self.smoother.pieces(N, np.zeros((1, self.basis.q))), self.smoothing
            )
            se = float(np.sqrt(sigma2 * v[0])) if np.isfinite(sigma2) else float("nan")
            t = est / se if se > 0 else float("nan")
            p = float(2 * stats.t.sf(abs(t), dof)) if np.isfinite(t) and dof > 0 else None
            rows.append(
                {
                    "name": name,
                    "estimate": est,
                    "std_error": se if np.isfinite(se) else None,
                    "t": t if np.isfinite(t) else None,
                    "p_value": p,
                }
            )
        return rows

    def aliased(self) -> list[str]:
        """Features whose straight line (or levels whose effect) the data cannot tell apart
        from the others."""
        red = self.smoother.red
        lines = self.basis.lines
        kept = {lines[c - 1] for c in red.kept if 0 < c <= len(lines)}
        out = [
            self.names[self.basis.column(j)]
            for j in range(len(self.basis.features))
            if j not in kept
        ]
        if self.basis.cats is not None:
            first = 1 + len(lines)
            out += [
                name
                for d, name in enumerate(self.basis.cats.dummy_names())
                if first + d not in red.kept
            ]
        return out

    def notices(self) -> list[Notice]:
        out = []
        distinct = int(np.unique(self.X, axis=0).shape[0])
        if self.df >= INTERPOLATING_SHARE * distinct:
            out.append(
                Notice(
                    "interpolating",
                    f"the fit uses {self.df:.0f} of the {distinct} degrees of freedom the "
                    "distinct rows allow: it reproduces the training targets almost exactly, "
                    "noise included. Prefer a larger smoothing.",
                )
            )
        names = self.aliased()
        if names:
            out.append(
                Notice(
                    "rank_deficient",
                    f"the features {', '.join(names)} are constant or move together with "
                    "other features (their straight lines cannot be told apart); their "
                    "straight-line terms were dropped from the fit.",
                )
            )
        return out

    def query_notices(self, Xq: np.ndarray) -> list[Notice]:
        return []
