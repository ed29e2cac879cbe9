"""What every method offers the tuning loop, and the checks shared by their parameters."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

from nearwise.core.errors import InvalidValue, NotApplicable, UnknownName, Where
from nearwise.core.tuning import Folds


@dataclass(frozen=True)
class Param:
    """A method parameter as the catalogue describes it.

    ``kind`` is ``integer``, ``number``, ``choice`` or ``boolean``. A ``tunable`` parameter
    has a default grid; ``simpler`` says which direction of it gives the simpler model.
    """

    name: str
    kind: str
    default: Any
    doc: str
    low: float | None = None
    high: float | None = None
    choices: tuple[str, ...] = ()
    tunable: bool = False
    simpler: str | None = None
    data_range: bool = False  # the range depends on the data; the method checks it later

    def describe(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "name": self.name,
            "type": self.kind,
            "doc": self.doc,
            "tunable": self.tunable,
        }
        if self.default is not None:
            out["default"] = self.default
        if self.low is not None:
            out["minimum"] = self.low
        if self.high is not None:
            out["maximum"] = self.high
        if self.choices:
            out["choices"] = list(self.choices)
        if self.simpler:
            out["simpler"] = self.simpler
        return out

    def check(self, value: Any, path: tuple) -> Any:
        """Check one value against the parameter's type and range; return it unchanged."""
        ok = True
        if self.kind == "integer":
            ok = isinstance(value, int) and not isinstance(value, bool)
            expect = "an integer"
        elif self.kind == "number":
            ok = isinstance(value, int | float) and not isinstance(value, bool)
            ok = ok and bool(np.isfinite(value))
            expect = "a finite number"
        elif self.kind == "boolean":
            ok = isinstance(value, bool)
            expect = "true or false"
        else:
            ok = isinstance(value, str) and value in self.choices
            expect = "one of " + ", ".join(self.choices)
        if ok and self.kind in ("integer", "number") and not self.data_range:
            ok = (self.low is None or value >= self.low) and (
                self.high is None or value <= self.high
            )
            expect = f"{expect} in [{self.low}, {self.high if self.high is not None else 'inf'}]"
        if not ok:
            raise InvalidValue(
                f"`{self.name}` must be {expect}; got {value!r}.",
                [Where(path, f"expected {expect}")],
            )
        return value


class Fitted(Protocol):
    """A model fitted to all usable training rows."""

    df: float | None
    fitted: np.ndarray

    def predict(self, Xq: np.ndarray) -> np.ndarray: ...

    def summary(self, names: tuple[str, ...]) -> dict[str, Any]: ...

    def notices(self) -> list: ...


@dataclass(frozen=True)
class PathResult:
    """Out-of-fold predictions for every candidate, and their effective degrees of freedom.

    ``oof`` has shape (candidates, repeats, n). For ``gcv`` it holds fitted values (one
    repeat) and ``gcv_scale`` holds 1 - df/n per candidate. For K-fold, ``fold_models`` holds
    the models of the first repeat's folds, in fold order, kept from the path so that
    intervals need no refit: each has ``predict(Xq, c)`` for candidate index c.
    """

    oof: np.ndarray
    df: np.ndarray
    gcv_scale: np.ndarray | None = None
    fold_models: tuple[FoldModel, ...] = ()


class FoldModel(Protocol):
    """A model fitted to one training fold, for every candidate of the path."""

    def predict(self, Xq: np.ndarray, c: int) -> np.ndarray: ...


CV_PLUS_DOC = (
    "K-fold CV+ (jackknife+ with schemes loo and gcv), built from the tuning's own fold models "
    "and out-of-fold residuals with no refit. For exchangeable rows its coverage is at least "
    "1 - 2 alpha - sqrt(2/n) (jackknife+: 1 - 2 alpha), alpha = 1 - level, and in practice "
    "close to 1 - alpha (Barber, Candes, Ramdas & Tibshirani 2021). With `adaptive`, residuals "
    "are divided by the mean absolute out-of-fold residual of the max(10, sqrt(n)) nearest "
    "rows and multiplied back at the query (Lei et al. 2018, section 5.2). Bounds are widened "
    "where needed so that lower <= value <= upper. With `tuning.order_by`: CV+ on contiguous "
    "blocks (`blocks`) or the jackknife on leave-a-window-out residuals (`window`), widened by "
    "sqrt(1 + 1/m) for m effective rows; no finite-sample guarantee for dependent rows. "
    "With `weight_by` the residuals are scaled by sqrt(w_i) and the interval at a query row "
    "by 1 / sqrt(w0), w0 its weight (1 unless the query table holds the weight column)."
)


def row_weights(work: Mapping[str, Any] | None) -> np.ndarray | None:
    """The rows' precision weights, ``work["weights"]`` (positive, one per row in the order of
    ``X``), or None when every row weighs 1.

    A weight w_i says Var(noise_i) = sigma^2 / w_i: every method minimizes the weighted sum of
    squares sum_i w_i (y_i - f(x_i))^2 (plus its penalty), or, for kNN, averages the
    neighbors' targets with weights w_i. The linear smoothers work on the rows multiplied by
    sqrt(w_i), where their algebra is the unweighted one.
    """
    return None if work is None else work.get("weights")


class Method:
    """Base class: parameter handling shared by every method.

    Subclasses set the class attributes and implement ``candidates``, ``path`` and ``fit``.
    The pipeline calls them in that order on the same data; ``work`` is a scratch dict for
    that one run, where a method may keep a factorization that a later step can reuse, and
    where the pipeline passes the rows' weights (``work["weights"]``, see :func:`row_weights`).
    """

    name: str = ""
    summary: str = ""
    min_features: int = 1
    max_features: int | None = None
    schemes: tuple[str, ...] = ("kfold", "loo", "gcv", "window", "blocks")
    params: tuple[Param, ...] = ()
    tuned: str = ""
    default_grid: str = ""
    interval_kinds: tuple[str, ...] = ("cv_plus",)
    std_error_doc: str = ""
    model_interval_doc: str = ""
    references: tuple[str, ...] = ()
    #: Whether the method takes categorical features (``categorical``), and how.
    categorical: bool = True
    categorical_doc: str = ""

    def param(self, name: str) -> Param:
        return next(p for p in self.params if p.name == name)

    def settings(self, given: Mapping[str, Any]) -> dict[str, Any]:
        """Defaults merged with the caller's fixed values, each checked; unknown names refused."""
        names = [p.name for p in self.params]
        out: dict[str, Any] = {}
        for key, value in given.items():
            if key not in names:
                raise UnknownName(
                    f"`{key}` is not a parameter of {self.name}; its parameters are "
                    f"{', '.join(names)}.",
                    [Where(("params", key), "unknown parameter")],
                )
            out[key] = self.param(key).check(value, ("params", key))
        for p in self.params:
            if p.name not in out and p.default is not None and not p.tunable:
                out[p.name] = p.default
        return out

    def tuned_for(self, settings: Mapping[str, Any]) -> str:
        """The parameter tuned under these settings (a method may tune different ones)."""
        return self.tuned

    def schemes_for(self, settings: Mapping[str, Any]) -> tuple[str, ...]:
        """The tuning schemes offered under these settings."""
        return self.schemes

    def interval_kinds_for(self, settings: Mapping[str, Any]) -> tuple[str, ...]:
        """The interval kinds offered under these settings."""
        return self.interval_kinds

    def is_bound(self, value: Any, folds: Folds, work: Mapping[str, Any] | None = None) -> bool:
        """Whether ``value`` is a hard limit of the tuned parameter (no widening possible)."""
        return False

    def check_range(self, settings: Mapping[str, Any], grid, folds: Folds) -> None:
        """Check values whose range depends on the data (``Param.data_range``) against the
        folds. The pipeline calls it before the cost estimate, so that an out-of-range value
        is refused as such and never priced; none by default."""

    def check_grid(self, grid: Mapping[str, Sequence[Any]], settings: Mapping[str, Any]):
        """Return the caller's candidate list for the tuned parameter, or None for the default."""
        tuned = self.tuned_for(settings)
        for key in grid:
            if key != tuned:
                known = [p.name for p in self.params]
                if key in known:
                    raise NotApplicable(
                        f"`{key}` is not tuned by {self.name}; only `{tuned}` takes a grid. "
                        f"Fix `{key}` in `params` instead.",
                        [Where(("grid", key), "not a tuned parameter")],
                    )
                raise UnknownName(
                    f"`{key}` is not a parameter of {self.name}; its tuned parameter is `{tuned}`.",
                    [Where(("grid", key), "unknown parameter")],
                )
        if tuned in grid and tuned in settings:
            raise InvalidValue(
                f"`{tuned}` is given both in `params` (fixed) and in `grid` (tuned); give one.",
                [Where(("grid", tuned), "also fixed in params")],
            )
        if tuned not in grid:
            return None
        values = list(grid[tuned])
        if not values:
            raise InvalidValue(
                f"the grid for `{tuned}` is empty; give at least one value or leave it out.",
                [Where(("grid", tuned), "empty list")],
            )
        p = self.param(tuned)
        for i, v in enumerate(values):
            p.check(v, ("grid", tuned, i))
        if len(set(values)) != len(values):
            raise InvalidValue(
                f"the grid for `{tuned}` repeats a value.",
                [Where(("grid", tuned), "duplicate values")],
            )
        return values

    def describe(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "summary": self.summary,
            "features": {"min": self.min_features, "max": self.max_features},
            "parameters": [p.describe() for p in self.params],
            "tuned": self.tuned,
            "default_grid": self.default_grid,
            "schemes": list(self.schemes),
            "interval_kinds": list(self.interval_kinds),
            "intervals": {
                k: (CV_PLUS_DOC if k == "cv_plus" else self.model_interval_doc)
                for k in self.interval_kinds
            },
            "std_error": self.std_error_doc,
            "references": list(self.references),
        }

    # Implemented by subclasses -----------------------------------------------------------
    def order(self, values: Sequence[Any]) -> list[Any]:  # simplest first
        raise NotImplementedError

    def candidates(self, X, y, folds: Folds, settings, grid, work=None) -> list[Any]:
        raise NotImplementedError

    def path(self, X, y, folds: Folds, settings, values, work=None) -> PathResult:
        raise NotImplementedError

    def fit(self, X, y, settings, value, work=None) -> Fitted:
        raise NotImplementedError
