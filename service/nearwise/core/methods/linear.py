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

from functools import partial

import numpy as np
from scipy import linalg

from nearwise.core import windows
from nearwise.core.errors import InvalidValue, NotApplicable, TooFewRows, Where
from nearwise.core.methods import penalized
from nearwise.core.methods.base import Method, Param, PathResult, row_weights
from nearwise.core.methods.coding import categories_of, design_scaler, linear_terms, term_names
from nearwise.core.methods.linear_fit import FittedLinear, FoldLinear
from nearwise.core.methods.polynomial import design, monomials, qr_kept, weighted_sums
from nearwise.core.results import Notice

__all__ = ["FittedLinear", "FoldLinear", "Linear", "monomials"]


class Linear(Method):
    """Polynomial least squares, optionally with a ridge or lasso penalty."""

    name = "linear"
    summary = (
        "Least squares on a polynomial basis of the features, solved by QR; larger degree is "
        "more flexible. With `penalty` ridge or lasso the degree is fixed (default 1), the "
        "basis columns are standardized and `alpha` is tuned on a path; larger alpha is "
        "simpler, and the lasso sets some terms to zero. The lasso is tuned by kfold only. "
        "Categorical features enter as treatment-coded 0/1 terms (one per level but the "
        "reference), never raised to a power or multiplied by other terms."
    )
    tuned = "degree"
    interval_kinds = ("cv_plus", "model")
    default_grid = (
        "without a penalty: degree = 1, 2, 3 (a degree with as many terms as a training fold "
        f"has rows is left out); {penalized.GRID_DOC}"
    )
    params = (
        Param(
            "degree",
            "integer",
            None,
            "total polynomial degree; tuned without a penalty, fixed with one (default 1)",
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
        Param(
            "penalty",
            "choice",
            "none",
            "`none` (least squares; `degree` is tuned), `ridge` or `lasso` (`alpha` is tuned). "
            "With a penalty every basis column but the intercept is centered and scaled to unit "
            "variance on the rows fitted, the intercept is not penalized, and coefficients are "
            "reported in the original units",
            choices=("none", *penalized.PENALTIES),
        ),
        Param(
            "alpha",
            "number",
            None,
            "penalty weight on the standardized columns Z, as in scikit-learn: ridge minimizes "
            "||y - b0 - Zw||^2 + alpha ||w||^2 (Ridge), lasso ||y - b0 - Zw||^2 / (2n) + alpha "
            "||w||_1 (Lasso), n the rows fitted; 0 is least squares. Only with a penalty",
            low=0.0,
            tunable=True,
            simpler="larger",
        ),
    )
    std_error_doc = (
        "standard error of the fitted mean. Without a penalty: sigma * sqrt(x0' (X'X)^-1 x0), "
        "computed from the QR factor R. Ridge: sigma * sqrt(1/n + z0' (Z'Z + alpha I)^-1 Z'Z "
        "(Z'Z + alpha I)^-1 z0) on the centered standardized basis (from its SVD), the "
        "variance at fixed alpha, ignoring the bias. Lasso: sigma * sqrt(1/n + z0_A' "
        "(Z_A'Z_A)^-1 z0_A), least squares on the kept terms A, which ignores the selection "
        "and the shrinkage and so understates the uncertainty. sigma^2 = RSS / (n - df); df "
        "is 1 + sum d^2 / (d^2 + alpha) for ridge (d the singular values of the centered "
        "basis), 1 + the number of nonzero coefficients for the lasso."
        " With `tuning.order_by` and no penalty: the HAC standard error of the mean "
        "(Newey & West 1987), also used in the term table"
    )
    model_interval_doc = (
        "t interval for a new observation: f +/- t(n - p, (1 + level) / 2) sigma "
        "sqrt(1 + x0' (X'X)^-1 x0); exact when the polynomial is the true mean and the noise "
        "is normal with constant variance. With `tuning.order_by`, x0' (X'X)^-1 x0 sigma^2 is "
        "replaced by the HAC variance of the mean (Newey & West 1987, Bartlett weights, "
        "floor(4 (n/100)^(2/9)) lags, rows in time order). Not offered with a penalty. With "
        "`weight_by`: weighted least squares, X'X is X'WX, sigma^2 = sum w e^2 / (n - p) and "
        "the new observation's 1 becomes 1 / w0 (statsmodels WLS get_prediction)"
    )
    references = (
        "Montgomery, Peck & Vining (2012), Introduction to Linear Regression Analysis, 5th ed.",
        "Hoerl & Kennard (1970), Ridge regression: biased estimation for nonorthogonal "
        "problems, Technometrics 12",
        "Tibshirani (1996), Regression shrinkage and selection via the lasso, JRSS B 58",
        "Friedman, Hastie & Tibshirani (2010), Regularization paths for generalized linear "
        "models via coordinate descent, J. Stat. Software 33",
        "Zou, Hastie & Tibshirani (2007), On the degrees of freedom of the lasso, Ann. Stat. 35",
    )

    # The tuned parameter depends on the penalty ---------------------------------------------
    def tuned_for(self, settings) -> str:
        return "degree" if settings.get("penalty", "none") == "none" else "alpha"

    def schemes_for(self, settings) -> tuple[str, ...]:
        return ("kfold", "window", "blocks") if settings.get("penalty") == "lasso" else self.schemes

    def interval_kinds_for(self, settings) -> tuple[str, ...]:
        return self.interval_kinds if settings.get("penalty", "none") == "none" else ("cv_plus",)

    def settings(self, given):
        out = super().settings(given)
        if out["penalty"] == "none":
            if "alpha" in out:
                raise NotApplicable(
                    "`alpha` applies with `penalty` ridge or lasso; set `params.penalty` or "
                    "leave out `alpha`.",
                    [Where(("params", "alpha"), "no penalty to weigh")],
                )
            return out
        out.setdefault("degree", 1)
        if out.get("interactions") is None:
            out["interactions"] = out["degree"] > 1
        return out

    def check_grid(self, grid, settings):
        penalty = settings.get("penalty", "none")
        if penalty == "none" and "alpha" in grid:
            raise NotApplicable(
                "`alpha` is tuned only with `penalty` ridge or lasso; set `params.penalty`, or "
                "give a grid for `degree`.",
                [Where(("grid", "alpha"), "no penalty to tune")],
            )
        if penalty != "none" and "degree" in grid:
            raise NotApplicable(
                f"with `penalty: {penalty}` the degree is fixed (`params.degree`, default 1) "
                "and `alpha` is tuned; give a grid for `alpha`, or use `penalty: none` to tune "
                "the degree.",
                [Where(("grid", "degree"), "fixed with a penalty")],
            )
        return super().check_grid(grid, settings)

    def order(self, values, settings=None):
        """Simplest first: degrees ascending, alphas descending (alphas are floats)."""
        if settings is not None:
            alpha = self.tuned_for(settings) == "alpha"
        else:
            alpha = any(isinstance(v, float) for v in values)
        return sorted(values, reverse=alpha)

    def is_bound(self, value, folds, work=None):
        """Degree 1 and 5 are the limits; alpha 0 (least squares) and, for the lasso, alpha at
        or above alpha_max (every coefficient zero) are too."""
        if isinstance(value, float):
            top = (work or {}).get("lasso_alpha_max")
            return value == 0 or (top is not None and value >= top)
        return value in (1, 5)

    def _terms(self, p: int, degree: int, settings, cats=None) -> list[tuple[int, ...]]:
        """The terms of ``degree``: with categorical features, the intercept, their dummies
        and the polynomial of the numeric features (:func:`coding.linear_terms`)."""
        inter = settings.get("interactions")
        return linear_terms(cats, p, degree, True if inter is None else inter)

    def candidates(self, X, y, folds, settings, grid, work=None):
        if settings.get("penalty", "none") != "none":
            order = partial(self.order, settings=settings)
            return penalized.candidates(X, y, folds, settings, grid, order, work)
        p = X.shape[1]
        cats = categories_of(work)
        if "degree" in settings:
            values, source = [settings["degree"]], ("params", "degree")
        elif grid is not None:
            values, source = self.order(grid), ("grid", "degree")
        elif cats is not None and not cats.numeric:
            values, source = [1], None  # no numeric feature: every degree is the same fit
        else:
            values, source = [1, 2, 3], None
        sc = design_scaler(X, cats)
        top = self._terms(p, max(values), settings, cats)
        _, _, kept = qr_kept(design(sc.transform(X), top))
        ok = []
        for i, d in enumerate(values):
            determined = int(np.count_nonzero(kept < len(self._terms(p, d, settings, cats))))
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
        if settings.get("penalty", "none") != "none":
            return penalized.path(X, y, folds, settings, values, work)
        n, p = X.shape
        cats = categories_of(work)
        sc = design_scaler(X, cats)
        top = self._terms(p, max(values), settings, cats)
        D = design(sc.transform(X), top)
        sizes = [len(self._terms(p, d, settings, cats)) for d in values]
        # Weighted least squares is least squares on the rows times sqrt(w) (Dw, yw); fits
        # are evaluated on the unscaled design.
        w = row_weights(work)
        sw = np.ones(n) if w is None else np.sqrt(w)
        Dw, yw = D * sw[:, None], y * sw
        if folds.keep_models:
            oof = np.empty((len(values), folds.repeats, n))
            models = []
            for r, _f, train, test in folds.splits():
                Q, R, kept = qr_kept(Dw[train])
                qty = Q.T @ yw[train]
                betas = []
                for c, size in enumerate(sizes):
                    q = int(np.count_nonzero(kept < size))
                    beta = linalg.solve_triangular(R[:q, :q], qty[:q])
                    oof[c, r, test] = D[np.ix_(test, kept[:q])] @ beta
                    betas.append((kept[:q], beta))
                if r == 0:
                    models.append(FoldLinear(sc, top, tuple(betas)))
            _, _, kept = qr_kept(Dw)
            df = np.array([np.count_nonzero(kept < size) for size in sizes], dtype=float)
            return PathResult(oof, df, fold_models=tuple(models))
        Q, R, kept = qr_kept(Dw)
        qty = Q.T @ yw
        fits = np.cumsum(Q * qty[None, :], axis=1)
        lev = np.cumsum(Q**2, axis=1)  # weighted leverages h_ii = w_i x_i'(X'WX)^-1 x_i
        qs = [int(np.count_nonzero(kept < size)) - 1 for size in sizes]
        fitted = fits[:, qs].T / sw[None, :]  # (candidates, n)
        df = np.asarray([q + 1 for q in qs], dtype=float)
        if folds.scheme == "window":
            # Leave-a-window-out from the hat matrix Q Q' of the fit to all (scaled) rows.
            oof = np.empty((len(values), 1, n))
            for c, q in enumerate(qs):
                Qc = Q[:, : q + 1]
                oof[c, 0] = (
                    windows.window_oof(
                        yw,
                        fitted[c] * sw,
                        folds,
                        lambda rows, Qc=Qc: np.einsum("bik,bjk->bij", Qc[rows], Qc[rows]),
                    )
                    / sw
                )
            return PathResult(oof, df)
        if folds.scheme == "gcv":
            return PathResult(fitted[:, None, :], df, gcv_scale=1 - df / n)
        h = lev[:, qs].T
        with np.errstate(divide="ignore", invalid="ignore"):
            loo = y[None, :] - (y[None, :] - fitted) / (1 - h)
        loo = np.where(h < 1 - 1e-10, loo, np.nan)
        return PathResult(loo[:, None, :], df)

    def fit(self, X, y, settings, value, work=None):
        n, p = X.shape
        if settings.get("penalty", "none") != "none":
            names = tuple((work or {}).get("features") or (f"x{j}" for j in range(p)))
            return penalized.fit(X, y, settings, value, names, work)
        cats = categories_of(work)
        terms = self._terms(p, int(value), settings, cats)
        sc = design_scaler(X, cats)
        D = design(sc.transform(X), terms)
        w = row_weights(work)
        sw = np.ones(n) if w is None else np.sqrt(w)
        Q, R, kept = qr_kept(D * sw[:, None])
        if n <= kept.size:
            raise InvalidValue(
                f"degree {value} cannot be fitted to {n} rows: {kept.size} of its terms are "
                "determined, which leaves no residual degrees of freedom. Use a lower degree.",
                [Where(("params", "degree"), "degree too high for these data")],
            )
        beta = linalg.solve_triangular(R, Q.T @ (y * sw))
        fitted = D[:, kept] @ beta
        rss, tss = weighted_sums(y, fitted, w)
        sigma = float(np.sqrt(rss / (n - kept.size)))
        r2 = 1.0 - rss / tss if tss > 0 else 1.0
        names = term_names(sc, tuple((work or {}).get("features") or (f"x{j}" for j in range(p))))
        # With order_by, the term table, std_error and model interval use the Newey-West HAC
        # covariance over the rows in time order (FittedLinear.hac_root).
        line = (work or {}).get("line")
        hac = lags = None
        if line is not None:
            if line.key.shape != y.shape:
                raise ValueError("the timeline does not match the rows fitted")
            hac, lags = FittedLinear.hac_root(Q, (y - fitted) * sw, line.key)
        return FittedLinear(terms, kept, sc, beta, Q, R, y, fitted, sigma, r2, names, hac, lags, w)
