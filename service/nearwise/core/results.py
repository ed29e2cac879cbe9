"""Frozen results returned by the core; the web layer only serialises them."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass(frozen=True)
class Notice:
    """A warning as data: a stable ``code``, a plain message and the query rows it concerns."""

    code: str
    message: str
    rows: tuple[int, ...] = ()


@dataclass(frozen=True)
class PathEntry:
    """One tuning candidate: its parameters, cross-validated error with standard error, and df."""

    params: dict[str, Any]
    error: float
    error_se: float
    df: float | None


@dataclass(frozen=True)
class TuningReport:
    """How the tuning was done and the whole score table, simplest candidate first."""

    scheme: str
    folds: int | None
    repeats: int
    seed: int
    rule: str
    metric: str
    group_by: str | None
    best: dict[str, Any]
    path: tuple[PathEntry, ...]
    order_by: str | None = None
    gap: int | None = None
    gap_source: str | None = None
    gap_rule: str | None = None
    dependence: dict[str, Any] | None = None


@dataclass(frozen=True)
class FitReport:
    """Summary figures of the final fit."""

    n_train: int
    rows_dropped: int
    cv_error: float
    cv_error_se: float
    cv_r2: float | None
    train_error: float
    df: float | None
    rows_zero_weight: int = 0  # training rows of weight 0, left out like rows_dropped
    weight_by: str | None = None  # the column of row weights, if any


@dataclass(frozen=True)
class Predictions:
    """Per-row answers as arrays (one entry per query row, or per training row if no query).

    ``residual`` and ``cv_residual`` (out of fold) are set only for fitted values at the
    training rows. ``flags`` holds, for each row, the notice codes that concern it.
    """

    value: np.ndarray
    residual: np.ndarray | None = None
    std_error: np.ndarray | None = None
    lower: np.ndarray | None = None
    upper: np.ndarray | None = None
    flags: tuple[tuple[str, ...], ...] = ()
    cv_residual: np.ndarray | None = None


@dataclass(frozen=True)
class PredictResult:
    """Everything ``/v1/predict`` answers."""

    method: str
    target: str
    features: tuple[str, ...]
    params: dict[str, Any]
    tuning: TuningReport
    fit: FitReport
    model: dict[str, Any]
    predictions: Predictions
    warnings: tuple[Notice, ...] = field(default=())
    interval: dict[str, Any] | None = None
    comparison: dict[str, Any] | None = None  # method auto: the ranking behind the choice
    curve: dict[str, Any] | None = None  # one feature, when asked: the fit on an even grid
    # With order_by: column, kind ("number", "date", "datetime"), t (keys in time order: numbers
    # as sent, dates as seconds since 1970 UTC), residual (out of fold), lag1.
    series: dict[str, Any] | None = None
