"""What a caller asks for, as plain frozen data (built by the web layer, read by the core)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from nearwise.core.budget import Deadline
from nearwise.core.data import Table

SCHEMES = ("kfold", "loo", "gcv", "window", "blocks")
#: Schemes that hold rows out along ``tuning.order_by`` (they need it).
ORDERED_SCHEMES = ("window", "blocks")
RULES = ("one_se", "min")
METRICS = ("rmse", "mae")
INTERVAL_KINDS = ("cv_plus", "model")


@dataclass(frozen=True)
class TuningSpec:
    """Cross-validation settings. ``folds`` applies to ``kfold`` and ``blocks``, ``repeats`` to
    ``kfold`` only. ``order_by`` names the column that places rows in time; ``gap`` (steps of
    it) is left out around held-out rows by ``window`` and ``blocks`` (None: chosen from the
    data)."""

    scheme: str = "kfold"
    folds: int = 5
    repeats: int = 1
    seed: int = 0
    rule: str = "one_se"
    metric: str = "rmse"
    group_by: str | None = None
    order_by: str | None = None
    gap: int | None = None


@dataclass(frozen=True)
class IntervalSpec:
    """Prediction interval settings. ``adaptive`` scales the intervals by the local spread of
    the residuals."""

    level: float = 0.9
    kind: str = "cv_plus"
    adaptive: bool = False


@dataclass(frozen=True)
class Caps:
    """Limits on the work one request may ask for, checked before any fitting (None: none).

    ``names`` maps each limit to how the caller should refer to it in messages (the web layer
    passes the names of its settings).
    """

    grid: int | None = None  # candidates in one grid list
    fold_fits: int | None = None  # folds x repeats of kfold tuning
    methods: int | None = None  # methods in one compare (or auto)
    cost_s: float | None = None  # estimated seconds of fitting on one core
    cells: int | None = None  # rows x columns of a design with categorical columns coded
    # estimated seconds of the hull test's linear programs (4 to 8 dimensions), counted from
    # the data as they run; rows not decided within it are flagged hull_not_tested
    hull_cost_s: float | None = None
    names: Mapping[str, str] = field(default_factory=dict)

    def label(self, limit: str) -> str:
        """How a message names ``limit``: ``max_grid = 200`` or the name passed in ``names``."""
        value = getattr(self, limit)
        shown = f"{value:g}" if isinstance(value, float) else str(value)
        return f"{self.names.get(limit, 'max_' + limit)} = {shown}"


@dataclass(frozen=True)
class Job:
    """One predict request, after the envelope was checked and the tables parsed.

    ``params`` and ``grid`` hold the caller's values as sent (JSON scalars and lists); the
    core checks them against the method's constraints. ``time_budget_s`` bounds the run;
    ``deadline``, when given, replaces it: the caller's clock, started when the caller chose
    (the web layer: once the request is parsed) and carrying its ``abandoned`` callable, so
    that the same budget also bounds what the caller does after the run (pictures, CSV).
    """

    method: str
    train: Table
    target: str
    features: Sequence[str] | None = None
    query: Table | None = None
    params: Mapping[str, Any] = field(default_factory=dict)
    grid: Mapping[str, Sequence[Any]] = field(default_factory=dict)
    tuning: TuningSpec = field(default_factory=TuningSpec)
    interval: IntervalSpec = field(default_factory=IntervalSpec)
    time_budget_s: float | None = None
    methods: Sequence[str] | None = None  # for compare: the methods to rank (None: all that apply)
    curve_points: int = 0  # one feature: also evaluate the fit on this many points (pictures)
    caps: Caps = field(default_factory=Caps)
    weight_by: str | None = None  # a train column of row weights (precision; 0 drops a row)
    # Feature columns holding categories, and reference levels by column (see categories.py).
    categorical: Sequence[str] = ()
    categorical_reference: Mapping[str, Any] = field(default_factory=dict)
    deadline: Deadline | None = field(default=None, compare=False, repr=False)

    def clock(self) -> Deadline:
        """The run's deadline: ``deadline``, or a new one of ``time_budget_s`` from now."""
        return self.deadline if self.deadline is not None else Deadline(self.time_budget_s)
