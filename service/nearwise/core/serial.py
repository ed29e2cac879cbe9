"""Ordered rows in a request: the folds along ``order_by``, the default gap, and the
``tuning.dependence`` figures with their ``serial_dependence`` warning.

The default gap comes from a pilot fit that is the same for every method, so that ``compare``
and ``auto`` tune every method on the same folds: kNN with k = clip(round(sqrt(n)), 5, 50) on
standard-scaled features, scored on 5 contiguous blocks along ``order_by`` with no gap. Its
out-of-fold residuals, averaged per step, give an AR(1) estimate of the noise's lag-1
correlation phi from their first differences (which removes the pilot's bias where the
features follow time); the gap is the last lag h with phi^h >= 0.1, at most a tenth of the
steps (see :func:`nearwise.core.sequence.default_gap`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from nearwise.core import sequence, tuning
from nearwise.core.errors import TooFewRows
from nearwise.core.results import Notice
from nearwise.core.spec import ORDERED_SCHEMES, TuningSpec

PILOT_BLOCKS = 5
#: The pilot looks at most at this many steps (the first ones) and this many rows (an even
#: selection of theirs), so that its cost is bounded whatever the size of the request.
PILOT_STEPS = 2000
PILOT_ROWS = 4000


@dataclass(frozen=True)
class Gap:
    """The gap in force and how it was set (``caller`` or ``data``, with the cap noted)."""

    steps: int
    source: str
    capped: bool = False
    rule: str = "given in the request"


def pilot_k(n: int) -> int:
    return int(np.clip(round(np.sqrt(n)), 5, 50))


def noise_lag1(
    X: np.ndarray, y: np.ndarray, step: np.ndarray, check: Callable[[], None]
) -> tuple[float, int] | None:
    """The pilot's estimate of the noise's lag-1 correlation, and the steps it used.

    ``step`` places each row in time (integers from 0). Only the first PILOT_STEPS steps are
    used, a contiguous stretch of the series, and of their rows at most PILOT_ROWS, evenly
    spread in time, so the cost is bounded whatever the size. None when the stretch is too
    short for the pilot.
    """
    from nearwise.core.methods.knn import KNN  # the pilot is a method of its own

    steps = int(min(step.max() + 1, PILOT_STEPS))
    rows = np.flatnonzero(step < steps)
    if rows.size > PILOT_ROWS:  # many rows per step: an even selection, in time order
        rows = rows[np.argsort(step[rows], kind="stable")]
        rows = rows[np.linspace(0, rows.size - 1, PILOT_ROWS).round().astype(np.intp)]
    kept, dense = np.unique(step[rows], return_inverse=True)
    step, steps = np.zeros(step.shape, dtype=np.intp), int(kept.size)
    step[rows] = dense.reshape(-1)
    spec = TuningSpec(scheme="blocks", folds=PILOT_BLOCKS, order_by="pilot")
    try:
        folds = tuning.ordered_folds(spec, step[rows], steps, 0, check)
    except TooFewRows:
        return None
    k = min(pilot_k(rows.size), folds.min_train - 1)
    if k < 1 or steps < sequence.MIN_STEPS:
        return None
    Xp, yp = X[rows], y[rows]
    path = KNN().path(Xp, yp, folds, {"weights": "uniform", "scale": "standard"}, [k])
    series = sequence.step_means(yp - path.oof[0, 0], step[rows], steps)
    piece = (np.arange(steps) * PILOT_BLOCKS) // steps  # the pilot fold of each step
    return sequence.difference_lag1(series, piece), steps


def make_folds(
    spec: TuningSpec,
    line: sequence.Timeline,
    noise: tuple[float, int] | None,
    check: Callable[[], None],
) -> tuple[tuning.Folds, Gap]:
    """The ``window`` or ``blocks`` folds of rows placed by ``line`` (in the rows' order);
    the default gap follows the pilot's ``noise`` estimate."""
    assert spec.scheme in ORDERED_SCHEMES
    if spec.gap is not None:
        gap = Gap(int(spec.gap), "caller")
    else:
        phi = 0.0 if noise is None else noise[0]
        steps, capped = sequence.default_gap(phi, line.steps)
        if noise is None:
            rule = "the series is too short for the pilot fit: no gap"
        else:
            rule = (
                f"pilot estimate of the noise's lag-1 correlation {phi:.3g}: the last lag h "
                f"with {phi:.3g}^h >= {sequence.GAP_ACF_LEVEL:g}"
            )
        if capped:
            rule += f"; capped at a tenth of the {line.steps} steps"
        gap = Gap(steps, "data", capped, rule)
    return tuning.ordered_folds(spec, line.step, line.steps, gap.steps, check), gap


def dependence(
    resid: np.ndarray,
    line: sequence.Timeline | None,
    arrival: np.ndarray,
    noise: tuple[float, int] | None,
) -> sequence.Dependence | None:
    """Dependence figures of the out-of-fold residuals ``resid`` (in the working row order):
    along ``order_by`` (averaged per step) when given, else in the order the rows arrived
    (``arrival`` holds each working row's arrival rank); with the pilot's ``noise`` estimate
    taken in the same order."""
    if line is not None:
        series = sequence.step_means(resid, line.step, line.steps)
        dep = sequence.dependence(series, resid.size, "order_by")
    else:
        series = np.empty_like(resid)
        series[arrival] = resid
        dep = sequence.dependence(series, resid.size, "arrival")
    if dep is None or noise is None:
        return dep
    return replace(dep, noise_lag1=noise[0], noise_steps=noise[1])


def notice(dep: sequence.Dependence | None, spec: TuningSpec) -> list[Notice]:
    """``serial_dependence`` when the figures show dependence and the folds ignored it."""
    if dep is None or not dep.found or spec.scheme in ORDERED_SCHEMES:
        return []
    where = (
        f"in the order of `{spec.order_by}`"
        if dep.order == "order_by"
        else "in the order the rows were sent"
    )
    noise = (
        ""
        if dep.noise_lag1 is None
        else f"; the noise's own lag-1 correlation is estimated at {dep.noise_lag1:.2f}"
    )
    return [
        Notice(
            "serial_dependence",
            f"the rows are serially dependent {where} (or the fit misses a pattern that "
            "follows that order): the out-of-fold residuals have lag-1 "
            f"autocorrelation {dep.lag1:.2f} and Ljung-Box p = {dep.ljung_box_p:.2g} over "
            f"{dep.ljung_box_lags} lags{noise}; about {dep.effective_rows:.0f} effective rows. "
            "Cross-validation that holds out rows one by one or at random then favors too "
            "rough a fit and gives intervals that are too narrow. Name the column that places "
            "rows in time in `tuning.order_by` and use `tuning.scheme` `window` (questions "
            "within the period the data cover) or `blocks` (questions about new periods).",
        )
    ]


def level_factor(dep: sequence.Dependence | None, scheme: str, kind: str) -> float:
    """How much wider the ``window`` and ``blocks`` intervals are made for the uncertain level
    of dependent noise.

    Held-out residuals spread around the level the noise happened to take over the series,
    and the fit carries that level with it; a new measurement's noise is centred on zero.
    When the noise's mean over the series has variance sigma^2 / m (m the effective rows, n
    (1 - rho) / (1 + rho)), a new answer's error has about sigma^2 (1 + 1/m) where the
    residuals show sigma^2, so the half-widths are scaled by sqrt(1 + 1/m), m at least 2. 1
    for the other schemes, for model intervals, and without dependence figures.
    """
    if dep is None or scheme not in ORDERED_SCHEMES or kind != "cv_plus":
        return 1.0
    m = max(dep.effective_rows, 2.0)
    return float(np.sqrt(1 + 1 / m))
