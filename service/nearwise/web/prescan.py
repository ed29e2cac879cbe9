"""Cheap scans of a body before it is parsed: bounds on how many values parsing would build.

A parser builds one Python object per JSON value or CSV cell before any limit on rows or cells
can be checked on its result, so a body of ``[[],[],...]`` or of short CSV cells costs twenty
or more times its size in memory. These scans count, in passes of C code over the body, the
separators that bound those numbers (commas and opening brackets in JSON; cell separators in
CSV), so that a body holding more than any request within the limits can hold is refused
before it is parsed. They never refuse a body within the limits: when the plain count is over,
quoted text (JSON strings, quoted CSV cells, which may hold any separator) is left out and the
count made again, in bounded memory.

Every JSON shape of a table (:mod:`nearwise.web.table_shapes`) is counted alike: a row object
counts one object and one value per cell, as a row array does (keys are not values, and the
parser keeps one string per distinct key), and pandas' ``split`` shape one more value per row
(its ``index``, allowed for in :func:`nearwise.web.intake.json_bounds`). A dict costs more than
a list: at the same counts, parsing row objects peaked at about 1.7 times the memory of row
arrays (50 keys of one letter, numbers such as 1.5: 260 MB against 153 MB at the default
limits' bound, measured with tracemalloc).
"""

from __future__ import annotations

import re
from collections import deque
from functools import cache
from itertools import count, islice

import numpy as np

#: Bytes of a JSON body looked at per step of a count (its temporaries: a few times this).
_CHUNK = 1 << 18
_QUOTE = 34


def _counts(data: bytes, first: bytes, second: bytes, quoted: bool = False) -> tuple[int, int]:
    """How many bytes of ``data`` are in ``first`` and in ``second``, chunk by chunk (no copy
    of the body); with ``quoted``, only those after an even number of quotes."""
    raw = np.frombuffer(data, dtype=np.uint8)
    found, odd = [0, 0], 0
    for start in range(0, raw.size, _CHUNK):
        part = raw[start : start + _CHUNK]
        hits = [_any_of(part, group) for group in (first, second)]
        if quoted:
            quotes = np.cumsum(part == _QUOTE, dtype=np.uint8)  # wraps at 256; parity kept
            quotes ^= odd  # the quotes before this chunk
            odd = int(quotes[-1]) & 1
            outside = (quotes & 1) == 0
            for hit in hits:
                hit &= outside
        for k, hit in enumerate(hits):
            found[k] += int(np.count_nonzero(hit))
    return found[0], found[1]


def _any_of(part: np.ndarray, group: bytes) -> np.ndarray:
    hit = part == group[0]
    for byte in group[1:]:
        hit |= part == byte
    return hit


def json_values(body: bytes) -> tuple[int, int]:
    """Upper bounds on the values (members' keys aside) and on the arrays and objects of a
    JSON ``body``, from all its commas and opening brackets (those in strings included).

    Every value but the first of each array or object follows a comma, and each array or
    object opens with a bracket, so values <= commas + containers + 1 (members' keys are at
    most as many as the values again)."""
    commas, opens = _counts(body, b",", b"[{")
    return commas + opens + 1, opens


def json_values_outside_strings(body: bytes) -> tuple[int, int]:
    """:func:`json_values` with the commas and brackets inside strings left out.

    Escapes are blanked first (``\\\\`` then ``\\"``), so that every quote left opens or closes
    a string; a byte is then inside a string when an odd number of quotes precede it. Up to the
    first fault of an invalid body (where parsing stops) this is exact."""
    if b"\\" in body:
        body = body.replace(b"\\\\", b"__").replace(b'\\"', b"__")
    commas, opens = _counts(body, b",", b"[{", quoted=True)
    return commas + opens + 1, opens


def json_over(body: bytes, values: int, containers: int) -> tuple[int, int] | None:
    """None when the JSON ``body`` holds at most ``values`` values and ``containers`` arrays
    and objects (outside strings); otherwise the counts found."""
    found = json_values(body)
    if found[0] <= values and found[1] <= containers:
        return None
    found = json_values_outside_strings(body)
    return None if found[0] <= values and found[1] <= containers else found


@cache
def _quoted_cell(delimiter: str) -> re.Pattern[bytes]:
    """A quoted CSV cell as Python's csv reader reads one: a quote at the start of a cell
    (after a separator, a line break or at the start), doubled quotes inside, to the closing
    quote (group 1) or to the end of the text (an unclosed cell)."""
    d = re.escape(delimiter).encode()
    return re.compile(rb"(?:\A|(?<=[" + d + rb'\n]))"(?:[^"]|"")*+("?)')


@cache
def _cell_end(delimiter: str) -> re.Pattern[bytes]:
    """One cell and the separator or line break that ends it (or the end of the text), as
    the csv reader splits them: a quoted cell runs to its closing quote (line breaks and
    separators inside it included), any other to the next separator or line break. It
    matches at every cell's start, so the scan never restarts inside a cell; possessive, so
    it is linear in the text. It also matches the empty string at the end once more: a cell
    only after a final separator."""
    d = re.escape(delimiter).encode()
    cell = rb'(?:"(?:[^"]|"")*+"?[^' + d + rb"\n]*+|[^" + d + rb"\n]*+)"
    return re.compile(cell + rb"(?:[" + d + rb"\n]|\Z)")


def _matches(pattern: re.Pattern[bytes], data: bytes, most: int) -> int:
    """How many times ``pattern`` matches ``data``, counted up to ``most + 1`` in C code,
    holding no match (deque of length 0; the counter advances once per match)."""
    counter = count()
    deque(zip(islice(pattern.finditer(data), most + 1), counter, strict=False), maxlen=0)
    return next(counter)


def csv_cells(data: bytes, delimiter: str, most: int) -> int | None:
    """None when a CSV part (UTF-8 bytes, no byte-order mark) holds at most ``most`` cells
    as the csv reader splits them; otherwise a number over ``most`` they reach. Counted from
    the separators and line breaks (one pass; both are ASCII, never part of a longer UTF-8
    character) unless the part holds quotes and that count is over: then cell by cell, up to
    ``most + 1``. A CSV of r rows of p cells holds (r + 1) p cells, header included."""
    sep = delimiter.encode()
    separators, breaks = _counts(data, sep, b"\n")
    found = separators + breaks + 1
    if found > most and b'"' in data:
        found = _matches(_cell_end(delimiter), data, most + 1)
        if found <= most + 1 and not data.endswith(sep):
            found -= 1  # the empty match at the end, a cell only after a separator
    return found if found > most else None


def open_quote(data: bytes, delimiter: str) -> int | None:
    """The offset of the quote that opens a cell never closed (the part ends inside it)."""
    last = deque(_quoted_cell(delimiter).finditer(data), maxlen=1)
    if last and not last[0].group(1):
        return last[0].start()
    return None
