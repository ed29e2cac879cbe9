"""Categorical inputs: their levels, read from the table, and treatment coding.

A column named in ``categorical`` holds categories: text, or numbers read as names. Each cell
becomes the *name* of its level:

- a text cell is its level's name as sent (no trimming, no change of case: ``North`` and
  ``north`` are two levels);
- a number cell is named by its shortest form: ``1``, ``1.0`` and ``1.00`` (and the JSON
  numbers 1 and 1.0) are all the level ``1``, and the JSON string ``"1"`` names it too; the
  JSON string ``"1.0"`` is another level (text is taken as sent);
- a missing cell (JSON ``null``, an empty CSV cell, or text holding only spaces) is refused
  with the row and column, as a missing number in a feature is.

The levels of a column are those of the usable training rows (target present, weight above
0), sorted: as numbers when every level's name reads as one, otherwise by their text (Unicode
code points). The reference level is the first in that order unless ``categorical_reference``
names another. Inside the core a categorical feature's column of ``X`` holds each row's level
*code* (its index in the sorted levels, as a float); a query row whose level is not among them
holds -1 there (the pipeline answers it with the flag ``unseen_level``).

Treatment coding (the default contrasts of R and of statsmodels' ``C()``): one 0/1 column per
level other than the reference, named ``column[level]``, e.g. ``site[south]``; a coefficient
is that level's difference from the reference.

References
----------
Chambers, J. M. & Hastie, T. J. (1992). *Statistical Models in S*, Wadsworth, section 2.3.2
(contrasts; treatment coding).
Gower, J. C. (1971). A general coefficient of similarity and some of its properties.
*Biometrics* 27(4), 857-871 (mixed numeric and categorical dissimilarity, used by kNN).
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from nearwise.core.errors import BadCell, InvalidValue, OverLimit, UnknownName, Where, shown
from nearwise.core.results import Notice

if TYPE_CHECKING:  # pragma: no cover - typing only (data imports this module)
    from nearwise.core.data import Table

#: Most levels one categorical column may hold in the usable training rows. Each level is a
#: column of every design (kNN: one-hot; linear and additive: one dummy but the reference).
MAX_LEVELS = 200
#: kNN's default mismatch weight gamma: a mismatch adds gamma^2 to the squared distance, as
#: much as a difference of gamma in one scaled numeric feature.
MISMATCH = 1.0
#: Level code of a query cell whose level the training rows do not hold.
UNSEEN = -1.0

_PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def number_name(v: float) -> str:
    """The level name of a number: its shortest form (``1`` for 1.0, ``2.5``, ``1e+20``)."""
    v = float(v)
    if v == int(v) and abs(v) < 2**53:
        return str(int(v))
    return repr(v)


def cell_name(cell: Any) -> str | None:
    """The level name of one cell, or None when it is missing."""
    if cell is None:
        return None
    if isinstance(cell, str):
        return cell if cell.strip() else None
    v = float(cell)
    return None if np.isnan(v) else number_name(v)


def column_names(table: Table, j: int) -> np.ndarray:
    """The level name of every row of column ``j`` (object array; None where missing)."""
    if j in table.labels:
        return np.array([cell_name(c) for c in table.labels[j]] + [None], dtype=object)[:-1]
    col = table.values[:, j]
    out = np.full(col.shape, None, dtype=object)
    ok = ~np.isnan(col)
    if ok.any():
        distinct, inverse = np.unique(col[ok], return_inverse=True)
        names = np.array([number_name(v) for v in distinct] + [""], dtype=object)[:-1]
        out[ok] = names[inverse.reshape(-1)]
    return out


def sort_levels(names: Sequence[str]) -> tuple[str, ...]:
    """Numbers in numeric order when every name is a plain number, else by text."""
    if names and all(_PLAIN_NUMBER.fullmatch(n) for n in names):
        return tuple(sorted(names, key=lambda n: (float(n), n)))
    return tuple(sorted(names))


@dataclass(frozen=True)
class Categories:
    """Which feature columns are categorical, and their levels.

    ``positions`` are columns of ``X`` (of ``p`` feature columns); ``levels[c]`` the sorted
    levels of the c-th, ``reference[c]`` the index of its reference level.
    """

    p: int
    positions: tuple[int, ...]
    names: tuple[str, ...]
    levels: tuple[tuple[str, ...], ...]
    reference: tuple[int, ...]

    @property
    def numeric(self) -> tuple[int, ...]:
        """The columns of ``X`` that hold numbers, in order."""
        return tuple(j for j in range(self.p) if j not in self.positions)

    def others(self, c: int) -> list[int]:
        """The levels of categorical column c that get a dummy: all but the reference."""
        return [i for i in range(len(self.levels[c])) if i != self.reference[c]]

    @property
    def n_dummies(self) -> int:
        return sum(len(lv) - 1 for lv in self.levels)

    @property
    def n_onehot(self) -> int:
        return sum(len(lv) for lv in self.levels)

    @property
    def width(self) -> int:
        """Columns of the treatment-coded design: numeric features plus dummies."""
        return len(self.numeric) + self.n_dummies

    def dummy_names(self) -> list[str]:
        """``column[level]`` for every dummy, in the order of :meth:`dummies`."""
        return [
            f"{name}[{self.levels[c][i]}]"
            for c, name in enumerate(self.names)
            for i in self.others(c)
        ]

    def codes(self, X: np.ndarray) -> np.ndarray:
        """The level codes (integers; -1 unseen), shape (rows, categorical columns)."""
        return X[:, list(self.positions)].astype(np.intp)

    def dummies(self, X: np.ndarray) -> np.ndarray:
        """The treatment-coded 0/1 columns of the rows ``X`` (an unseen level: all 0)."""
        codes = self.codes(X)
        out = np.zeros((X.shape[0], self.n_dummies))
        at = 0
        for c in range(len(self.positions)):
            for i in self.others(c):
                out[:, at] = codes[:, c] == i
                at += 1
        return out

    def onehot(self, X: np.ndarray, value: float = 1.0) -> np.ndarray:
        """One column per level of every categorical column, ``value`` where the row holds
        that level and 0 elsewhere (an unseen level: all 0)."""
        codes = self.codes(X)
        out = np.zeros((X.shape[0], self.n_onehot))
        at = 0
        for c, lv in enumerate(self.levels):
            rows = np.flatnonzero(codes[:, c] >= 0)
            out[rows, at + codes[rows, c]] = value
            at += len(lv)
        return out

    def unseen(self, X: np.ndarray) -> np.ndarray:
        """Rows holding a level the training rows do not."""
        return (self.codes(X) < 0).any(axis=1)

    def placeholder(self, X: np.ndarray) -> np.ndarray:
        """``X`` with every unseen level replaced by its column's reference level (the rows
        are answered with null; this only lets every computation run on them)."""
        out = X.copy()
        for c, j in enumerate(self.positions):
            out[out[:, j] < 0, j] = self.reference[c]
        return out

    def combinations(self, X: np.ndarray) -> np.ndarray:
        """An integer per row naming its combination of levels (equal iff the same levels)."""
        codes = self.codes(X)
        return np.unique(codes, axis=0, return_inverse=True)[1].reshape(-1)

    def flat(self, X: np.ndarray) -> np.ndarray:
        """The numeric columns, then one 0/1 column per level: numbers only, for the
        estimates that take every column as a number (the pilot fit of the noise's
        dependence)."""
        return np.hstack([X[:, list(self.numeric)], self.onehot(X)])

    def describe(self) -> list[dict[str, Any]]:
        """Per categorical feature: its name, levels (sorted) and reference, for ``model``."""
        return [
            {"name": name, "levels": list(lv), "reference": lv[r]}
            for name, lv, r in zip(self.names, self.levels, self.reference, strict=True)
        ]


def declared(
    train: Table,
    categorical: Sequence[str],
    roles: Mapping[int, str],
) -> list[int]:
    """The train columns named in ``categorical``, checked: known, once each, and none of
    the other roles (``roles``: column index -> what it is, e.g. ``the target``)."""
    seen: set[str] = set()
    for k, name in enumerate(categorical):
        if name in seen:
            raise InvalidValue(
                f"`categorical` names `{shown(name)}` twice.",
                [Where(("categorical", k), "named twice")],
            )
        seen.add(name)
    out = []
    for k, name in enumerate(categorical):
        if name not in train.columns:
            raise UnknownName(
                f"`categorical` names `{shown(name)}`, which is not a column of train; its "
                f"columns are {', '.join(shown(c) for c in train.columns[:20])}"
                f"{' and more' if len(train.columns) > 20 else ''}.",
                [Where(("categorical", k), f"no column `{shown(name)}` in train")],
            )
        j = train.columns.index(name)
        if j in roles:
            role = roles[j]
            extra = (
                " A categorical target (classification) is not offered: the methods predict "
                "numbers."
                if role == "target"
                else ""
            )
            raise InvalidValue(
                f"`categorical` names `{shown(name)}`, which is {role}; a categorical column "
                f"is a feature.{extra}",
                [Where(("categorical", k), f"`{shown(name)}` is {role}")],
            )
        out.append(j)
    return out


def reference_names(reference: Mapping[str, Any], categorical: Sequence[str]) -> dict[str, str]:
    """``categorical_reference`` as level names, checked against the declared columns."""
    out = {}
    for name, level in reference.items():
        if name not in categorical:
            raise InvalidValue(
                f"`categorical_reference` names `{shown(name)}`, which is not in "
                "`categorical`; a reference level applies to a declared categorical column.",
                [Where(("categorical_reference", name), "not a declared categorical column")],
            )
        text = level if isinstance(level, str) else None
        if isinstance(level, int | float) and not isinstance(level, bool):
            text = number_name(level) if np.isfinite(level) else None
        if text is None or not text.strip():
            raise InvalidValue(
                f"`categorical_reference.{shown(name)}` must be a level: text, or a number "
                f"for a column of numbers; got {shown(level, quoted=True)}.",
                [Where(("categorical_reference", name), "not a level")],
            )
        out[name] = text
    return out


def encode(
    table: Table,
    cols: Sequence[int],
    kept: np.ndarray,
    features: Sequence[int],
    reference: Mapping[str, str],
    at: Sequence[int] | None = None,
) -> tuple[Categories, np.ndarray]:
    """The levels of the train columns ``cols`` (from the rows ``kept``) and every train
    row's codes, shape (rows, len(cols)); ``features`` are the feature columns in order,
    ``at`` each column's place in the caller's ``categorical`` list (for error paths)."""
    levels, refs, codes = [], [], np.empty((table.n_rows, len(cols)))
    for c, j in enumerate(cols):
        names = column_names(table, j)
        _refuse_missing(table, j, names)
        name = table.columns[j]
        lv = sort_levels(list(dict.fromkeys(names[kept].tolist())))
        if len(lv) > MAX_LEVELS:
            raise OverLimit(
                f"categorical column `{shown(name)}` holds {len(lv)} levels in the usable "
                f"training rows; at most {MAX_LEVELS} are allowed per column (each level is a "
                "column of the design). Group rare levels together, or send the column as "
                "numbers and leave it out of `categorical`.",
                [Where(("categorical", c if at is None else at[c]), f"{len(lv)} levels")],
            )
        ref = 0
        if name in reference:
            if reference[name] not in lv:
                raise InvalidValue(
                    f"`categorical_reference.{shown(name)}` is "
                    f"{shown(reference[name], quoted=True)}, which is not a level of "
                    f"`{shown(name)}` in the usable training rows; its levels are "
                    f"{', '.join(shown(v) for v in lv[:20])}{' …' if len(lv) > 20 else ''}.",
                    [Where(("categorical_reference", name), "not a level in train")],
                )
            ref = lv.index(reference[name])
        levels.append(lv)
        refs.append(ref)
        codes[:, c] = _codes(names, lv)
    positions = tuple(list(features).index(j) for j in cols)
    cats = Categories(
        p=len(features),
        positions=positions,
        names=tuple(table.columns[j] for j in cols),
        levels=tuple(levels),
        reference=tuple(refs),
    )
    return cats, codes


def query_codes(table: Table, idx: Sequence[int], cats: Categories) -> np.ndarray:
    """Codes of the query columns ``idx`` (one per categorical feature): -1 for a level the
    training rows do not hold; a missing cell is refused."""
    out = np.empty((table.n_rows, len(idx)))
    for c, j in enumerate(idx):
        names = column_names(table, j)
        _refuse_missing(table, j, names)
        out[:, c] = _codes(names, cats.levels[c])
    return out


def _codes(names: np.ndarray, levels: tuple[str, ...]) -> np.ndarray:
    index = {v: float(i) for i, v in enumerate(levels)}
    return np.array([index.get(v, UNSEEN) for v in names.tolist()], dtype=float)


def _refuse_missing(table: Table, j: int, names: np.ndarray) -> None:
    missing = np.flatnonzero([v is None for v in names.tolist()])
    if not missing.size:
        return
    col = shown(table.columns[j])
    raise BadCell(
        f"{missing.size} {table.name} cell(s) of the categorical feature `{col}` are missing "
        f"(null, empty or only spaces); the first is row {int(missing[0])}. Give every row a "
        "level (a missing level can be a level of its own, such as `unknown`), or remove the "
        "rows.",
        [
            Where((table.name, "rows", int(i), j), f"categorical feature `{col}` is missing")
            for i in missing[:20]
        ],
    )


def undeclared_text(table: Table, j: int) -> BadCell:
    """The refusal of a text cell in a column used as a number: the two ways out."""
    cells = table.labels[j]
    i = int(np.flatnonzero([isinstance(c, str) for c in cells])[0])
    col = shown(table.columns[j])
    return BadCell(
        f"{table.name} column `{col}` must hold numbers; row {i} holds text "
        f"{shown(cells[i], quoted=True)}. Text is read only in columns named in "
        f"`categorical` (categories: add `{col}` there to use it as a categorical feature), "
        "`tuning.group_by` and `tuning.order_by`. To fit without the column, list the "
        "columns to use in `features`.",
        [Where((table.name, "rows", i, j), "expected a number, found text")],
    )


def check_cells(cats: Categories | None, n: int, cap: int | None, label: str) -> None:
    """Refuse a design with categorical columns coded of more than ``cap`` cells: n rows x
    (numeric features + one column per level), the widest coding (kNN's one-hot); ``label``
    names the limit (``NEARWISE_MAX_CELLS = 2000000``)."""
    if cats is None or cap is None:
        return
    width = len(cats.numeric) + cats.n_onehot
    if n * width <= cap:
        return
    most = max(0, cap // n - len(cats.numeric))
    raise OverLimit(
        f"with its categorical columns coded (one column per level), the design has {n} rows x "
        f"{width} columns = {n * width} cells; the service's limit is {label}, the same as for "
        f"the table sent. Send fewer rows, or at most {most} levels in all.",
        [Where(("categorical",), f"{cats.n_onehot} levels in all")],
    )


def unseen_notices(
    notices: Sequence[Notice], unseen: np.ndarray, cats: Categories, at_query: bool
) -> list[Notice]:
    """The notices with the rows holding an unseen level taken out of every row-level notice
    (a notice left without rows is dropped), and the ``unseen_level`` notice naming them."""
    out = []
    for n in notices:
        if n.rows:
            rows = tuple(r for r in n.rows if not (0 <= r < unseen.size and unseen[r]))
            if not rows:
                continue
            n = replace(n, rows=rows)
        out.append(n)
    rows = np.flatnonzero(unseen)
    out.append(
        Notice(
            "unseen_level",
            f"{rows.size} {'query' if at_query else 'train'} row(s) hold a level of a "
            f"categorical feature ({', '.join(shown(c) for c in cats.names)}) that no usable "
            "training row holds: no effect can be estimated for it, so their value, "
            "std_error, lower and upper are null, and they get no other flag.",
            tuple(int(i) for i in rows),
        )
    )
    return out
