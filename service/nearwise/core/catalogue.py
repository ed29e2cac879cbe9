"""The method catalogue served at /v1/methods: methods, tuning options and warning codes."""

from __future__ import annotations

from typing import Any

from nearwise.core import hull, locality, pipeline, sequence
from nearwise.core.methods import METHODS
from nearwise.core.methods.knn import WIDE_FRACTION
from nearwise.core.methods.spline_fits import INTERPOLATING_SHARE
from nearwise.core.spec import METRICS, RULES, SCHEMES


def _warnings() -> list[dict[str, Any]]:
    """Every warning code: whether it concerns rows or the data set, and its rule."""
    far = ", ".join(f"p = {p}: {locality.far_threshold(p):.3g}" for p in (1, 2, 3))
    rows, data = "rows", "data set"
    return [
        {
            "code": "outside_range",
            "concerns": rows,
            "rule": "a feature of the row lies beyond its training minimum or maximum",
        },
        {
            "code": "outside_hull",
            "concerns": rows,
            "rule": f"inside every range but outside the convex hull of the training rows "
            f"(scaled features; qhull facets up to {hull.FACET_MAX_DIM} dimensions, "
            f"linear programs up to {hull.HULL_MAX_DIM}, tolerance {hull.HULL_TOL:g} of "
            "the largest range)",
        },
        {
            "code": "hull_not_tested",
            "concerns": "rows or data set",
            "rule": f"the hull test was not run: more than {hull.HULL_MAX_DIM} features (where "
            f"nearly every new point is outside the hull; rely on far_from_data), or the "
            "request's hull work reached the service's cost cap NEARWISE_MAX_HULL_COST_S "
            "before those rows (a cap on the request's size, not a verdict on the rows)",
        },
        {
            "code": "unseen_level",
            "concerns": rows,
            "rule": "a categorical feature of the row holds a level that no usable training "
            "row holds: value, std_error, lower and upper are null and the row gets no other "
            "flag (with categorical features the other locality flags are computed among the "
            "training rows holding the row's levels; a combination of levels no training row "
            "holds is outside_hull)",
        },
        {
            "code": "far_from_data",
            "concerns": rows,
            "rule": f"distance to the nearest training row over the typical spacing (median "
            f"nearest-row distance of the training rows) above max({locality.FAR_RATIO:g},"
            f" {locality.FAR_TAIL:g}^(1/p)) ({far}); a rule of thumb",
        },
        {
            "code": "high_leverage",
            "concerns": rows,
            "rule": "linear: leverage above the largest training leverage (x0'(X'X)^-1 x0; with "
            "ridge 1/n + z0'(Z'Z + alpha I)^-1 z0, with lasso least squares on the kept terms) "
            "(hidden extrapolation; Montgomery, Peck & Vining 2012, section 3.8)",
        },
        {
            "code": "wide_neighborhood",
            "concerns": rows,
            "rule": f"knn: the k neighbors spread over more than {WIDE_FRACTION:.0%} of some "
            "feature's training range",
        },
        {
            "code": "not_local",
            "concerns": data,
            "rule": f"knn: e_p(k/n) = (k/n)^(1/p) above {locality.NOT_LOCAL_EDGE:g} (Hastie, "
            "Tibshirani & Friedman 2009, section 2.5)",
        },
        {
            "code": "interpolating",
            "concerns": data,
            "rule": f"spline or additive df at least {INTERPOLATING_SHARE:.0%} of the distinct "
            "rows, spline smoothing 0, or knn with k = 1 or distance weights: the fit reproduces "
            "the noise",
        },
        {
            "code": "few_rows",
            "concerns": data,
            "rule": f"fewer than {pipeline.FEW_ROWS} usable training rows (a rule of thumb)",
        },
        {
            "code": "rank_deficient",
            "concerns": data,
            "rule": "linear: terms the data cannot tell apart from the others (aliased; with a "
            "penalty, constant terms only), or additive: straight-line terms of constant or "
            "collinear features, were dropped "
            "from the fit and are named",
        },
        {
            "code": "grid_reduced",
            "concerns": data,
            "rule": "linear: default-grid degrees with as many terms as a training fold has rows "
            "were left out",
        },
        {
            "code": "tuning_at_edge",
            "concerns": data,
            "rule": "the chosen value is at an end of the grid that is not the parameter's own "
            "limit; widen the grid",
        },
        {
            "code": "unusual_response",
            "concerns": rows,
            "rule": f"without a query: modified z-score 0.6745 |r - median| / MAD of the "
            f"out-of-fold residual above {pipeline.UNUSUAL_Z:g} (Iglewicz & Hoaglin 1993)",
        },
        {
            "code": "interval_unbounded",
            "concerns": rows,
            "rule": "too few rows for the level (both ends need at least 1 / (1 - level) - 1 "
            "rows: 9 at 0.9, 99 at 0.99), or no noise estimate: the missing bound is null",
        },
        {
            "code": "target_missing",
            "concerns": "rows or data set",
            "rule": "training rows without a target were left out of the fit",
        },
        {
            "code": "index_like_feature",
            "concerns": data,
            "rule": "a feature used by default (`features` not given) holds exactly 0, 1, ..., "
            "n - 1 or 1, 2, ..., n in row order: a saved index or row number",
        },
        {
            "code": "x_rounded",
            "concerns": data,
            "rule": "one-feature spline: x merged or rounded onto at most 1,000 knots",
        },
        {
            "code": "method_skipped",
            "concerns": data,
            "rule": "compare or auto: a method that does not apply to these data was left out "
            "(the message says why)",
        },
        {
            "code": "method_chosen",
            "concerns": data,
            "rule": "method auto: which method was chosen, and why",
        },
        {
            "code": "serial_dependence",
            "concerns": data,
            "rule": "the scheme holds rows out as if they were exchangeable (kfold, loo, gcv) "
            "and either the out-of-fold residuals, in the order of `tuning.order_by` (or as "
            f"the rows arrived), have a Ljung-Box p-value below {sequence.DEPENDENCE_ALPHA:g} "
            f"over min({sequence.LB_MAX_LAGS}, steps // 5) lags with a lag-1 autocorrelation "
            f"of at least {sequence.DEPENDENCE_MIN_LAG1:g} in size, or a pilot fit's AR(1) "
            "estimate of the noise's lag-1 correlation exceeds max("
            f"{sequence.NOISE_MIN_LAG1:g}, {sequence.NOISE_Z:g} sqrt(2/m)) over m >= "
            f"{sequence.NOISE_MIN_STEPS} steps; on independent rows it fires on about 1 data "
            "set in 100",
        },
        {
            "code": "df_unavailable",
            "concerns": data,
            "rule": "some candidates' effective degrees of freedom could not be computed stably",
        },
    ]


def warning_codes() -> tuple[str, ...]:
    """Every warning code an answer can carry, in the catalogue's order."""
    return tuple(w["code"] for w in _warnings())


def describe() -> dict[str, Any]:
    """Every method with its parameters, the tuning options they share, and the warnings."""
    return {
        "methods": [m.describe() for m in METHODS.values()],
        "tuning": {
            "schemes": list(SCHEMES),
            "rules": list(RULES),
            "metrics": list(METRICS),
            "defaults": {
                "scheme": "kfold",
                "folds": 5,
                "repeats": 1,
                "seed": 0,
                "rule": "one_se",
                "metric": "rmse",
            },
            "ordered_schemes": {
                "window": "with `order_by`: each step held out, the rows within `gap` steps "
                "of it left out of its fit; for questions within the period the data cover",
                "blocks": "with `order_by`: `folds` contiguous blocks of steps, `gap` steps "
                "left out on each side; for questions about new periods",
                "gap": "default: from a pilot fit (kNN, k = clip(round(sqrt(n)), 5, 50), "
                "5 contiguous blocks, no gap, on at most the first 2,000 steps and 4,000 rows): "
                "phi = 1 + 2 corr(d_t, d_t+1) of its first-differenced out-of-fold residuals "
                "(averaged per step), the AR(1) estimate of the noise's lag-1 correlation; the "
                f"gap is the last lag h with phi^h >= {sequence.GAP_ACF_LEVEL:g}, at most "
                f"{sequence.GAP_MAX_SHARE:.0%} of the steps",
            },
        },
        "warnings": _warnings(),
    }
