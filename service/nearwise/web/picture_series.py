"""The residuals-over-time panel of a predict picture, drawn when the request names
``tuning.order_by``.

The core supplies the series (``PredictResult.series``: the time keys in time order, the
out-of-fold residuals of the chosen fit in the same order and their lag-1 autocorrelation); this
module only places it on axes. Element ids (``gid``): the panel ``residuals-over-time``, its
points ``residual-points``, the zero line ``residual-zero`` and the note ``lag1-note``.

Dates and date-times arrive as seconds since 1970-01-01 UTC; they are drawn as ``datetime64``
values with UTC locators and formatters, so the machine's time zone never shows.
"""

from __future__ import annotations

from datetime import UTC
from typing import Any

import numpy as np
from matplotlib.axes import Axes
from matplotlib.dates import AutoDateLocator, ConciseDateFormatter

from nearwise.core.results import TuningReport

_INK = "#222222"  # the colors of the other panels (see pictures.py)
_POINT = "#1f5fa8"


def draw_residuals(ax: Axes, series: dict[str, Any], report: TuningReport, label: str) -> None:
    """The out-of-fold residuals against ``order_by`` (``label`` names it on the x axis), a zero
    line, and a note with the lag-1 autocorrelation and, for the ordered schemes, the gap."""
    ax.set_gid("residuals-over-time")
    t = np.asarray(series["t"], dtype=float).ravel()
    resid = np.asarray(series["residual"], dtype=float).ravel()
    ok = np.isfinite(t) & np.isfinite(resid)
    ax.axhline(0.0, color=_INK, linewidth=1.0, alpha=0.8).set_gid("residual-zero")
    if ok.any():
        x: np.ndarray = t[ok]
        if series.get("kind") in ("date", "datetime"):
            x = _as_dates(x)
            locator = AutoDateLocator(tz=UTC)
            ax.xaxis.set_major_locator(locator)
            ax.xaxis.set_major_formatter(ConciseDateFormatter(locator, tz=UTC))
        ax.scatter(x, resid[ok], s=12, color=_POINT, alpha=0.75, linewidths=0, zorder=3)
        ax.collections[-1].set_gid("residual-points")
    ax.text(
        0.01,
        0.97,
        _note(series.get("lag1"), report),
        transform=ax.transAxes,
        ha="left",
        va="top",
        fontsize=8.5,
        color=_INK,
        bbox={"boxstyle": "round,pad=0.3", "facecolor": "white", "edgecolor": "#bbbbbb"},
        zorder=5,
    ).set_gid("lag1-note")
    ax.set_xlabel(label)
    ax.set_ylabel("out-of-fold residual")
    ax.set_title("Out-of-fold residuals in time order")


def lag1_text(lag1: float | None) -> str:
    """How the note writes the lag-1 autocorrelation."""
    if lag1 is None or not np.isfinite(lag1):
        return "lag-1 autocorrelation: too few time steps"
    return f"lag-1 autocorrelation {lag1:.2f}"


def _note(lag1: float | None, report: TuningReport) -> str:
    lines = [lag1_text(lag1)]
    if report.scheme in ("window", "blocks") and report.gap is not None:
        steps = f"{report.gap} step" + ("" if report.gap == 1 else "s")
        source = {"data": " (from the data)", "caller": " (as requested)"}
        blocks = report.scheme == "blocks" and report.folds
        scheme = f"{report.folds} blocks" if blocks else report.scheme
        lines.append(f"{scheme}, gap {steps}{source.get(report.gap_source or '', '')}")
    return "\n".join(lines)


def _as_dates(seconds: np.ndarray) -> np.ndarray:
    """Seconds since 1970-01-01 UTC as ``datetime64[us]`` (naive, so read as UTC)."""
    return np.round(seconds * 1e6).astype(np.int64).astype("datetime64[us]")
