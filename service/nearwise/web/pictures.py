"""SVG pictures of a fit and of its tuning, for ``Accept: image/svg+xml`` or ``format=svg``.

Drawn with matplotlib's object interface (``Figure`` on an SVG canvas): no pyplot, no display,
no backend switch. The core supplies what to draw (the fit and its band on an even grid, the
tuning path); this module only places it on axes.

Output is deterministic: the same result gives the same bytes. The SVG writer reads a few
settings from matplotlib's global ``rcParams`` (the hash salt behind element ids, text as text,
the font); each picture is drawn inside ``rc_context`` under one module lock, so concurrent
requests never see each other's settings and nothing leaks to other code.

Stable element ids (``gid``) let clients and tests find the parts of a picture:

- fit panel (``fit-panel``): ``data``, ``fit``, ``band``, ``query``, ``query-bars``,
  ``flagged``, ``flagged-bars``, ``flag-note-<i>``; in a comparison ``fit-<method>``;
- tuning panel (``cv-panel``): ``cv-path``, ``cv-se``, ``best``, ``chosen``, ``one-se-line``;
  in a comparison ``cv-path-<method>``, ``cv-se-<method>``, ``chosen-<method>`` and
  ``recommended``;
- with ``tuning.order_by``, below them the residuals over time (``residuals-over-time``):
  ``residual-points``, ``residual-zero``, ``lag1-note`` (see :mod:`nearwise.web.picture_series`);
- ``title``, ``warnings`` (the warning codes of the answer) and ``legend-fit``/``legend-cv``.
"""

from __future__ import annotations

import io
import textwrap
import threading
from collections.abc import Callable, Sequence
from typing import Any

import matplotlib
import numpy as np
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.backends.backend_svg import FigureCanvasSVG
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FormatStrFormatter, LogLocator, NullFormatter

from nearwise.core.compare import CompareResult
from nearwise.core.results import Notice, PredictResult, TuningReport
from nearwise.web.picture_series import draw_residuals

MEDIA_TYPE = "image/svg+xml"

# Settings the SVG writer and the text layout read from rcParams. The bundled DejaVu Sans keeps
# text metrics (so positions in the file) the same on every machine.
_RC: dict[str, Any] = {
    "svg.hashsalt": "nearwise",
    "svg.fonttype": "none",  # text stays <text>: searchable, small, readable by screen readers
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],
    "font.size": 10.0,
    "axes.titlesize": 11.0,
    "axes.labelsize": 10.0,
    "legend.fontsize": 8.5,
    "xtick.labelsize": 9.0,
    "ytick.labelsize": 9.0,
    "text.usetex": False,
    "text.parse_math": False,  # column names with $ are names, not formulas
    "axes.grid": True,
    "grid.alpha": 0.3,
}
_LOCK = threading.Lock()
#: Seconds between two checks of the time budget while waiting for the lock.
LOCK_POLL_S = 0.1
#: Points drawn per series at most (training data, query points, residuals over time): a
#: picture of 250,000 points took 20 s to write and weighed 65 MB, one of 10,000 points
#: 0.7 s. Beyond it, evenly spaced ranks along x are drawn and the legend says so.
MAX_POINTS = 10_000
#: Query points drawn with their interval bars at most (each is two SVG elements).
MAX_QUERY_POINTS = 2_000
Check = Callable[[], None]

_INK = "#222222"
_DATA = "#7f7f7f"
_FIT = "#1f5fa8"
_QUERY = "#2a7d2e"
_FLAG = "#c0392b"
_BEST = "#8e44ad"
_CHOSEN = "#d4860b"
_METHOD_COLORS = {
    "knn": "#1f77b4",
    "linear": "#2ca02c",
    "spline": "#d62728",
    "additive": "#9467bd",
}
_SPARE_COLORS = ("#8c564b", "#e377c2", "#17becf", "#bcbd22", "#ff7f0e")
_MAX_NOTES = 8  # flagged points annotated one by one; beyond this the legend names the codes
_MAX_NAME = 40


# --------------------------------------------------------------------------- public functions


def predict_svg(
    result: PredictResult,
    train_x: np.ndarray | None,
    train_y: np.ndarray | None,
    query_x: np.ndarray | None,
    *,
    train_rows: np.ndarray | None = None,
    check: Check | None = None,
) -> str:
    """An SVG picture of a predict answer.

    With one feature and ``train_x``/``train_y`` (the feature and target of the usable training
    rows, in table order) or ``result.curve``: a fit panel with the data, the fitted curve and
    its interval band, and the query points (``query_x``, the query's feature column) with their
    interval bars; flagged query points get their own marker and their codes. Always: a tuning
    panel, the cross-validated error ± one standard error against effective degrees of freedom,
    with the lowest-error and the chosen candidates marked. With ``order_by`` (``result.series``):
    below these, the out-of-fold residuals in time order with their lag-1 autocorrelation.

    Without a query the predictions concern the training rows; rows with flags (for example
    ``unusual_response``) are then circled on the data. ``train_rows`` gives the training-table
    row number of each entry of ``train_x`` when rows were dropped (default: 0, 1, ...).

    Large answers are thinned (see :data:`MAX_POINTS`); ``check`` (the request's time
    budget) is called while waiting for the drawing lock and between the drawing steps.
    """
    fit_panel = len(result.features) == 1 and (
        result.curve is not None or (train_x is not None and train_y is not None)
    )
    title = f"{result.method} fit of {_name(result.target)} {_against(result.features)}"
    chosen = ", ".join(f"{k} = {_fmt(v)}" for k, v in result.params.items())

    series = result.series

    def draw(fig: Figure, check: Check) -> None:
        axes = _panels(fig, 2 if fit_panel else 1, below=series is not None)
        if fit_panel:
            _draw_predict_fit(axes[0], result, train_x, train_y, query_x, train_rows)
            check()
        _draw_tuning(axes[1 if fit_panel else 0], result.tuning, result.params)
        if series is not None:
            check()
            draw_residuals(axes[-1], _thin_series(series), result.tuning, _name(series["column"]))
        _finish(fig, title, f"parameters: {chosen}", result.warnings)

    width = 11.0 if fit_panel else 6.4
    return _render(draw, (width, 5.6 if series is None else 9.2), title, check)


def compare_svg(
    result: CompareResult,
    train_x: np.ndarray | None,
    train_y: np.ndarray | None,
    *,
    check: Check | None = None,
) -> str:
    """An SVG picture of a comparison.

    With one feature: every method's fitted curve over the data on one chart (``result.curves``,
    and ``train_x``/``train_y`` when given). Always: every method's tuning path, cross-validated
    error against effective degrees of freedom, each method's chosen candidate marked and the
    recommended method's singled out.
    """
    fit_panel = len(result.features) == 1 and (
        bool(result.curves) or (train_x is not None and train_y is not None)
    )
    title = f"Methods compared for {_name(result.target)} {_against(result.features)}"
    subtitle = f"recommended: {result.recommended}"

    def draw(fig: Figure, check: Check) -> None:
        axes = _panels(fig, 2 if fit_panel else 1)
        if fit_panel:
            _draw_compare_fit(axes[0], result, train_x, train_y)
            check()
        _draw_compare_tuning(axes[-1], result)
        _finish(fig, title, subtitle, result.warnings)

    return _render(draw, (11.0, 5.6) if fit_panel else (6.4, 5.6), title, check)


# --------------------------------------------------------------------------- figure plumbing


def _render(
    draw: Callable[[Figure, Check], None],
    size: tuple[float, float],
    title: str,
    check: Check | None = None,
) -> str:
    check = check or _unchecked
    # Wait for the lock while the budget lasts: another request may be drawing.
    while not _LOCK.acquire(timeout=LOCK_POLL_S):
        check()
    try:
        with matplotlib.rc_context():
            matplotlib.rcdefaults()
            matplotlib.rcParams.update(_RC)
            fig = Figure(figsize=size, layout="constrained")
            FigureCanvasSVG(fig)
            check()
            draw(fig, check)
            check()
            out = io.BytesIO()
            fig.savefig(
                out,
                format="svg",
                metadata={"Date": None, "Creator": "nearwise", "Title": title},
            )
    finally:
        _LOCK.release()
    return out.getvalue().decode("utf-8")


def _unchecked() -> None:
    return None


def _thin(x: np.ndarray, mask: np.ndarray | None = None, most: int = 0) -> np.ndarray:
    """Positions of at most ``most`` (default MAX_POINTS) of the entries of ``x`` selected by
    ``mask`` (default all): all of them, or evenly spaced ranks in the order of ``x``."""
    most = most or MAX_POINTS
    idx = np.flatnonzero(np.ones(x.shape[0], dtype=bool) if mask is None else mask)
    if idx.size <= most:
        return idx
    order = idx[np.argsort(x[idx], kind="stable")]
    return np.sort(order[np.linspace(0, idx.size - 1, most).round().astype(int)])


def _shown(label: str, kept: int, total: int) -> str:
    return label if kept == total else f"{label} ({kept:,} of {total:,} shown)"


def _thin_series(series: dict[str, Any]) -> dict[str, Any]:
    """The residuals over time, at most MAX_POINTS of them (evenly spaced in time order)."""
    t = np.asarray(series["t"])
    if t.shape[0] <= MAX_POINTS:
        return series
    keep = np.linspace(0, t.shape[0] - 1, MAX_POINTS).round().astype(int)
    return {**series, "t": t[keep], "residual": np.asarray(series["residual"])[keep]}


def _panels(fig: Figure, count: int, below: bool = False) -> list[Axes]:
    """``count`` panels side by side; with ``below``, one more under them, full width (last)."""
    if below:
        grid = fig.add_gridspec(2, count, height_ratios=(3.0, 2.0))
        axes = [fig.add_subplot(grid[0, i]) for i in range(count)]
        return [*_named(axes), fig.add_subplot(grid[1, :])]
    return _named(list(np.atleast_1d(fig.subplots(1, count))))


def _named(axes: list[Axes]) -> list[Axes]:
    count = len(axes)
    names = ["fit-panel", "cv-panel"] if count == 2 else ["cv-panel"]
    for ax, name in zip(axes, names, strict=True):
        ax.set_gid(name)
    return axes


def _finish(fig: Figure, title: str, subtitle: str, warnings: Sequence[Notice]) -> None:
    fig.suptitle(f"{title}\n{subtitle}", fontsize=12).set_gid("title")
    codes = list(dict.fromkeys(w.code for w in warnings))
    if codes:
        line = "\n".join(textwrap.wrap("Warnings: " + ", ".join(codes), 150))
        fig.supxlabel(line, fontsize=9, color=_FLAG).set_gid("warnings")


def _legend(ax: Axes, gid: str, extra: Sequence[Artist] = ()) -> None:
    handles = [*ax.get_legend_handles_labels()[0], *extra]
    if handles:
        # Below the panel, where it never hides data; the layout engine makes room for it.
        ax.legend(
            handles=handles,
            loc="upper center",
            bbox_to_anchor=(0.5, -0.13),
            ncols=2,
            frameon=False,
        ).set_gid(gid)


def _df_axis(ax: Axes, x: np.ndarray) -> None:
    """A log scale when the effective df span more than a factor of 20 (kNN reaches n)."""
    x = x[np.isfinite(x)]
    if x.size and x.min() > 0 and x.max() > 20 * x.min():
        ax.set_xscale("log")
        ax.xaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))
        ax.xaxis.set_major_formatter(FormatStrFormatter("%g"))
        ax.xaxis.set_minor_formatter(NullFormatter())


# --------------------------------------------------------------------------- fit panels


def _draw_predict_fit(
    ax: Axes,
    result: PredictResult,
    train_x: np.ndarray | None,
    train_y: np.ndarray | None,
    query_x: np.ndarray | None,
    train_rows: np.ndarray | None,
) -> None:
    feature, target = result.features[0], result.target
    pred, curve = result.predictions, result.curve
    tx, ty = _column(train_x), _column(train_y)
    qx = _column(query_x)
    if qx is not None and qx.shape[0] != pred.value.shape[0]:
        qx = None
    has_data = tx is not None and ty is not None and tx.shape == ty.shape

    # y range from every finite figure drawn, so that unbounded interval ends can be clipped.
    finite = [pred.value]
    if has_data:
        finite.append(ty)
    if curve is not None:
        finite += [curve["value"], curve["lower"], curve["upper"]]
    if qx is not None and pred.lower is not None and pred.upper is not None:
        finite += [pred.lower, pred.upper]
    lo, hi = _limits(finite)
    ax.set_ylim(lo, hi)

    if has_data:
        keep = _thin(tx)
        label = _shown("training data", keep.size, tx.shape[0])
        ax.scatter(tx[keep], ty[keep], s=14, color=_DATA, alpha=0.7, linewidths=0, label=label)
        ax.collections[-1].set_gid("data")
    level = (result.interval or {}).get("level")
    band_label = f"{level:.0%} interval" if isinstance(level, float) else "interval"
    if curve is not None:
        cx = np.asarray(curve["x"], dtype=float).ravel()
        cv = _finite_or_nan(curve["value"])
        if curve.get("lower") is not None and curve.get("upper") is not None:
            low = np.clip(np.asarray(curve["lower"], dtype=float), lo, hi)
            up = np.clip(np.asarray(curve["upper"], dtype=float), lo, hi)
            ok = np.isfinite(low) & np.isfinite(up) & np.isfinite(cv)
            if ok.any():
                band = ax.fill_between(
                    cx, low, up, where=ok, color=_FIT, alpha=0.18, linewidth=0, label=band_label
                )
                band.set_gid("band")
        ax.plot(cx, cv, color=_FIT, linewidth=2, label=f"fit ({result.method})", gid="fit")

    if qx is not None:
        flags = pred.flags if len(pred.flags) == qx.shape[0] else ((),) * qx.shape[0]
        flagged = np.array([bool(f) for f in flags], dtype=bool)
        bars = (pred.lower, pred.upper, lo, hi)
        _draw_points(ax, qx, pred.value, bars, ~flagged, "query", "query with interval")
        label = _flag_label("flagged query", flags, flagged)
        _draw_points(ax, qx, pred.value, bars, flagged, "flagged", label)
        _flag_notes(ax, qx, pred.value, flags, flagged, "query row")
    elif has_data and pred.flags:
        rows = np.arange(tx.shape[0]) if train_rows is None else np.asarray(train_rows, int)
        if rows.shape == tx.shape and (rows.size == 0 or rows.max() < len(pred.flags)):
            flags = tuple(pred.flags[r] for r in rows)
            flagged = np.array([bool(f) for f in flags], dtype=bool)
            if flagged.any():
                total = int(flagged.sum())
                flagged = np.isin(np.arange(tx.shape[0]), _thin(tx, flagged))
                ax.scatter(
                    tx[flagged],
                    ty[flagged],
                    s=70,
                    facecolors="none",
                    edgecolors=_FLAG,
                    linewidths=1.5,
                    label=_shown(
                        _flag_label("flagged training row", flags, flagged),
                        int(flagged.sum()),
                        total,
                    ),
                )
                ax.collections[-1].set_gid("flagged")
                _flag_notes(ax, tx, ty, flags, flagged, "row", rows)

    ax.set_xlabel(_name(feature))
    ax.set_ylabel(_name(target))
    ax.set_title("Fit, interval band and queries" if qx is not None else "Fit and interval band")
    _legend(ax, "legend-fit")


def _draw_points(ax, x, value, bars, mask, name: str, label: str) -> None:
    """Query points with interval bars: the plain ones, or the flagged ones in their own marker
    and color. ``bars`` is (lower, upper, lo, hi): unbounded ends are clipped to [lo, hi]."""
    if not mask.any():
        return
    total = int(mask.sum())
    mask = np.isin(np.arange(x.shape[0]), _thin(x, mask, MAX_QUERY_POINTS))
    label = _shown(label, int(mask.sum()), total)
    lower, upper, lo, hi = bars
    plain = name == "query"
    color = _QUERY if plain else _FLAG
    if lower is not None and upper is not None:
        ax.vlines(
            x[mask],
            np.clip(lower[mask], lo, hi),
            np.clip(upper[mask], lo, hi),
            color=color,
            linewidth=1.2,
            alpha=0.8,
        ).set_gid(f"{name}-bars")
    ax.scatter(
        x[mask],
        _finite_or_nan(value[mask]),
        s=36 if plain else 64,
        marker="D" if plain else "X",
        color=color,
        edgecolors="white",
        linewidths=0.6,
        zorder=4,
        label=label,
    )
    ax.collections[-1].set_gid(name)


def _flag_label(what: str, flags: Sequence[Sequence[str]], mask: np.ndarray) -> str:
    codes = dict.fromkeys(c for f, m in zip(flags, mask, strict=True) if m for c in f)
    return f"{what}: {', '.join(codes)}"


def _flag_notes(ax, x, y, flags, mask, word: str, rows: np.ndarray | None = None) -> None:
    """Label each flagged point with its row number and codes, when there are only a few."""
    idx = np.flatnonzero(mask)
    if idx.size > _MAX_NOTES:
        return
    left, right = ax.get_xlim()
    for k, i in enumerate(idx):
        row = int(i if rows is None else rows[i])
        if not np.isfinite(y[i]):
            continue
        east = x[i] > (left + right) / 2  # write toward the middle of the panel
        note = ax.annotate(
            f"{word} {row}: {', '.join(flags[i])}",
            (float(x[i]), float(y[i])),
            xytext=(-6 if east else 6, 6),
            textcoords="offset points",
            ha="right" if east else "left",
            fontsize=7.5,
            color=_FLAG,
        )
        note.set_gid(f"flag-note-{k}")


def _draw_compare_fit(ax: Axes, result: CompareResult, train_x, train_y) -> None:
    tx, ty = _column(train_x), _column(train_y)
    if tx is not None and ty is not None and tx.shape == ty.shape:
        keep = _thin(tx)
        label = _shown("training data", keep.size, tx.shape[0])
        ax.scatter(tx[keep], ty[keep], s=14, color=_DATA, alpha=0.7, linewidths=0, label=label)
        ax.collections[-1].set_gid("data")
    for i, name in enumerate(_method_order(result)):
        curve = (result.curves or {}).get(name)
        if curve is None:
            continue
        top = name == result.recommended
        ax.plot(
            np.asarray(curve["x"], dtype=float).ravel(),
            _finite_or_nan(curve["value"]),
            color=_method_color(name, i),
            linewidth=2.4 if top else 1.4,
            linestyle="-" if top else "--",
            zorder=3 if top else 2,
            label=f"{name} (recommended)" if top else name,
            gid=f"fit-{name}",
        )
    ax.set_xlabel(_name(result.features[0]))
    ax.set_ylabel(_name(result.target))
    ax.set_title("Each method's fit")
    _legend(ax, "legend-fit")


# --------------------------------------------------------------------------- tuning panels


def _path_points(report: TuningReport) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Candidate indices, x (df), error and SE of the candidates with a finite error."""
    idx = [i for i, e in enumerate(report.path) if e.error is not None]
    err = np.array([report.path[i].error for i in idx], dtype=float)
    se = np.array([np.nan if (s := report.path[i].error_se) is None else s for i in idx])
    df = np.array([np.nan if (d := report.path[i].df) is None else d for i in idx], dtype=float)
    return np.array(idx, dtype=int), df, err, se


def _index_of(report: TuningReport, params: dict[str, Any]) -> int | None:
    """The path position of the candidate whose tuned value equals ``params``'s."""
    for i, entry in enumerate(report.path):
        key, value = next(iter(entry.params.items()))
        if key in params and params[key] == value:
            return i
    return None


def _draw_tuning(ax: Axes, report: TuningReport, chosen_params: dict[str, Any]) -> None:
    idx, df, err, se = _path_points(report)
    use_df = idx.size > 0 and bool(np.all(np.isfinite(df)))
    x = df if use_df else idx.astype(float)
    tuned = next(iter(report.best), "")
    ax.plot(x, err, color=_FIT, marker="o", markersize=3.5, linewidth=1.4, label="CV error ± 1 SE")
    ax.lines[-1].set_gid("cv-path")
    ok = np.isfinite(se)
    if ok.any():
        ax.vlines(
            x[ok],
            (err - se)[ok],
            (err + se)[ok],
            color=_FIT,
            alpha=0.45,
            linewidth=1.0,
        ).set_gid("cv-se")
    best = _index_of(report, report.best)
    chosen = _index_of(report, chosen_params)
    pos = {int(c): k for k, c in enumerate(idx)}
    if best in pos:
        k = pos[best]
        ax.scatter(
            [x[k]],
            [err[k]],
            s=110,
            marker="s",
            facecolors="none",
            edgecolors=_BEST,
            linewidths=1.8,
            zorder=4,
            label="lowest error",
        )
        ax.collections[-1].set_gid("best")
        if report.rule == "one_se" and np.isfinite(se[k]):
            ax.axhline(
                err[k] + se[k],
                color=_BEST,
                linestyle=":",
                linewidth=1.0,
                label="lowest error + 1 SE",
            ).set_gid("one-se-line")
    if chosen in pos:
        k = pos[chosen]
        rule = "one-SE rule" if report.rule == "one_se" else "lowest error"
        value = _fmt(report.path[chosen].params[tuned])
        ax.scatter(
            [x[k]],
            [err[k]],
            s=150,
            marker="*",
            color=_CHOSEN,
            edgecolors=_INK,
            linewidths=0.6,
            zorder=5,
            label=f"chosen ({rule})",
        )
        ax.collections[-1].set_gid("chosen")
        ax.annotate(
            f"{tuned} = {value}",
            (float(x[k]), float(err[k])),
            xytext=(0, 10),
            textcoords="offset points",
            ha="center",
            fontsize=8,
            color=_INK,
        ).set_gid("chosen-note")
    if use_df:
        _df_axis(ax, x)
    ax.set_xlabel("effective degrees of freedom" if use_df else "candidate (simplest first)")
    ax.set_ylabel(f"CV error ({report.metric})")
    ax.set_title(f"Tuning {tuned} by {_scheme(report)}")
    _legend(ax, "legend-cv")


def _draw_compare_tuning(ax: Axes, result: CompareResult) -> None:
    rows = {r.method: r for r in result.ranking}
    every_df: list[np.ndarray] = []
    for i, name in enumerate(_method_order(result)):
        report = result.paths.get(name)
        if report is None:
            continue
        _, df, err, se = _path_points(report)
        keep = np.isfinite(df)
        if not keep.any():
            continue  # no effective df: nowhere to place it on this axis
        color = _method_color(name, i)
        top = name == result.recommended
        every_df.append(df[keep])
        ax.plot(
            df[keep],
            err[keep],
            color=color,
            marker="o",
            markersize=3,
            linewidth=2.0 if top else 1.2,
            label=name,
        )
        ax.lines[-1].set_gid(f"cv-path-{name}")
        ok = keep & np.isfinite(se)
        if ok.any():
            ax.vlines(
                df[ok], (err - se)[ok], (err + se)[ok], color=color, alpha=0.35, linewidth=0.9
            ).set_gid(f"cv-se-{name}")
        row = rows.get(name)
        if row is not None and row.df is not None:
            ax.scatter(
                [row.df],
                [row.error],
                s=60,
                marker="o",
                facecolors="none",
                edgecolors=color,
                linewidths=1.6,
                zorder=4,
            )
            ax.collections[-1].set_gid(f"chosen-{name}")
            if top:
                ax.scatter(
                    [row.df],
                    [row.error],
                    s=220,
                    marker="*",
                    color=_CHOSEN,
                    edgecolors=_INK,
                    linewidths=0.6,
                    zorder=5,
                    label=f"recommended: {name}",
                )
                ax.collections[-1].set_gid("recommended")
    metric = next(iter(result.paths.values())).metric if result.paths else "rmse"
    if every_df:
        _df_axis(ax, np.concatenate(every_df))
    ax.set_xlabel("effective degrees of freedom")
    ax.set_ylabel(f"CV error ({metric})")
    ax.set_title("Cross-validated error on shared folds")
    circle = Line2D(
        [],
        [],
        linestyle="none",
        marker="o",
        markerfacecolor="none",
        color=_INK,
        label="each method's choice",
    )
    _legend(ax, "legend-cv", [circle] if rows else [])


# --------------------------------------------------------------------------- small helpers


def _method_order(result: CompareResult) -> list[str]:
    """Methods in ranking order, then any others with a path or a curve."""
    names = [r.method for r in result.ranking]
    extra = [*result.paths, *(result.curves or {})]
    return list(dict.fromkeys([*names, *extra]))


def _method_color(name: str, i: int) -> str:
    return _METHOD_COLORS.get(name, _SPARE_COLORS[i % len(_SPARE_COLORS)])


def _scheme(report: TuningReport) -> str:
    if report.scheme == "loo":
        return "leave-one-out cross-validation"
    if report.scheme == "gcv":
        return "generalized cross-validation"
    if report.scheme == "window":
        return "leave-a-window-out cross-validation"
    if report.scheme == "blocks":
        return f"cross-validation on {report.folds} blocks in time"
    reps = f", {report.repeats} repeats" if report.repeats > 1 else ""
    return f"{report.folds}-fold cross-validation{reps}"


def _column(a: np.ndarray | None) -> np.ndarray | None:
    if a is None:
        return None
    a = np.asarray(a, dtype=float)
    return a[:, 0] if a.ndim == 2 else a.ravel()


def _finite_or_nan(a: Any) -> np.ndarray:
    a = np.asarray(a, dtype=float).ravel()
    return np.where(np.isfinite(a), a, np.nan)


def _limits(arrays: Sequence[Any]) -> tuple[float, float]:
    vals = [np.asarray(a, dtype=float).ravel() for a in arrays if a is not None]
    flat = np.concatenate(vals) if vals else np.empty(0)
    flat = flat[np.isfinite(flat)]
    if flat.size == 0:
        return -1.0, 1.0
    lo, hi = float(flat.min()), float(flat.max())
    pad = 0.06 * (hi - lo) if hi > lo else max(abs(lo), 1.0) * 0.1
    return lo - pad, hi + pad


def _fmt(v: Any) -> str:
    if isinstance(v, bool) or v is None:
        return str(v).lower()
    if isinstance(v, int | np.integer):
        return str(int(v))
    if isinstance(v, float | np.floating):
        return f"{float(v):.4g}"
    return str(v)


def _against(features: Sequence[str]) -> str:
    if len(features) == 1:
        return f"against {_name(features[0])}"
    return f"on {len(features)} features"


def _name(s: str) -> str:
    return s if len(s) <= _MAX_NAME else s[: _MAX_NAME - 1] + "…"
