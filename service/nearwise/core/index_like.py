"""Columns that number the rows rather than measure anything: a saved index or row number.

pandas ``DataFrame.to_csv()`` writes the index as a first column with an empty name, and R's
``write.csv`` writes the row names the same way; used by default as a feature, such a column
makes a model of the row order. An unnamed column that would be a feature by default is
refused (:func:`refuse_unnamed`); a named column holding exactly 0, 1, ..., n - 1 or 1, 2,
..., n in row order (an index kept with ``reset_index()``, a row number) is used but warned
about (:func:`notices`), unless ``features`` lists it.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from nearwise.core.data import Table
from nearwise.core.errors import BadTable, Where, shown
from nearwise.core.results import Notice


def index_start(values: np.ndarray) -> int | None:
    """0 or 1 when ``values`` is exactly start, start + 1, ..., start + n - 1 in row order
    (every cell present); otherwise None."""
    n = values.shape[0]
    steps = np.arange(n, dtype=np.float64)
    for start in (0, 1):
        if np.array_equal(values, steps + start):
            return start
    return None


def refuse_unnamed(
    table: Table, features: Sequence[str], given: Sequence[str] | None = None
) -> None:
    """Refuse an unnamed column (empty, or spaces only) among the ``features`` in use when
    they are the default ones (``given``, the request's ``features``, is None)."""
    if given is not None:
        return
    for name in features:
        if not name.strip() and name in table.columns:
            j = table.columns.index(name)
            raise BadTable(
                f"Column {j} of {table.name} (counting from 0) has no name, and without "
                "`features` every column but the target is a feature. A table saved by "
                "pandas `DataFrame.to_csv()` starts with the index as an unnamed column: save "
                "it with `to_csv(index=False)` (R: `write.csv(..., row.names = FALSE)`), or "
                "list the columns to use in `features`.",
                [
                    Where(
                        (table.name, "columns", j),
                        f"column {j} has no name (a saved index?): save with index=False, "
                        "or set features",
                    )
                ],
            )


def notices(
    table: Table, features: Sequence[str], given: Sequence[str] | None = None
) -> list[Notice]:
    """The ``index_like_feature`` warning for the ``features`` in use that number the rows,
    when they are the default ones (``given``, the request's ``features``, is None)."""
    if given is not None:
        return []
    found = []
    for name in features:
        if name not in table.columns or table.columns.index(name) in table.labels:
            continue
        j = table.columns.index(name)
        start = index_start(table.values[:, j])
        if start is not None:
            found.append(f"`{shown(name)}` ({start}, {start + 1}, ..., {table.n_rows - 1 + start})")
    if not found:
        return []
    return [
        Notice(
            "index_like_feature",
            f"{'feature' if len(found) == 1 else 'features'} {', '.join(found)} "
            f"{'numbers' if len(found) == 1 else 'number'} the training rows in the order they "
            "were sent, like a saved index or row number, and "
            f"{'was' if len(found) == 1 else 'were'} used as a feature because `features` was "
            "not given: the fit then depends on the order of the rows. Drop the column (pandas: "
            "`to_csv(index=False)`), or list the features to use in `features` (a column "
            "listed there is used without this warning).",
        )
    ]
