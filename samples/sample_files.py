"""What the sample generators share: the CSV and JSON request files they write.

Numbers are written as the shortest text that reads back as the same double, so the same seed
always gives the same bytes. Needs numpy only.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np


def number(v: float) -> str:
    """Shortest text that reads back as the same double, without a trailing '.0'."""
    return str(int(v)) if float(v).is_integer() else repr(float(v))


def write_csv(path: Path, columns: list[str], rows: np.ndarray) -> None:
    lines = [",".join(columns)]
    lines += [",".join(number(v) for v in row) for row in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def table_json(columns: list[str], rows: np.ndarray) -> str:
    """A table with one row per line, so the file reads like the CSV beside it."""
    body = ",\n    ".join("[" + ", ".join(number(v) for v in row) + "]" for row in rows)
    return f'{{"columns": {json.dumps(columns)},\n   "rows": [\n    {body}\n   ]}}'


def write_request(
    path: Path,
    fields: dict,
    train: tuple[list[str], np.ndarray],
    query: tuple[list[str], np.ndarray],
) -> None:
    """A request body: the scalar fields first, then the two tables as (columns, rows)."""
    parts = [f'  "{key}": {json.dumps(value)}' for key, value in fields.items()]
    parts.append('  "train": ' + table_json(*train))
    parts.append('  "query": ' + table_json(*query))
    text = "{\n" + ",\n".join(parts) + "\n}\n"
    json.loads(text)  # the hand-laid-out body must still be plain JSON
    path.write_text(text, encoding="utf-8")
