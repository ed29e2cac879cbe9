"""Rows that follow one another in time: the ``order_by`` column, and serial dependence.

``order_by`` holds numbers, or ISO 8601 dates or date-times (all of one form). Its values are
turned into sortable keys, then into a *step* for each row: the rank of its value among the
distinct values (rows sharing a time stamp share a step). Gaps and lags count steps.

The dependence figures describe a residual series in time order: its lag-1 autocorrelation,
the Ljung-Box test over several lags and the effective number of rows under an AR(1) model.

References
----------
Box, G. E. P., Jenkins, G. M. & Reinsel, G. C. (2008). *Time Series Analysis*, 4th ed., Wiley,
section 2.1.4 (the sample autocorrelation function, with divisor n).
Ljung, G. M. & Box, G. E. P. (1978). On a measure of lack of fit in time series models.
*Biometrika* 65(2), 297-303.
Bayley, G. V. & Hammersley, J. M. (1946). The "effective" number of independent observations
in an autocorrelated time series. *JRSS Supplement* 8(2), 184-197 (n (1 - rho) / (1 + rho) for
the mean of an AR(1) series, to first order).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np
from scipy import stats

from nearwise.core.data import Table
from nearwise.core.errors import BadCell, UnknownName, Where

#: Ljung-Box lags: min(10, steps // 5), a common choice for series without seasons (Hyndman &
#: Athanasopoulos, Forecasting: Principles and Practice, 3rd ed., section 5.4; from memory).
LB_MAX_LAGS = 10
#: Fewest steps for which the dependence figures are computed.
MIN_STEPS = 10
#: serial_dependence fires on either of two signs, each of which independent rows give about
#: 1 time in 100 or less:
#: (a) the out-of-fold residuals: Ljung-Box p-value below DEPENDENCE_ALPHA, with a lag-1
#:     autocorrelation at least DEPENDENCE_MIN_LAG1 in size (a fit that follows the features
#:     closely leaves a little correlation in residuals ordered like the features; the floor
#:     keeps that from counting);
#: (b) the pilot's noise estimate phi (see difference_lag1): above NOISE_Z sqrt(2 / m) and at
#:     least NOISE_MIN_LAG1. For independent noise the differences are MA(1) with lag-1
#:     correlation -1/2, whose sample value has variance (1 - 3 (1/4) + 4 (1/16)) / m = 0.5 / m
#:     (Bartlett's formula: Box, Jenkins & Reinsel 2008, section 2.1.6), so phi = 1 + 2 r has
#:     variance 2 / m and exceeds 3.09 sqrt(2 / m) with probability 0.001 in the limit. At 200
#:     rows the pilot's own error and the skew of r raise that to a few in 1,000, measured.
#: Together: at most 0.01 + 0.001 by the union bound, in the limit; on the simulated
#: independent data sets of tests/reference/test_serial_coverage.py, about 1 in 100.
DEPENDENCE_ALPHA = 0.01
DEPENDENCE_MIN_LAG1 = 0.2
NOISE_Z = 3.09
NOISE_MIN_LAG1 = 0.1
#: Sign (b) needs at least this many pilot steps: on shorter series the pilot's error, which
#: changes from one step to the next with the features, is as large as the noise.
NOISE_MIN_STEPS = 50
#: Default gap: the autocorrelation level below which residuals count as unrelated.
GAP_ACF_LEVEL = 0.1
#: Default gap: at most this share of the steps.
GAP_MAX_SHARE = 0.1


@dataclass(frozen=True)
class Timeline:
    """Where each training row lies along ``order_by``.

    ``key`` holds sortable float keys (numbers as sent; dates as seconds since 1970-01-01 UTC),
    ``step`` the rank of each row's value among the distinct values, ``steps`` their count.
    """

    column: str
    key: np.ndarray
    step: np.ndarray
    steps: int
    kind: str  # "number", "date" or "datetime"

    def take(self, rows: np.ndarray) -> Timeline:
        """The timeline of a subset of rows, ranks recomputed."""
        key = self.key[rows]
        _, step = np.unique(key, return_inverse=True)
        return Timeline(self.column, key, step.reshape(-1), int(step.max()) + 1, self.kind)


_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


def _iso(text: str) -> tuple[str, float] | None:
    """The form of an ISO 8601 cell (date, naive date-time or zoned date-time) and its seconds
    since 1970-01-01 (UTC for zoned values, the naive clock otherwise); None if not ISO."""
    try:
        value = datetime.fromisoformat(text)
    except ValueError:
        return None
    if value.tzinfo is not None:
        return "zoned", (value - _EPOCH).total_seconds()
    seconds = (value - _EPOCH.replace(tzinfo=None)).total_seconds()
    if "T" not in text.upper() and " " not in text and len(text) <= 10:
        return "date", seconds
    return "naive", seconds


def timeline(train: Table, column: str) -> Timeline:
    """Read the ``order_by`` column of the training table.

    Every cell must be present. Numbers are used as they are; text must be ISO 8601 (as read by
    :meth:`datetime.datetime.fromisoformat`) and of one form throughout: all dates, all
    date-times without an offset, or all date-times with one (compared in UTC). Nothing is
    guessed: another form, or numbers mixed with text, is refused naming the row.
    """
    try:
        j = train.columns.index(column)
    except ValueError:
        raise UnknownName(
            f"`tuning.order_by` names column `{column}`, which is not in the train table; its "
            f"columns are {', '.join(train.columns)}.",
            [Where(("tuning", "order_by"), f"no column `{column}` in train")],
        ) from None
    values = train.values[:, j]
    labels = train.labels.get(j)
    is_text = (
        np.zeros(values.shape, dtype=bool)
        if labels is None
        else np.array([isinstance(c, str) for c in labels], dtype=bool)
    )
    missing = np.isnan(values) & ~is_text
    if missing.any():
        i = int(np.flatnonzero(missing)[0])
        raise BadCell(
            f"`tuning.order_by` column `{column}` is missing in train row {i}; every row needs "
            "its place in the sequence. Fill it or remove the row.",
            [Where(("train", "rows", i, j), "missing order_by value")],
        )
    if not is_text.any():
        if not np.isfinite(values).all():
            i = int(np.flatnonzero(~np.isfinite(values))[0])
            raise BadCell(
                f"`tuning.order_by` column `{column}` is not finite in train row {i}.",
                [Where(("train", "rows", i, j), "not finite")],
            )
        return _ranked(column, values.astype(float), "number")
    if not is_text.all():
        i = int(np.flatnonzero(~is_text)[0])
        k = int(np.flatnonzero(is_text)[0])
        raise BadCell(
            f"`tuning.order_by` column `{column}` mixes numbers and text: row {i} holds a number, "
            f"row {k} holds {labels[k]!r}. Send all numbers or all ISO 8601 dates.",
            [Where(("train", "rows", i, j), "a number among dates")],
        )
    assert labels is not None
    parsed = [_iso(c) for c in labels]
    for i, cell in enumerate(parsed):
        if cell is None:
            raise BadCell(
                f"`tuning.order_by` column `{column}` in train row {i} holds {labels[i]!r}, "
                "which is not an ISO 8601 date or date-time (such as 2026-03-01 or "
                "2026-03-01T12:30:00Z).",
                [Where(("train", "rows", i, j), "not an ISO 8601 date")],
            )
    first = parsed[0][0]
    for i, (kind, _) in enumerate(parsed):
        if kind != first:
            names = {
                "date": "a date",
                "naive": "a date-time without offset",
                "zoned": "a date-time with a UTC offset",
            }
            raise BadCell(
                f"`tuning.order_by` column `{column}` mixes forms: row 0 holds {names[first]} "
                f"({labels[0]!r}), row {i} holds {names[kind]} ({labels[i]!r}). Send every "
                "value in one form; nothing is guessed.",
                [Where(("train", "rows", i, j), "a different date form")],
            )
    keys = np.array([seconds for _, seconds in parsed], dtype=float)
    return _ranked(column, keys, "date" if first == "date" else "datetime")


def _ranked(column: str, key: np.ndarray, kind: str) -> Timeline:
    _, step = np.unique(key, return_inverse=True)
    step = step.reshape(-1)
    return Timeline(column, key, step, int(step.max()) + 1 if step.size else 0, kind)


# ---------------------------------------------------------------------------------------------
# Dependence figures


def acf(x: np.ndarray, nlags: int) -> np.ndarray:
    """Sample autocorrelations r_1..r_nlags of a series (mean removed, divisor n), as
    ``statsmodels.tsa.stattools.acf(x, nlags=nlags)[1:]``; zeros for a constant series."""
    x = np.asarray(x, dtype=float) - np.mean(x)
    n = x.size
    c0 = float(x @ x)
    if c0 <= 0 or n < 2:
        return np.zeros(nlags)
    return np.array([float(x[: n - h] @ x[h:]) / c0 if h < n else 0.0 for h in range(1, nlags + 1)])


def step_means(resid: np.ndarray, step: np.ndarray, steps: int) -> np.ndarray:
    """The mean residual at each step, in time order (rows sharing a time stamp averaged)."""
    total = np.bincount(step, weights=resid, minlength=steps)
    count = np.bincount(step, minlength=steps)
    return total / np.maximum(count, 1)


@dataclass(frozen=True)
class Dependence:
    """Serial dependence of a residual series: what the answers report as
    ``tuning.dependence``."""

    lag1: float
    ljung_box_p: float
    ljung_box_lags: int
    effective_rows: float
    order: str  # "order_by" or "arrival"
    noise_lag1: float | None = None  # the pilot's estimate of the noise's lag-1 correlation
    noise_steps: int | None = None  # the steps the pilot used

    def report(self) -> dict[str, float | int | str]:
        return {
            "lag1": self.lag1,
            "ljung_box_p": self.ljung_box_p,
            "ljung_box_lags": self.ljung_box_lags,
            "effective_rows": self.effective_rows,
            "order": self.order,
            "noise_lag1": self.noise_lag1,
        }

    @property
    def found(self) -> bool:
        """Whether the figures show dependence (see DEPENDENCE_ALPHA)."""
        residuals = self.ljung_box_p < DEPENDENCE_ALPHA and abs(self.lag1) >= DEPENDENCE_MIN_LAG1
        return residuals or (
            self.noise_lag1 is not None
            and self.noise_steps is not None
            and self.noise_steps >= NOISE_MIN_STEPS
            and self.noise_lag1 >= noise_threshold(self.noise_steps)
        )


def noise_threshold(steps: int) -> float:
    """The pilot's noise estimate above which dependence is reported (see NOISE_Z)."""
    return max(NOISE_MIN_LAG1, NOISE_Z * float(np.sqrt(2.0 / steps)))


def dependence(series: np.ndarray, n_rows: int, order: str) -> Dependence | None:
    """Dependence figures of ``series`` (residuals in time order); None when shorter than
    MIN_STEPS.

    ``lag1`` is r_1; ``ljung_box_p`` the p-value of Q = m (m + 2) sum_{h <= H} r_h^2 / (m - h)
    against chi-squared with H = min(10, m // 5) degrees of freedom (m the series length), as
    ``statsmodels.stats.diagnostic.acorr_ljungbox(series, lags=[H])``; ``effective_rows`` is
    n (1 - rho) / (1 + rho) with rho = max(r_1, 0), n the training rows: the number of
    independent rows that would estimate a mean as well as n rows of an AR(1) series with
    that lag-1 correlation.
    """
    m = int(series.size)
    if m < MIN_STEPS:
        return None
    lags = max(1, min(LB_MAX_LAGS, m // 5))
    r = acf(series, lags)
    q = m * (m + 2) * float(np.sum(r**2 / (m - np.arange(1, lags + 1))))
    p = float(stats.chi2.sf(q, lags))
    rho = max(float(r[0]), 0.0)
    return Dependence(float(r[0]), p, lags, n_rows * (1 - rho) / (1 + rho), order)


def difference_lag1(series: np.ndarray, piece: np.ndarray) -> float:
    """The lag-1 correlation of an AR(1) noise estimated from first differences.

    For e_t = phi e_{t-1} + u_t, the differences d_t = e_t - e_{t-1} have lag-1 correlation
    -(1 - phi) / 2, so phi = 1 + 2 corr(d_t, d_{t+1}). Differencing removes a part of the
    series that varies slowly in time (a pilot fit's bias, when the features follow time), so
    the estimate sees the noise. Only differences and pairs of differences within one
    ``piece`` (a pilot fold) are used. The series is first clipped at a modified z-score of
    3.5 (median +/- 3.5 MAD / 0.6745, the rule of ``unusual_response``), so that one outlying
    reading, whose difference may lack its partner at a piece's end, cannot pass for
    persistence. Clipped to [0, 0.99]; 0 with fewer than MIN_STEPS usable pairs.
    """
    med = float(np.median(series))
    mad = float(np.median(np.abs(series - med))) / 0.6745
    if mad > 0:
        series = np.clip(series, med - 3.5 * mad, med + 3.5 * mad)
    d = np.diff(series)
    same = piece[1:] == piece[:-1]
    pair = same[1:] & same[:-1]
    if np.count_nonzero(pair) < MIN_STEPS:
        return 0.0
    a, b = d[:-1][pair], d[1:][pair]
    used = np.concatenate([a, b])
    mean = used.mean()
    c0 = float(np.mean((used - mean) ** 2))
    if c0 <= 0:
        return 0.0
    r = float(np.mean((a - mean) * (b - mean))) / c0
    return float(np.clip(1.0 + 2.0 * r, 0.0, 0.99))


def default_gap(phi: float, steps: int) -> tuple[int, bool]:
    """The gap, in steps, for AR(1) noise with lag-1 correlation ``phi``.

    The rule: the last lag h whose correlation phi^h is still at least GAP_ACF_LEVEL (0.1), so
    that the rows left out around a held-out row are those whose noise still carries over to
    it (0 when phi < 0.1). It is at most GAP_MAX_SHARE of the steps; the second value says
    whether that bound applied.
    """
    most = int(GAP_MAX_SHARE * steps)
    if phi < GAP_ACF_LEVEL or most < 1:
        return 0, False
    gap = int(np.floor(np.log(GAP_ACF_LEVEL) / np.log(phi) + 1e-9))
    return (most, True) if gap > most else (gap, False)
