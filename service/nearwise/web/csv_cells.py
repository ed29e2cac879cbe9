"""CSV cells -> numbers, missing values and text, and the tokens that mark a missing value.

A cell is missing when it is empty (or holds only spaces, as JSON ``null``) or when its text,
as the csv reader gives it (quotes removed), is one of the missing-value tokens. By default
those are the tokens pandas ``read_csv`` reads as missing (its ``STR_NA_VALUES``, pandas 2 and
3): ``NA`` (R's ``write.csv``), ``N/A``, ``n/a``, ``#N/A``, ``#N/A N/A``, ``#NA``, ``NULL``,
``null``, ``None``, ``<NA>``, ``NaN``, ``-NaN``, ``nan``, ``-nan``, ``1.#IND``, ``-1.#IND``,
``1.#QNAN`` and ``-1.#QNAN``. A token matches the whole cell exactly: case and spaces count
(`` NA`` is text), as in pandas. The request field ``na`` replaces the set; then only its
tokens (and the empty cell) are missing, so ``nan`` outside it is a non-finite number again
(refused at its cell). JSON tables are not read here: there only ``null`` is missing.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from nearwise.core.errors import InvalidValue, Where

#: pandas' default missing-value tokens (``pandas._libs.parsers.STR_NA_VALUES``) without the
#: empty cell, which is always missing.
PANDAS_NA = (
    "#N/A",
    "#N/A N/A",
    "#NA",
    "-1.#IND",
    "-1.#QNAN",
    "-NaN",
    "-nan",
    "1.#IND",
    "1.#QNAN",
    "<NA>",
    "N/A",
    "NA",
    "NULL",
    "NaN",
    "None",
    "n/a",
    "nan",
    "null",
)
#: The most tokens ``na`` holds, and the longest token.
MAX_TOKENS = 100
MAX_TOKEN_CHARS = 256

_NUMBER = re.compile(r"\s*[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?\s*", re.ASCII)
_SPECIAL = ("nan", "inf", "-inf", "+inf", "infinity", "-infinity", "+infinity")


def _reads_as_number(token: str) -> bool:
    """Whether numpy could read ``token`` (or it with a decimal comma) as a finite number."""
    for text in {token, token.replace(",", ".")}:
        try:
            if np.isfinite(np.array([text]).astype(np.float64)).all():
                return True
        except ValueError:
            pass
    return False


@dataclass(frozen=True)
class Missing:
    """The tokens read as a missing value (besides the empty cell)."""

    tokens: tuple[str, ...] = PANDAS_NA
    #: Some token reads as a finite number (``-999``): no column is taken as all numbers
    #: before its cells are compared with the tokens.
    numeric: bool = field(init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "numeric", any(map(_reads_as_number, self.tokens)))

    def __contains__(self, text: object) -> bool:
        return text in self.tokens

    def mask(self, col: np.ndarray) -> np.ndarray:
        """Which cells of a column of text (as sent) hold a token."""
        found = np.zeros(col.shape, dtype=bool)
        for token in self.tokens:
            found |= col == token
        return found


#: The default: pandas' tokens.
PANDAS = Missing()


def missing_from(na: Sequence[str] | None) -> Missing:
    """The tokens of the ``na`` field (absent: pandas' defaults); the empty token is implied."""
    if na is None:
        return PANDAS
    return Missing(tuple(dict.fromkeys(t for t in na if t != "")))


def convert(
    numbers: np.ndarray, cells: np.ndarray, plain: bool, missing: Missing = PANDAS
) -> tuple[np.ndarray, dict[int, np.ndarray], np.ndarray]:
    """Numbers to floats (missing -> NaN) and text to labels; also the mask of number cells.

    ``numbers`` is parsed (decimal commas already made points); ``cells`` (the text as sent)
    is compared with the tokens and kept for labels. ``plain``: the part is ASCII without
    ``_``, so numpy's reading of a number is Python's. A column of numbers only is read in
    one pass without looking for tokens, unless a token reads as a number."""
    is_num = np.ones(numbers.shape, dtype=bool)
    values = np.empty(numbers.shape)
    labels: dict[int, np.ndarray] = {}
    for j in range(numbers.shape[1]):
        col = numbers[:, j]
        if plain and not missing.numeric:
            try:
                read = col.astype(np.float64)  # every cell a number: the common case
            except ValueError:
                read = None
            if read is not None and np.isfinite(read).all():
                values[:, j] = read
                continue
        gone = missing.mask(cells[:, j])
        if gone.any():
            col = np.where(gone, "", col)
        if plain:
            try:
                values[:, j] = col.astype(np.float64)  # non-finite ones are refused later
                continue
            except ValueError:
                is_num[:, j] = filled = col != ""
            try:
                values[:, j] = np.nan
                values[filled, j] = col[filled].astype(np.float64)  # numbers and empty cells
                continue
            except ValueError:
                pass
        else:
            is_num[:, j] = col != ""
        objs = np.frompyfunc(_cell, 1, 1)(col.astype(object))
        is_text = np.frompyfunc(lambda c: isinstance(c, str), 1, 1)(objs).astype(bool)
        is_none = np.frompyfunc(lambda c: c is None, 1, 1)(objs).astype(bool)
        values[:, j] = np.where(is_text | is_none, np.nan, objs).astype(np.float64)
        is_num[:, j] &= ~(is_text | is_none)
        if is_text.any():
            labels[j] = np.where(is_text, cells[:, j].astype(object), objs)
    return values, labels, is_num


def _cell(text: str) -> Any:
    if not text.strip():
        return None  # empty, or only spaces: missing, as JSON null
    if _NUMBER.fullmatch(text) or text.strip().lower() in _SPECIAL:
        return float(text)
    return text


def na_in_json() -> InvalidValue:
    """The 422 for ``na`` in a JSON body, whose tables mark a missing cell with null only."""
    return InvalidValue(
        "`na` sets the missing-value tokens of CSV tables (form field or query-string "
        'parameter). In a JSON table a missing cell is null; text such as "NA" stays text. '
        "Send null for each missing cell, or send the tables as CSV.",
        [Where(("na",), "CSV tables only; in JSON send null")],
    )
