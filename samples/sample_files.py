"""What the sample generators share: the CSV and JSON request files they write, the time
stamps of their rows, and the persistent noise that makes readings close in time alike.

Numbers are written as the shortest text that reads back as the same double, and text cells
(ISO 8601 dates and date-times) as they are, so the same seed always gives the same bytes.
Needs numpy only.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np

#: A table: one sequence of cells per row, each a number or a text cell.
Rows = Sequence[Sequence[float | str]]


def number(v: float) -> str:
    """Shortest text that reads back as the same double, without a trailing '.0'."""
    return str(int(v)) if float(v).is_integer() else repr(float(v))


def csv_cell(v: float | str) -> str:
    return v if isinstance(v, str) else number(v)


def json_cell(v: float | str) -> str:
    return json.dumps(v) if isinstance(v, str) else number(v)


def write_csv(path: Path, columns: list[str], rows: Rows) -> None:
    lines = [",".join(columns)]
    lines += [",".join(csv_cell(v) for v in row) for row in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def table_json(columns: list[str], rows: Rows) -> str:
    """A table with one row per line, so the file reads like the CSV beside it."""
    body = ",\n    ".join("[" + ", ".join(json_cell(v) for v in row) + "]" for row in rows)
    return f'{{"columns": {json.dumps(columns)},\n   "rows": [\n    {body}\n   ]}}'


def write_request(
    path: Path,
    fields: dict,
    train: tuple[list[str], Rows],
    query: tuple[list[str], Rows],
) -> None:
    """A request body: the scalar fields first, then the two tables as (columns, rows)."""
    parts = [f'  "{key}": {json.dumps(value)}' for key, value in fields.items()]
    parts.append('  "train": ' + table_json(*train))
    parts.append('  "query": ' + table_json(*query))
    text = "{\n" + ",\n".join(parts) + "\n}\n"
    json.loads(text)  # the hand-laid-out body must still be plain JSON
    path.write_text(text, encoding="utf-8")


def with_labels(labels: Sequence[str], values: np.ndarray) -> list[list[float | str]]:
    """Rows with a text cell (a time stamp) first, then the numbers of ``values``."""
    return [[label, *row] for label, row in zip(labels, values.tolist(), strict=True)]


def time_stamps(start: str, step: timedelta, n: int, *, date_only: bool = False) -> list[str]:
    """``n`` ISO 8601 stamps from ``start``, ``step`` apart: dates (2025-01-06) or date-times
    to the minute without an offset (2025-11-03T00:10)."""
    first = datetime.fromisoformat(start)
    form = "%Y-%m-%d" if date_only else "%Y-%m-%dT%H:%M"
    return [(first + i * step).strftime(form) for i in range(n)]


def ar1(rng: np.random.Generator, n: int, phi: float) -> np.ndarray:
    """A stationary AR(1) series x_t = phi x_{t-1} + e_t with unit variance: each value keeps
    a share phi of the last one, so departures last about 1 / (1 - phi) steps."""
    shocks = rng.normal(0.0, np.sqrt(1.0 - phi**2), n)
    x = np.empty(n)
    x[0] = rng.normal(0.0, 1.0)
    for i in range(1, n):
        x[i] = phi * x[i - 1] + shocks[i]
    return x
