"""Feature columns of a table that has no target (the locality diagnostics), checked.

Every cell used must be a finite number; errors point at the place at fault as
:func:`nearwise.core.data.prepare` does for a fit.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from nearwise.core import index_like
from nearwise.core.data import Table, _check_finite, listed
from nearwise.core.errors import BadCell, BadTable, InvalidValue, UnknownName, Where, shown


def feature_arrays(
    train: Table, features: Sequence[str] | None, query: Table | None
) -> tuple[tuple[str, ...], np.ndarray, np.ndarray | None]:
    """Feature names, training features and query features, checked: every cell used must be
    a finite number. ``features`` defaults to every column of ``train``."""
    if len(set(train.columns)) != len(train.columns):
        dup = next(c for c in train.columns if train.columns.count(c) > 1)
        raise BadTable(
            f"column names must be unique; `{shown(dup)}` appears more than once in train.",
            [Where(("train", "columns"), f"duplicate column `{shown(dup)}`")],
        )
    if features is not None and len(set(features)) != len(features):
        raise InvalidValue("`features` names a column twice.", [Where(("features",), "twice")])
    names = tuple(train.columns) if features is None else tuple(features)
    index_like.refuse_unnamed(train, names, features)
    if not names:
        raise InvalidValue(
            "`features` must name at least one column.", [Where(("features",), "empty")]
        )
    idx = [_index(train, f, ("features", i)) for i, f in enumerate(names)]
    X = _numbers(train, idx)
    Xq = None
    if query is not None:
        Xq = _numbers(query, [_index(query, f, ("query", "columns")) for f in names])
    return names, X, Xq


def _index(table: Table, name: str, path: tuple) -> int:
    if name in table.columns:
        return table.columns.index(name)
    raise UnknownName(
        f"column `{shown(name)}` is not in the {table.name} table; its columns are "
        f"{listed(table.columns)}.",
        [Where(path, f"no column `{shown(name)}` in {table.name}")],
    )


def _numbers(table: Table, idx: list[int]) -> np.ndarray:
    for j in idx:
        if j in table.labels:
            i = next(r for r, c in enumerate(table.labels[j]) if isinstance(c, str))
            raise BadCell(
                f"{table.name} column `{shown(table.columns[j])}` must hold numbers; row {i} "
                f"holds text {shown(table.labels[j][i], quoted=True)}. The locality "
                "diagnostics measure distances on numeric features and take no `categorical` "
                "columns (with /v1/predict their flags are computed within each level); list "
                "the numeric columns in `features`.",
                [Where((table.name, "rows", i, j), "expected a number, found text")],
            )
    block = table.values[:, idx]
    _check_finite(table, idx, block, "feature")
    return block
