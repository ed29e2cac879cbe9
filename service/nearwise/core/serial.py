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
from dataclasses import dataclass

import numpy as np

from nearwise.core import sequence, tuning
from nearwise.core.errors import TooFewRows
from nearwise.core.results import Notice
from nearwise.core.spec import ORDERED_SCHEMES, TuningSpec

PILOT_BLOCKS = 5


@dataclass(frozen=True)
class Gap:
    """The gap in force and how it was set (``caller`` or ``data``, with the cap noted)."""

    steps: int
    source: str
    capped: bool = False
    phi: float | None = None  # data: the pilot's estimate of the noise's lag-1 correlation


def pilot_k(n: int) -> int:
    return int(np.clip(round(np.sqrt(n)), 5, 50))


def choose_gap(
    X: np.ndarray, y: np.ndarray, step: np.ndarray, steps: int, check: Callable[[], None]
) -> Gap:
    """The default gap from the pilot's out-of-fold residuals (0 when the series is too short
    for the pilot)."""
    from nearwise.core.methods.knn import KNN  # the pilot is a method of its own

    spec = TuningSpec(scheme="blocks", folds=PILOT_BLOCKS, order_by="pilot")
    try:
        folds = tuning.ordered_folds(spec, step, steps, 0, check)
    except TooFewRows:
        return Gap(0, "data")
    k = min(pilot_k(y.size), folds.min_train - 1)
    if k < 1:
        return Gap(0, "data")
    path = KNN().path(X, y, folds, {"weights": "uniform", "scale": "standard"}, [k])
    series = sequence.step_means(y - path.oof[0, 0], step, steps)
    piece = (np.arange(steps) * PILOT_BLOCKS) // steps  # the pilot fold of each step
    phi = sequence.difference_lag1(series, piece)
    gap, capped = sequence.default_gap(phi, steps)
    return Gap(gap, "data", capped, phi)


def make_folds(
    spec: TuningSpec,
    X: np.ndarray,
    y: np.ndarray,
    line: sequence.Timeline,
    check: Callable[[], None],
) -> tuple[tuning.Folds, Gap]:
    """The ``window`` or ``blocks`` folds of rows placed by ``line`` (in the rows' order)."""
    assert spec.scheme in ORDERED_SCHEMES
    gap = (
        Gap(int(spec.gap), "caller")
        if spec.gap is not None
        else choose_gap(X, y, line.step, line.steps, check)
    )
    return tuning.ordered_folds(spec, line.step, line.steps, gap.steps, check), gap


def dependence(
    resid: np.ndarray, line: sequence.Timeline | None, arrival: np.ndarray
) -> sequence.Dependence | None:
    """Dependence figures of the out-of-fold residuals ``resid`` (in the working row order):
    along ``order_by`` (averaged per step) when given, else in the order the rows arrived
    (``arrival`` holds each working row's arrival rank)."""
    if line is not None:
        series = sequence.step_means(resid, line.step, line.steps)
        return sequence.dependence(series, resid.size, "order_by")
    series = np.empty_like(resid)
    series[arrival] = resid
    return sequence.dependence(series, resid.size, "arrival")


def notice(dep: sequence.Dependence | None, spec: TuningSpec) -> list[Notice]:
    """``serial_dependence`` when the figures show dependence and the folds ignored it."""
    if dep is None or not dep.found or spec.scheme in ORDERED_SCHEMES:
        return []
    where = (
        f"in the order of `{spec.order_by}`"
        if dep.order == "order_by"
        else "in the order the rows were sent"
    )
    return [
        Notice(
            "serial_dependence",
            f"the out-of-fold residuals are serially dependent {where}: lag-1 autocorrelation "
            f"{dep.lag1:.2f}, Ljung-Box p = {dep.ljung_box_p:.2g} over {dep.ljung_box_lags} "
            f"lags, about {dep.effective_rows:.0f} effective rows. Cross-validation that holds "
            "out rows one by one or at random then favors too rough a fit and gives intervals "
            "that are too narrow. Name the column that places rows in time in "
            "`tuning.order_by` and use `tuning.scheme` `window` (questions within the period "
            "the data cover) or `blocks` (questions about new periods).",
        )
    ]
