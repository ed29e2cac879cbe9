"""Tables to float arrays: column resolution, finite checks, dropped rows and feature scaling.

The web layer hands over :class:`Table` objects that were parsed in one vectorised pass; here
the numbers are checked against what the fit needs. Kernels downstream trust these arrays.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from nearwise.core import categories
from nearwise.core.errors import (
    BadCell,
    BadTable,
    InvalidValue,
    TooFewRows,
    UnknownName,
    Where,
    shown,
)

SCALES = ("standard", "range", "none")

# Largest magnitude accepted in a used cell. Fits square and raise values to powers (up to the
# fifth for degree-5 polynomials, in standardised units); beyond this they could overflow.
MAX_MAGNITUDE = 1e100
#: Smallest nonzero magnitude accepted in a feature cell: the smallest normal double. Below it
#: (subnormal numbers) a value keeps fewer than 52 bits, and a spread may not be representable.
MIN_MAGNITUDE = float(np.finfo(float).tiny)
#: Largest magnitude of a scaled value (:meth:`Scaler.transform`): the squared distance between
#: two rows of 50 features at opposite bounds, 50 * (2e150)^2, is far below the largest double.
SCALED_MAX = 1e150
#: Columns whose largest magnitude is below this are scaled on a copy multiplied by a power of
#: two: their squared deviations would otherwise fall below the smallest double (1e-154 squared
#: is 1e-308) and their spread would read as 0.
TINY_COLUMN = 1e-100


@dataclass(frozen=True)
class Table:
    """A parsed table.

    Parameters
    ----------
    name : str
        Where the table came from in the request (``"train"`` or ``"query"``); used in errors.
    columns : tuple of str
        Column names, unique.
    values : ndarray of float64, shape (n_rows, n_columns)
        Cell values; NaN marks a missing cell (JSON ``null`` or an empty CSV cell).
    labels : mapping of column index to object ndarray
        For columns holding any text cell: the raw cells. Their ``values`` entries are NaN.
        Text is only allowed in the ``categorical``, grouping and ``order_by`` columns.
    """

    name: str
    columns: tuple[str, ...]
    values: np.ndarray
    labels: Mapping[int, np.ndarray] = field(default_factory=dict)

    @property
    def n_rows(self) -> int:
        return int(self.values.shape[0])


@dataclass(frozen=True)
class Prepared:
    """The arrays a fit works on, after checks.

    ``X``/``y`` hold the usable training rows; ``kept`` their row numbers in the training table.
    ``X_all`` holds the features of every training row (used for fitted values when there is
    no query). ``groups`` holds integer group codes for the usable rows, or None.
    """

    features: tuple[str, ...]
    target: str
    X: np.ndarray
    y: np.ndarray
    kept: np.ndarray
    X_all: np.ndarray
    y_all: np.ndarray
    groups: np.ndarray | None
    X_query: np.ndarray | None
    rows_dropped: int
    # With ``weight_by``: the usable rows' weights (all positive; rows of weight 0 are left out
    # and counted in ``rows_zero_weight``), and the query rows' weights when the query table
    # holds that column (None: weight 1).
    weights: np.ndarray | None = None
    rows_zero_weight: int = 0
    query_weights: np.ndarray | None = None
    # With ``categorical``: which feature columns are categories and their levels. Their
    # columns of ``X``, ``X_all`` and ``X_query`` hold level codes (-1: a level the usable
    # training rows do not hold; see :mod:`nearwise.core.categories`).
    categories: categories.Categories | None = None


def listed(names: Sequence[str], most: int = 20) -> str:
    """Column names for a message: each echoed as :func:`shown` does, at most ``most``."""
    more = f" and {len(names) - most} more" if len(names) > most else ""
    return ", ".join(shown(n) for n in names[:most]) + more


def _column_index(table: Table, name: str, path: tuple) -> int:
    try:
        return table.columns.index(name)
    except ValueError:
        raise UnknownName(
            f"column `{shown(name)}` is not in the {table.name} table; its columns are "
            f"{listed(table.columns)}.",
            [Where(path, f"no column `{shown(name)}` in {table.name}")],
        ) from None


def _first_text_cell(table: Table, j: int) -> None:
    if j in table.labels:
        raise categories.undeclared_text(table, j)


def _text_target(table: Table, j: int) -> None:
    if j in table.labels:
        cells = table.labels[j]
        i = int(np.flatnonzero([isinstance(c, str) for c in cells])[0])
        raise BadCell(
            f"the target `{shown(table.columns[j])}` must hold numbers; {table.name} row {i} "
            f"holds text {shown(cells[i], quoted=True)}. The methods predict numbers: a "
            "categorical target (classification) is not offered.",
            [Where((table.name, "rows", i, j), "expected a number, found text")],
        )


def _check_magnitude(table: Table, cols: Sequence[int], block: np.ndarray, what: str) -> None:
    with np.errstate(invalid="ignore"):
        big = np.abs(block) > MAX_MAGNITUDE
    if big.any():
        r, c = (int(v[0]) for v in np.nonzero(big))
        raise BadCell(
            f"{what} `{shown(table.columns[cols[c]])}` in {table.name} row {r} is "
            f"{block[r, c]:g}; values beyond {MAX_MAGNITUDE:g} in magnitude cannot be fitted "
            "reliably. Rescale the column (for example, change its units).",
            [Where((table.name, "rows", r, int(cols[c])), f"magnitude above {MAX_MAGNITUDE:g}")],
        )


def _check_subnormal(table: Table, cols: Sequence[int], block: np.ndarray) -> None:
    """Refuse a feature cell below the smallest normal double in magnitude (but not 0)."""
    with np.errstate(invalid="ignore"):
        low = (block != 0) & (np.abs(block) < MIN_MAGNITUDE)
    if low.any():
        r, c = (int(v[0]) for v in np.nonzero(low))
        raise BadCell(
            f"feature `{shown(table.columns[cols[c]])}` in {table.name} row {r} is "
            f"{block[r, c]:g}, below the smallest normal double ({MIN_MAGNITUDE:g}) in "
            "magnitude: such values keep too few digits to be scaled. Rescale the column (for "
            "example, change its units), or send 0.",
            [Where((table.name, "rows", r, int(cols[c])), f"magnitude below {MIN_MAGNITUDE:g}")],
        )


def _check_finite(table: Table, cols: Sequence[int], block: np.ndarray, what: str) -> None:
    _check_magnitude(table, cols, block, what)
    bad = ~np.isfinite(block)
    if bad.any():
        rows, cs = np.nonzero(bad)
        where = [
            Where(
                (table.name, "rows", int(r), int(cols[c])),
                f"{what} `{shown(table.columns[cols[c]])}` is missing"
                if np.isnan(block[r, c])
                else f"{what} `{shown(table.columns[cols[c]])}` is not finite",
            )
            for r, c in zip(rows[:20], cs[:20], strict=True)
        ]
        first = where[0]
        raise BadCell(
            f"{len(rows)} {table.name} cell(s) in {what} columns are missing or not finite; "
            f"the first is row {first.path[2]}, column `{shown(table.columns[first.path[3]])}`. "
            "Remove or fill those rows; only the target may be missing in training rows.",
            where,
        )
    if what == "feature":
        _check_subnormal(table, cols, block)


def prepare(
    train: Table,
    target: str,
    features: Sequence[str] | None,
    query: Table | None,
    group_by: str | None,
    order_by: str | None = None,
    weight_by: str | None = None,
    categorical: Sequence[str] = (),
    reference: Mapping[str, Any] | None = None,
) -> Prepared:
    """Resolve columns and check every cell the fit will use.

    Rows whose target is missing are dropped and counted; any other missing or non-finite cell
    in a used column is an error naming its row and column. With ``weight_by``, rows of weight
    0 are dropped too and counted apart (see :func:`_weights`). The ``categorical`` columns
    are features holding levels (``reference``: column -> reference level); see
    :mod:`nearwise.core.categories`.
    """
    if len(set(train.columns)) != len(train.columns):
        dup = next(c for c in train.columns if train.columns.count(c) > 1)
        raise BadTable(
            f"column names must be unique; `{shown(dup)}` appears more than once in train.",
            [Where(("train", "columns"), f"duplicate column `{shown(dup)}`")],
        )
    t = _column_index(train, target, ("target",))
    g = _column_index(train, group_by, ("tuning", "group_by")) if group_by else None
    o = _column_index(train, order_by, ("tuning", "order_by")) if order_by else None
    wc = _weight_column(train, weight_by, t, g, o)
    if o is not None and o == t:
        raise InvalidValue(
            f"`tuning.order_by` names the target `{shown(target)}`; it must name the column that "
            "places rows in time.",
            [Where(("tuning", "order_by"), "the target")],
        )
    roles = {t: "the target"}
    for j, role in ((g, "`tuning.group_by`"), (o, "`tuning.order_by`"), (wc, "`weight_by`")):
        if j is not None:
            roles.setdefault(j, f"the {role} column")
    cat_cols = categories.declared(train, categorical, roles) if categorical else []
    refs = categories.reference_names(reference or {}, categorical)
    if features is None:
        f_idx = [j for j in range(len(train.columns)) if j not in (t, g, o, wc)]
        if not f_idx:
            raise BadTable(
                "train needs at least one feature column besides the target.",
                [Where(("train", "columns"), "no feature column")],
            )
    else:
        if len(features) == 0:
            raise InvalidValue(
                "`features` must name at least one column.",
                [Where(("features",), "empty list")],
            )
        if len(set(features)) != len(features):
            raise InvalidValue(
                "`features` names a column twice.",
                [Where(("features",), "duplicate names")],
            )
        f_idx = [_column_index(train, f, ("features", k)) for k, f in enumerate(features)]
        for k, j in enumerate(f_idx):
            if j in (t, g) or (wc is not None and j == wc):
                role = {t: "target", g: "grouping column"}.get(j, "`weight_by` column")
                raise InvalidValue(
                    f"feature `{shown(train.columns[j])}` is also the {role}.",
                    [Where(("features", k), f"`{shown(train.columns[j])}` is the {role}")],
                )
    for k, j in enumerate(cat_cols):
        if j not in f_idx:
            raise InvalidValue(
                f"`categorical` names `{shown(train.columns[j])}`, which is not in `features`; "
                "a categorical column is a feature: add it to `features`, or leave it out of "
                "`categorical`.",
                [Where(("categorical", k), "not among the features")],
            )
    if o is not None and o in f_idx and o in train.labels:
        k = f_idx.index(o)
        raise BadCell(
            f"feature `{shown(train.columns[o])}` is the `tuning.order_by` column and holds "
            "dates; a feature must hold numbers. Send the time as numbers (seconds or days) to "
            "use it as a feature, or leave it out of `features`.",
            [Where(("features", k), "dates cannot be a feature")],
        )
    num_idx = [j for j in f_idx if j not in cat_cols]
    for j in num_idx:
        _first_text_cell(train, j)
    _text_target(train, t)
    names = tuple(train.columns[j] for j in f_idx)
    X_all = train.values[:, f_idx]
    y_all = train.values[:, t]
    _check_finite(train, num_idx, train.values[:, num_idx], "feature")
    if np.isinf(y_all).any():
        i = int(np.flatnonzero(np.isinf(y_all))[0])
        raise BadCell(
            f"target `{shown(target)}` is not finite in train row {i}.",
            [Where(("train", "rows", i, t), "not finite")],
        )
    _check_magnitude(train, [t], y_all[:, None], "target")
    kept = np.flatnonzero(~np.isnan(y_all))
    if kept.size == 0:
        raise TooFewRows(
            f"no training row has a value for the target `{shown(target)}`.",
            [Where(("train", "rows"), "every target is missing")],
        )
    weights, zero = None, 0
    if wc is not None:
        weights = _weights(train, wc)
        positive = kept[weights[kept] > 0]
        if positive.size == 0:
            raise TooFewRows(
                f"every training row with a target has weight 0 in `{weight_by}`; a row of "
                "weight 0 is left out of the fit, so none is left. Give some rows a positive "
                "weight.",
                [Where(("weight_by",), "every weight is zero")],
            )
        zero = int(kept.size - positive.size)
        kept, weights = positive, weights[positive]
    cats = None
    if cat_cols:
        ordered = sorted(cat_cols, key=f_idx.index)  # in the order of the features
        at = [cat_cols.index(j) for j in ordered]  # each one's place in `categorical`
        cats, codes = categories.encode(train, ordered, kept, f_idx, refs, at)
        X_all = X_all.copy()
        X_all[:, list(cats.positions)] = codes
    groups = None
    if g is not None:
        # Codes of the usable rows only, so that a group whose targets are all missing does
        # not count as a group (it would leave a fold empty).
        groups = np.unique(_group_codes(train, g)[kept], return_inverse=True)[1]
    X_query = query_weights = None
    if query is not None:
        q_idx = [_column_index(query, f, ("query", "columns")) for f in names]
        q_num = [j for k, j in enumerate(q_idx) if cats is None or k not in cats.positions]
        for j in q_num:
            _first_text_cell(query, j)
        X_query = query.values[:, q_idx]
        _check_finite(query, q_num, query.values[:, q_num], "feature")
        if cats is not None:
            X_query = X_query.copy()
            q_cat = [q_idx[k] for k in cats.positions]
            X_query[:, list(cats.positions)] = categories.query_codes(query, q_cat, cats)
        if weight_by is not None and weight_by in query.columns:
            query_weights = _weights(query, query.columns.index(weight_by), positive=True)
    return Prepared(
        features=names,
        target=target,
        X=X_all[kept],
        y=y_all[kept],
        kept=kept,
        X_all=X_all,
        y_all=y_all,
        groups=groups,
        X_query=X_query,
        rows_dropped=int(train.n_rows - kept.size - zero),
        weights=weights,
        rows_zero_weight=zero,
        query_weights=query_weights,
        categories=cats,
    )


def _weight_column(train: Table, weight_by: str | None, t: int, g, o) -> int | None:
    """The index of the ``weight_by`` column, which must be none of the other roles."""
    if weight_by is None:
        return None
    wc = _column_index(train, weight_by, ("weight_by",))
    if wc in (t, g, o):
        role = {t: "target", g: "`tuning.group_by` column", o: "`tuning.order_by` column"}[wc]
        raise InvalidValue(
            f"`weight_by` names `{weight_by}`, which is also the {role}; it must name a column "
            "of its own holding each row's weight.",
            [Where(("weight_by",), f"also the {role}")],
        )
    return wc


#: Smallest positive weight accepted: a weight's reciprocal (its noise variance factor) and
#: its square root must stay well inside the range of doubles.
MIN_WEIGHT = 1.0 / MAX_MAGNITUDE


def _weights(table: Table, j: int, positive: bool = False) -> np.ndarray:
    """The column ``j`` as row weights: numbers 0 or more (above 0 if ``positive``), each
    either 0 or between 1e-100 and 1e100; any other cell is an error naming it.

    Weights are precision weights: a row of weight w has noise variance sigma^2 / w (w rows'
    worth of information); 0 leaves a training row out.
    """
    name = table.columns[j]
    if j in table.labels:
        cells = table.labels[j]
        i = int(np.flatnonzero([isinstance(c, str) for c in cells])[0])
        raise BadCell(
            f"weight column `{name}` must hold numbers; {table.name} row {i} holds text "
            f"{cells[i]!r}.",
            [Where((table.name, "rows", i, j), "expected a weight (a number), found text")],
        )
    w = table.values[:, j]
    low = "0" if positive else "below 0"
    with np.errstate(invalid="ignore"):
        bad = ~np.isfinite(w) | (w <= 0 if positive else w < 0)
        bad |= (w != 0) & ((np.abs(w) > MAX_MAGNITUDE) | (np.abs(w) < MIN_WEIGHT))
    if bad.any():
        rows = np.flatnonzero(bad)

        def why(v: float) -> str:
            if np.isnan(v):
                return "missing"
            if not np.isfinite(v):
                return "not finite"
            if v < 0 or (positive and v == 0):
                return f"{v:g}, {low}"
            return f"{v:g}, outside [{MIN_WEIGHT:g}, {MAX_MAGNITUDE:g}]"

        where = [Where((table.name, "rows", int(i), j), f"weight {why(w[i])}") for i in rows[:20]]
        first = int(rows[0])
        need = "positive" if positive else "0 or more (0 leaves the row out of the fit)"
        raise BadCell(
            f"{rows.size} {table.name} row(s) have a bad weight in `{name}`; the first is row "
            f"{first}: {why(w[first])}. A weight is a number {need}, between {MIN_WEIGHT:g} "
            f"and {MAX_MAGNITUDE:g} unless 0; every row needs one.",
            where,
        )
    return w.copy()


def _group_codes(train: Table, g: int) -> np.ndarray:
    """Integer codes for the grouping column; numbers and text are both accepted."""
    if g in train.labels:
        cells = train.labels[g]
        keys = [c if isinstance(c, str) else None for c in cells]
        num = train.values[:, g]
        for i, (k, v) in enumerate(zip(keys, num, strict=True)):
            if k is None and np.isnan(v):
                raise BadCell(
                    f"group column `{shown(train.columns[g])}` is missing in train row {i}.",
                    [Where(("train", "rows", i, g), "missing group")],
                )
        tokens = np.array(
            [k if k is not None else f"\x00{v!r}" for k, v in zip(keys, num, strict=True)]
        )
        return np.unique(tokens, return_inverse=True)[1]
    col = train.values[:, g]
    if np.isnan(col).any():
        i = int(np.flatnonzero(np.isnan(col))[0])
        raise BadCell(
            f"group column `{shown(train.columns[g])}` is missing in train row {i}.",
            [Where(("train", "rows", i, g), "missing group")],
        )
    return np.unique(col, return_inverse=True)[1]


@dataclass(frozen=True)
class Scaler:
    """Per-feature affine scaling learned from training rows.

    ``standard`` subtracts the mean and divides by the standard deviation (ddof 0);
    ``range`` maps the training minimum to 0 and maximum to 1; ``none`` leaves values as they
    are. A feature with zero spread (or spread within rounding of its magnitude) is divided by
    1, as scikit-learn's scalers do. A column of tiny values (largest magnitude below
    :data:`TINY_COLUMN`) is measured on a copy multiplied by a power of two (exact), so that its
    spread cannot underflow to 0 and the column is never dropped: it is scaled as it would be
    in other units. (Feature cells below the smallest normal double are refused before.)
    """

    shift: np.ndarray
    scale: np.ndarray

    @classmethod
    def fit(cls, X: np.ndarray, kind: str) -> Scaler:
        p = X.shape[1]
        if kind == "none":
            return cls(np.zeros(p), np.ones(p))
        big = np.max(np.abs(X), axis=0) if X.size else np.zeros(p)
        tiny = (big > 0) & (big < TINY_COLUMN)
        # unit: a power of two near the largest magnitude for tiny columns (dividing by it is
        # exact), 1 for the others, whose figures are then those of X itself
        unit = np.where(tiny, np.ldexp(1.0, np.frexp(big)[1]), 1.0)
        Z = X / unit if tiny.any() else X
        if kind == "standard":
            shift = Z.mean(axis=0)
            scale = Z.std(axis=0)
        elif kind == "range":
            shift = Z.min(axis=0)
            scale = Z.max(axis=0) - shift
        else:  # pragma: no cover - parameters are checked before
            raise ValueError(kind)
        # A column whose spread is rounding noise (a few ulps of its magnitude: a constant
        # column's mean is not exact) has no spread: dividing by the noise would blow it up.
        noise = 64 * np.finfo(float).eps * (big / unit)
        scale = np.where(scale > noise, scale * unit, 1.0)
        return cls(shift * unit, scale)

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Scaled values, kept within +-SCALED_MAX: a row that many spreads away (a query far
        outside a tiny column's range) is as far as a distance can tell, and squared
        distances between such rows stay finite."""
        with np.errstate(over="ignore"):
            Z = (X - self.shift) / self.scale
        return np.clip(Z, -SCALED_MAX, SCALED_MAX, out=Z)

    def inverse(self, Z: np.ndarray) -> np.ndarray:
        return Z * self.scale + self.shift
