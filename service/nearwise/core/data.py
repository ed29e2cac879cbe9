"""Tables to float arrays: column resolution, finite checks, dropped rows and feature scaling.

The web layer hands over :class:`Table` objects that were parsed in one vectorised pass; here
the numbers are checked against what the fit needs. Kernels downstream trust these arrays.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from nearwise.core.errors import BadCell, BadTable, InvalidValue, TooFewRows, UnknownName, Where

SCALES = ("standard", "range", "none")

# Largest magnitude accepted in a used cell. Fits square and raise values to powers (up to the
# fifth for degree-5 polynomials, in standardised units); beyond this they could overflow.
MAX_MAGNITUDE = 1e100


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
        Text is only allowed in the grouping column.
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


def _column_index(table: Table, name: str, path: tuple) -> int:
    try:
        return table.columns.index(name)
    except ValueError:
        raise UnknownName(
            f"column `{name}` is not in the {table.name} table; its columns are "
            f"{', '.join(table.columns)}.",
            [Where(path, f"no column `{name}` in {table.name}")],
        ) from None


def _first_text_cell(table: Table, j: int) -> None:
    if j in table.labels:
        cells = table.labels[j]
        i = int(np.flatnonzero([isinstance(c, str) for c in cells])[0])
        raise BadCell(
            f"{table.name} column `{table.columns[j]}` must hold numbers; row {i} holds text "
            f"{cells[i]!r}. Only the `tuning.group_by` and `tuning.order_by` columns may hold "
            "text.",
            [Where((table.name, "rows", i, j), "expected a number, found text")],
        )


def _check_magnitude(table: Table, cols: Sequence[int], block: np.ndarray, what: str) -> None:
    with np.errstate(invalid="ignore"):
        big = np.abs(block) > MAX_MAGNITUDE
    if big.any():
        r, c = (int(v[0]) for v in np.nonzero(big))
        raise BadCell(
            f"{what} `{table.columns[cols[c]]}` in {table.name} row {r} is {block[r, c]:g}; "
            f"values beyond {MAX_MAGNITUDE:g} in magnitude cannot be fitted reliably. Rescale "
            "the column (for example, change its units).",
            [Where((table.name, "rows", r, int(cols[c])), f"magnitude above {MAX_MAGNITUDE:g}")],
        )


def _check_finite(table: Table, cols: Sequence[int], block: np.ndarray, what: str) -> None:
    _check_magnitude(table, cols, block, what)
    bad = ~np.isfinite(block)
    if bad.any():
        rows, cs = np.nonzero(bad)
        where = [
            Where(
                (table.name, "rows", int(r), int(cols[c])),
                f"{what} `{table.columns[cols[c]]}` is missing"
                if np.isnan(block[r, c])
                else f"{what} `{table.columns[cols[c]]}` is not finite",
            )
            for r, c in zip(rows[:20], cs[:20], strict=True)
        ]
        first = where[0]
        raise BadCell(
            f"{len(rows)} {table.name} cell(s) in {what} columns are missing or not finite; "
            f"the first is row {first.path[2]}, column `{table.columns[first.path[3]]}`. "
            "Remove or fill those rows; only the target may be missing in training rows.",
            where,
        )


def prepare(
    train: Table,
    target: str,
    features: Sequence[str] | None,
    query: Table | None,
    group_by: str | None,
    order_by: str | None = None,
) -> Prepared:
    """Resolve columns and check every cell the fit will use.

    Rows whose target is missing are dropped and counted; any other missing or non-finite cell
    in a used column is an error naming its row and column.
    """
    if len(set(train.columns)) != len(train.columns):
        dup = next(c for c in train.columns if train.columns.count(c) > 1)
        raise BadTable(
            f"column names must be unique; `{dup}` appears more than once in train.",
            [Where(("train", "columns"), f"duplicate column `{dup}`")],
        )
    t = _column_index(train, target, ("target",))
    g = _column_index(train, group_by, ("tuning", "group_by")) if group_by else None
    o = _column_index(train, order_by, ("tuning", "order_by")) if order_by else None
    if o is not None and o == t:
        raise InvalidValue(
            f"`tuning.order_by` names the target `{target}`; it must name the column that "
            "places rows in time.",
            [Where(("tuning", "order_by"), "the target")],
        )
    if features is None:
        f_idx = [j for j in range(len(train.columns)) if j not in (t, g, o)]
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
            if j == t or j == g:
                role = "target" if j == t else "grouping column"
                raise InvalidValue(
                    f"feature `{train.columns[j]}` is also the {role}.",
                    [Where(("features", k), f"`{train.columns[j]}` is the {role}")],
                )
    if o is not None and o in f_idx and o in train.labels:
        k = f_idx.index(o)
        raise BadCell(
            f"feature `{train.columns[o]}` is the `tuning.order_by` column and holds dates; a "
            "feature must hold numbers. Send the time as numbers (seconds or days) to use it "
            "as a feature, or leave it out of `features`.",
            [Where(("features", k), "dates cannot be a feature")],
        )
    for j in [*f_idx, t]:
        _first_text_cell(train, j)
    names = tuple(train.columns[j] for j in f_idx)
    X_all = train.values[:, f_idx]
    y_all = train.values[:, t]
    _check_finite(train, f_idx, X_all, "feature")
    if np.isinf(y_all).any():
        i = int(np.flatnonzero(np.isinf(y_all))[0])
        raise BadCell(
            f"target `{target}` is not finite in train row {i}.",
            [Where(("train", "rows", i, t), "not finite")],
        )
    _check_magnitude(train, [t], y_all[:, None], "target")
    kept = np.flatnonzero(~np.isnan(y_all))
    if kept.size == 0:
        raise TooFewRows(
            f"no training row has a value for the target `{target}`.",
            [Where(("train", "rows"), "every target is missing")],
        )
    groups = None
    if g is not None:
        # Codes of the usable rows only, so that a group whose targets are all missing does
        # not count as a group (it would leave a fold empty).
        groups = np.unique(_group_codes(train, g)[kept], return_inverse=True)[1]
    X_query = None
    if query is not None:
        q_idx = [_column_index(query, f, ("query", "columns")) for f in names]
        for j in q_idx:
            _first_text_cell(query, j)
        X_query = query.values[:, q_idx]
        _check_finite(query, q_idx, X_query, "feature")
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
        rows_dropped=int(train.n_rows - kept.size),
    )


def _group_codes(train: Table, g: int) -> np.ndarray:
    """Integer codes for the grouping column; numbers and text are both accepted."""
    if g in train.labels:
        cells = train.labels[g]
        keys = [c if isinstance(c, str) else None for c in cells]
        num = train.values[:, g]
        for i, (k, v) in enumerate(zip(keys, num, strict=True)):
            if k is None and np.isnan(v):
                raise BadCell(
                    f"group column `{train.columns[g]}` is missing in train row {i}.",
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
            f"group column `{train.columns[g]}` is missing in train row {i}.",
            [Where(("train", "rows", i, g), "missing group")],
        )
    return np.unique(col, return_inverse=True)[1]


@dataclass(frozen=True)
class Scaler:
    """Per-feature affine scaling learned from training rows.

    ``standard`` subtracts the mean and divides by the standard deviation (ddof 0);
    ``range`` maps the training minimum to 0 and maximum to 1; ``none`` leaves values as they
    are. A feature with zero spread (or spread within rounding of its magnitude) is divided by
    1, as scikit-learn's scalers do.
    """

    shift: np.ndarray
    scale: np.ndarray

    @classmethod
    def fit(cls, X: np.ndarray, kind: str) -> Scaler:
        p = X.shape[1]
        if kind == "none":
            return cls(np.zeros(p), np.ones(p))
        if kind == "standard":
            shift = X.mean(axis=0)
            scale = X.std(axis=0)
        elif kind == "range":
            shift = X.min(axis=0)
            scale = X.max(axis=0) - shift
        else:  # pragma: no cover - parameters are checked before
            raise ValueError(kind)
        # A column whose spread is rounding noise (a few ulps of its magnitude: a constant
        # column's mean is not exact) has no spread: dividing by the noise would blow it up.
        noise = 64 * np.finfo(float).eps * np.max(np.abs(X), axis=0) if X.size else 0.0
        scale = np.where(scale > noise, scale, 1.0)
        return cls(shift, scale)

    def transform(self, X: np.ndarray) -> np.ndarray:
        return (X - self.shift) / self.scale

    def inverse(self, Z: np.ndarray) -> np.ndarray:
        return Z * self.scale + self.shift
