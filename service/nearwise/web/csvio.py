"""CSV parts in (header line, then one row per line) and CSV answers out.

Spreadsheet habits are met, never guessed at: a UTF-8 byte-order mark and CRLF line ends are
accepted, quoted numbers are numbers, and a cell holding only spaces is empty (as JSON
``null``); so is a missing-value token such as ``NA`` (:mod:`.csv_cells`, field ``na``).
``delimiter`` and ``decimal`` (:class:`Dialect`) read semicolon lists with decimal commas.
Undeclared, a file that only makes sense in another dialect (a header split by
semicolons or tabs, or a cell such as ``1,500`` that is a number only if the comma is a decimal
or thousands separator) is refused with a message naming the parameters to set.

Limits are checked while reading, before a table is held: a part with more cells (counted from
its separators and line breaks, quoted cells read as the csv reader reads them) than a table
within ``NEARWISE_MAX_CELLS`` and ``NEARWISE_MAX_COLUMNS`` holds is refused before any row is
read (:mod:`.prescan`); a header
over ``NEARWISE_MAX_COLUMNS`` is refused before the rows; rows are read only up to the row limit
(``NEARWISE_MAX_ROWS``, ``NEARWISE_MAX_QUERY_ROWS``, or fewer if ``NEARWISE_MAX_CELLS`` allows
fewer). Blank lines at the end are dropped before reading (a run of them costs one pass of
C code); a blank line before a data row is read as a row (so it counts toward the row limit)
and refused as a row of no cells. Cells are held as variable-width strings
(``numpy.dtypes.StringDType``), so one long cell does not widen every other.
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from itertools import islice
from typing import Any

import numpy as np
from numpy.dtypes import StringDType

from nearwise.core.data import Table
from nearwise.core.errors import BadTable, Where, shown
from nearwise.web import prescan
from nearwise.web.csv_cells import PANDAS, Missing, convert
from nearwise.web.problems import Problem
from nearwise.web.tables import Limits, Parsed, check_finite, check_shape, most_rows, too_large

#: Digits with commas or points in a way that would be a number under another reading.
_SEPARATED = re.compile(r"\s*[+-]?[\d.,]*\d[\d.,]*(?:[eE][+-]?\d+)?\s*", re.ASCII)

DELIMITERS = {",": ",", "comma": ",", ";": ";", "semicolon": ";", "tab": "\t", "\t": "\t"}
DELIMITERS |= {"|": "|", "pipe": "|"}
DECIMALS = {".": ".", "point": ".", "dot": ".", ",": ",", "comma": ","}
_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe", ".": "point"}
#: The code of a CSV refused because its delimiter or decimal mark must be declared.
UNDECLARED = "csv_format_undeclared"


@dataclass(frozen=True)
class Dialect:
    """How CSV cells are separated and how a decimal mark is written, and whether the caller
    said so (an undeclared default is checked for signs of another dialect)."""

    delimiter: str = ","
    decimal: str = "."
    declared: bool = False

    @property
    def name(self) -> str:
        return f"delimiter={_NAMES[self.delimiter]}, decimal={_NAMES.get(self.decimal, 'comma')}"

    def number(self, value: float) -> str:
        """A float as text with this dialect's decimal mark (shortest round-trip form)."""
        text = repr(float(value))
        return text.replace(".", ",") if self.decimal == "," else text


#: The default: comma-separated, decimal point, nothing declared.
PLAIN = Dialect()


def dialect_from(values: Mapping[str, str]) -> Dialect:
    """The dialect from the ``delimiter`` and ``decimal`` parameters (absent: comma, point).

    ``decimal=comma`` without a ``delimiter`` means semicolon-separated cells.
    """
    delim = values.get("delimiter")
    dec = values.get("decimal")
    errors = []
    if delim is not None and delim.lower() not in DELIMITERS:
        errors.append({"parameter": "delimiter", "message": "one of , ; tab |"})
    if dec is not None and dec.lower() not in DECIMALS:
        errors.append({"parameter": "decimal", "message": "point or comma"})
    if errors:
        raise Problem(
            422,
            "`delimiter` is one of `,` (comma, the default), `;` (semicolon), `tab` or `|`; "
            "`decimal` is `point` (the default) or `comma`.",
            errors,
            code="invalid_value",
        )
    mark = DECIMALS[dec.lower()] if dec is not None else "."
    default = ";" if mark == "," else ","
    sep = DELIMITERS[delim.lower()] if delim is not None else default
    return Dialect(sep, mark, declared=delim is not None or dec is not None)


@dataclass
class CsvPart:
    """A CSV part as sent (UTF-8 bytes, no byte-order mark); maps data row ``i`` to the line
    it starts on (the header is line 1)."""

    name: str
    data: bytes
    columns: tuple[str, ...] = ()
    delimiter: str = ","
    _lines: list[int] = field(default_factory=list)

    def line_of(self, row: int) -> int:
        if not self._lines:
            reader = csv.reader(_lines(self.data), strict=True, delimiter=self.delimiter)
            next(reader, None)
            start = reader.line_num + 1
            for _ in reader:
                self._lines.append(start)
                start = reader.line_num + 1
        return self._lines[row] if row < len(self._lines) else row + 2


def _lines(data: bytes) -> io.TextIOWrapper:
    """The lines of a UTF-8 part, decoded a chunk at a time as they are read (the bytes are
    shared, not copied: no second copy of the part is held while reading it)."""
    return io.TextIOWrapper(io.BytesIO(data), encoding="utf-8", newline="\n")


def _check_utf8(name: str, data: bytes) -> None:
    try:
        data.decode("utf-8")  # checked whole, so the message can name the line; not kept
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        bom = data[:2] in (b"\xff\xfe", b"\xfe\xff")
        found = (
            'UTF-16 text (a "Unicode text" export)'
            if bom
            else (
                f"not UTF-8: byte 0x{data[exc.start]:02X} on line {line} is not valid UTF-8 "
                "(a legacy encoding such as Windows-1252 or Latin-1?)"
            )
        )
        raise Problem(
            400,
            f"The {name} part is {found}. Save the file as UTF-8 and send it again: in a "
            'spreadsheet choose the file type "CSV UTF-8" (or the CSV export\'s character '
            "set UTF-8) when saving; in a text editor choose the encoding UTF-8; with iconv: "
            f"iconv -f WINDOWS-1252 -t UTF-8 {name}.csv > {name}-utf8.csv.",
            [{"part": name, "line": 1 if bom else line, "message": "not UTF-8; save as CSV UTF-8"}],
            code="not_utf8",
        ) from None


def _check_header_dialect(name: str, data: bytes, dialect: Dialect) -> None:
    """Refuse a header line that is plainly split by another delimiter than the one in force."""
    end = data.find(b"\n")
    first = (data if end < 0 else data[:end]).decode("utf-8")
    if dialect.delimiter in first:
        return
    others = [d for d in (";", "\t", "|", ",") if d != dialect.delimiter and d in first]
    if not others:
        return  # one column
    other = others[0]
    if dialect.declared:
        detail = (
            f"The {name} part's header line has no {_NAMES[dialect.delimiter]} but holds "
            f"{_NAMES[other]}s, while {dialect.name} was declared. Set `delimiter` to the "
            "character that separates the cells."
        )
    else:
        hint = (
            "`delimiter=;` (and `decimal=comma` if numbers are written 1,5)"
            if other == ";"
            else f"`delimiter={_NAMES[other]}`"
        )
        detail = (
            f"The {name} part looks {_NAMES[other]}-separated, but CSV is read comma-separated "
            f"unless told otherwise. Set {hint} as a query-string parameter or form field."
        )
    raise Problem(
        400,
        detail,
        [
            {
                "part": name,
                "line": 1,
                "message": f"cells separated by {_NAMES[other]}; set delimiter",
            }
        ],
        code=UNDECLARED,
    )


def _open_quote_line(data: bytes, delimiter: str) -> int | None:
    """The line (1-based) where a quoted cell opens and never closes, if one does."""
    at = prescan.open_quote(data, delimiter)
    return None if at is None else data.count(b"\n", 0, at) + 1


def _check_cells(name: str, data: bytes, delimiter: str, limits: Limits) -> None:
    """Refuse a part with more cells than any table within the limits holds (its header
    included: at most NEARWISE_MAX_CELLS + NEARWISE_MAX_COLUMNS), before reading a row."""
    found = prescan.csv_cells(data, delimiter, limits.max_cells + limits.max_columns)
    if found is not None:
        size = f"{found} or more cells by its separators and line breaks (header included)"
        raise too_large(name, size, limits, (name,))


def read_csv(
    name: str,
    data: bytes,
    limits: Limits,
    parts: dict[str, CsvPart],
    dialect: Dialect = PLAIN,
    missing: Missing = PANDAS,
) -> Parsed:
    """Parse one CSV part (UTF-8, a header line first) in the given dialect, with the
    ``missing`` tokens read as missing cells.

    The part is recorded in ``parts`` first, so errors inside it can name its lines. Limits
    are checked while reading (see the module's notes).
    """
    # Blank lines at the end are dropped here, before any is read as a row.
    data = data.removeprefix(b"\xef\xbb\xbf").rstrip(b"\r\n")
    _check_utf8(name, data)
    part = CsvPart(name, data, delimiter=dialect.delimiter)
    parts[name] = part
    _check_header_dialect(name, data, dialect)
    _check_cells(name, data, dialect.delimiter, limits)
    reader = csv.reader(_lines(data), strict=True, delimiter=dialect.delimiter)
    try:
        header = next(reader, None)
        most = most_rows(name, header, limits) if header else 0
        rows = list(islice(reader, most + 1))  # one past the limit says it is passed
    except csv.Error as exc:
        line = _open_quote_line(data, dialect.delimiter) if "end of data" in str(exc) else None
        line = line or reader.line_num
        message = shown(exc)
        raise Problem(
            400,
            f"The {name} part is not readable CSV at line {line}: {message}.",
            [{"part": name, "line": line, "message": message}],
        ) from None
    if not header:
        raise Problem(
            400,
            f"The {name} part is empty; it needs a header line naming the columns.",
            [{"part": name, "line": 1, "message": "no header line"}],
        )
    part.columns = tuple(header)
    check_shape(name, header, len(rows), limits, stopped=len(rows) > most)
    p = len(header)
    try:
        cells = np.array(rows, dtype=StringDType()).reshape(len(rows), p)
    except ValueError:
        i = next(i for i, r in enumerate(rows) if len(r) != p)
        hint = ""
        if dialect.delimiter == "," and not dialect.declared:
            hint = (
                " If a comma in it is a decimal mark (1,5), set `decimal=comma` and `delimiter=;`."
            )
        raise BadTable(
            f"{name} line {part.line_of(i)} has {len(rows[i])} cells; the header has {p}.{hint}",
            [Where((name, "rows", i), f"expected {p} cells")],
        ) from None
    numbers = cells
    if dialect.decimal == ",":
        _refuse_points(name, cells, dialect, missing)
        numbers = np.strings.replace(cells, ",", ".") if cells.size else cells
    plain = data.isascii() and b"_" not in data
    values, labels, is_num = convert(numbers, cells, plain, missing)
    if dialect.decimal == "." and labels:
        _refuse_commas(name, labels, dialect)
    check_finite(name, values, is_num)
    return Parsed(Table(name, tuple(header), values, labels), rows)


def _refuse_points(name: str, cells: np.ndarray, dialect: Dialect, missing: Missing) -> None:
    """With decimal commas, a number-like cell holding a point is ambiguous (1.500), unless
    it is a missing-value token."""
    if not cells.size:
        return
    dotted = np.nonzero(np.strings.find(cells, ".") >= 0)
    for i, j in zip(*dotted, strict=True):
        cell = str(cells[i, j])
        if _SEPARATED.fullmatch(cell) and cell not in missing:
            raise Problem(
                400,
                f"{name} row {i}, column {j} holds {shown(cell, True)}, a number with a point "
                f"while {dialect.name} is in force: is the point a thousands separator? Remove "
                "thousands separators, or send `decimal=point` if points mark decimals.",
                [Where((name, "rows", int(i), int(j)), "point in a number; decimal=comma")],
                code=UNDECLARED,
            )


def _refuse_commas(name: str, labels: dict[int, np.ndarray], dialect: Dialect) -> None:
    """With decimal points, a text cell that is a number once a comma is read is ambiguous."""
    for j, col in labels.items():
        for i, cell in enumerate(col):
            if isinstance(cell, str) and "," in cell and _SEPARATED.fullmatch(cell):
                raise Problem(
                    400,
                    f"{name} row {i}, column {j} holds {shown(cell, True)}: with decimal=point "
                    "(the default) that is not a number, and it is not guessed whether the comma "
                    "is a decimal mark (1,5 = 1.5) or a thousands separator (1,500 = 1500). "
                    "For decimal commas set `decimal=comma` (with `delimiter=;` for "
                    "semicolon-separated files); otherwise remove the thousands separators.",
                    [Where((name, "rows", i, j), "comma in a number; set decimal")],
                    code=UNDECLARED,
                )


#: A text cell starting with one of these is read as a formula by spreadsheets; the CSV
#: answers prefix it with an apostrophe (the common practice for CSV meant for spreadsheets).
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def neutral(text: str) -> str:
    """``text`` as a spreadsheet shows it, never evaluates it: an apostrophe before a leading
    formula character."""
    return "'" + text if text.startswith(FORMULA_STARTS) else text


def write_rows(
    columns: Sequence[str],
    cells: Sequence[Sequence[Any]],
    extra: dict[str, list[Any]],
    dialect: Dialect = PLAIN,
    check: Callable[[], None] | None = None,
) -> str:
    """The input rows as sent, then one column per entry of ``extra`` (already text or None).

    ``check`` (the request's time budget) is called every WRITE_CHECK_ROWS rows."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n", delimiter=dialect.delimiter)
    writer.writerow([neutral(c) for c in (*columns, *extra)])
    added = list(zip(*extra.values(), strict=True)) if extra else [()] * len(cells)
    for i, (row, more) in enumerate(zip(cells, added, strict=True)):
        if check is not None and i % WRITE_CHECK_ROWS == 0:
            check()
        writer.writerow(
            [*(_text(c, dialect) for c in row), *("" if m is None else m for m in more)]
        )
    return out.getvalue()


#: Rows written between two checks of the time budget (about 0.1 s of writing on one core).
WRITE_CHECK_ROWS = 4096


def write_table(
    columns: Sequence[str],
    rows: Sequence[Sequence[Any]],
    dialect: Dialect = PLAIN,
    check: Callable[[], None] | None = None,
) -> str:
    """A table of text, numbers and None (empty cells) in the dialect."""
    return write_rows(columns, rows, {}, dialect, check)


def texts(values: Sequence[float | None], dialect: Dialect) -> list[str | None]:
    """Numbers as text in the dialect; None (missing) stays None."""
    return [None if v is None else dialect.number(v) for v in values]


def _text(cell: Any, dialect: Dialect) -> str:
    if cell is None:
        return ""
    if isinstance(cell, bool):
        return "true" if cell else "false"
    if isinstance(cell, float):
        return dialect.number(cell) if np.isfinite(cell) else ""
    if isinstance(cell, int):
        return str(cell)
    return neutral(str(cell))
