"""CSV parts in (header line, then one row per line; empty cell = missing) and CSV answers out."""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from nearwise.core.data import Table
from nearwise.core.errors import BadTable, Where
from nearwise.web.problems import Problem
from nearwise.web.tables import Limits, Parsed, check_finite, check_shape

_NUMBER = re.compile(r"\s*[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?\s*", re.ASCII)


@dataclass
class CsvPart:
    """A CSV part as sent; maps data row ``i`` to the line it starts on (the header is line 1)."""

    name: str
    text: str
    columns: tuple[str, ...] = ()
    _lines: list[int] = field(default_factory=list)

    def line_of(self, row: int) -> int:
        if not self._lines:
            reader = csv.reader(io.StringIO(self.text), strict=True)
            next(reader, None)
            start = reader.line_num + 1
            for _ in reader:
                self._lines.append(start)
                start = reader.line_num + 1
        return self._lines[row] if row < len(self._lines) else row + 2


def read_csv(name: str, data: bytes, limits: Limits, parts: dict[str, CsvPart]) -> Parsed:
    """Parse one CSV part (UTF-8, comma-separated, a header line first).

    The part is recorded in ``parts`` first, so errors inside it can name its lines.
    """
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise Problem(
            400,
            f"The {name} part is not UTF-8 text: {exc.reason} at byte {exc.start}.",
            [{"part": name, "message": "not UTF-8"}],
        ) from None
    part = CsvPart(name, text)
    parts[name] = part
    reader = csv.reader(io.StringIO(text), strict=True)
    try:
        header = next(reader, None)
        rows = list(reader)
    except csv.Error as exc:
        raise Problem(
            400,
            f"The {name} part is not readable CSV at line {reader.line_num}: {exc}.",
            [{"part": name, "line": reader.line_num, "message": str(exc)}],
        ) from None
    if not header:
        raise Problem(
            400,
            f"The {name} part is empty; it needs a header line naming the columns.",
            [{"part": name, "line": 1, "message": "no header line"}],
        )
    while rows and not rows[-1]:
        rows.pop()  # blank lines at the end of the file
    part.columns = tuple(header)
    check_shape(name, header, len(rows), limits)
    p = len(header)
    try:
        cells = np.array(rows, dtype=str).reshape(len(rows), p)
    except ValueError:
        i = next(i for i, r in enumerate(rows) if len(r) != p)
        raise BadTable(
            f"{name} line {part.line_of(i)} has {len(rows[i])} cells; the header has {p}.",
            [Where((name, "rows", i), f"expected {p} cells")],
        ) from None
    plain = text.isascii() and "_" not in text
    values, labels, is_num = _convert(cells, plain)
    check_finite(name, values, is_num)
    return Parsed(Table(name, tuple(header), values, labels), rows)


def _convert(
    cells: np.ndarray, plain: bool
) -> tuple[np.ndarray, dict[int, np.ndarray], np.ndarray]:
    """Numbers to floats (empty -> NaN) and text to labels; also the mask of number cells."""
    is_num = cells != ""
    values = np.empty(cells.shape)
    labels: dict[int, np.ndarray] = {}
    for j in range(cells.shape[1]):
        col = cells[:, j]
        if plain:
            try:
                values[:, j] = np.where(is_num[:, j], col, "nan").astype(np.float64)
                continue
            except ValueError:
                pass
        objs = np.frompyfunc(_cell, 1, 1)(col)
        is_text = np.frompyfunc(lambda c: isinstance(c, str), 1, 1)(objs).astype(bool)
        values[:, j] = np.where(is_text, np.nan, objs).astype(np.float64)
        is_num[:, j] &= ~is_text
        if is_text.any():
            labels[j] = objs
    return values, labels, is_num


def _cell(text: str) -> Any:
    if text == "":
        return None
    if _NUMBER.fullmatch(text) or text.strip().lower() in (
        "nan",
        "inf",
        "-inf",
        "+inf",
        "infinity",
        "-infinity",
        "+infinity",
    ):
        return float(text)
    return text


def write_predictions(
    columns: Sequence[str], cells: Sequence[Sequence[Any]], extra: dict[str, list[Any]]
) -> str:
    """The input rows as sent, then one column per entry of ``extra`` (already text or None)."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow([*columns, *extra])
    added = list(zip(*extra.values(), strict=True)) if extra else [()] * len(cells)
    for row, more in zip(cells, added, strict=True):
        writer.writerow([*(_text(c) for c in row), *("" if m is None else m for m in more)])
    return out.getvalue()


def _text(cell: Any) -> str:
    if cell is None:
        return ""
    if isinstance(cell, float):
        return repr(cell)
    return str(cell)
