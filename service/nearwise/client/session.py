"""The client: tables in, :class:`~nearwise.client.results.Result` out.

Each request carries its tables as JSON or as CSV parts of a multipart body, whichever is
smaller (``encoding="auto"``); CSV only when every cell reads back exactly as sent
(:meth:`~nearwise.client.tables.Table.csv_safe`) and every field can be a form field. CSV
requests send ``na`` empty (only an empty cell is missing) unless ``na`` is given.

A query of more than ``chunk_rows`` rows is scored in chunks. The first request (the first
``chunk_rows`` rows) tunes as asked; every later chunk goes to ``/v1/predict`` with the same
training table and tuning options (so the same folds) and the method of the first answer, and,
with ``chunks="fixed"`` (the default), every parameter of that answer fixed (``params``, no
``grid``): nothing is tuned again. Measured against one request with the whole query (kNN,
linear, spline, additive, ``auto``; ``tests/web/test_client_lib.py``): ``value``,
``std_error``, ``flags`` and the warnings are identical, and so are all figures of kNN;
``lower`` and ``upper`` of the other methods may differ in the last digits (up to about 1e-13
of the target's scale), because the out-of-fold residuals behind the CV+ bounds are computed
for the one fixed candidate rather than along the whole tuning path, and sum in another order.
With ``chunks="exact"`` the later chunks send the first answer's whole tuning path as ``grid``
(the method fixed, its other parameters fixed): each re-scores those candidates on the same
folds and every figure is identical, at the cost of one method's tuning per chunk.

Keep ``chunk_rows`` a multiple of 64: BLAS computes blocks of rows together, and a chunk that
ends inside a block can round a row's prediction differently (measured with OpenBLAS: chunks of
30 rows changed values by up to 2e-13 of the target's scale; chunks of 32, 64 or 256 by none).
Locality needs no tuning: its chunks are sent as they are. The hull test's work per request is
capped (NEARWISE_MAX_HULL_COST_S, 4 to 8 features), so a row flagged ``hull_not_tested`` in
one large request may be decided when it comes in a smaller chunk.
"""

from __future__ import annotations

import json
import uuid
from typing import Any

from nearwise.client.results import Result, merge
from nearwise.client.tables import Table, table
from nearwise.client.transport import Transport

#: Query rows per request when a query is scored in chunks: a multiple of 64, and at most
#: the service's NEARWISE_MAX_QUERY_ROWS (100,000 by default).
CHUNK_ROWS = 8192
CHUNKS = ("fixed", "exact")
_JSON = "application/json"


class Client:
    """A nearwise service at ``url``.

    ``key``: an API key, sent as ``Authorization: Bearer <key>``. ``timeout``: seconds per
    request. ``retries`` and ``max_wait``: a ``503`` with ``Retry-After`` is tried again after
    that many seconds, at most ``retries`` times and ``max_wait`` seconds of waiting in all.
    ``chunk_rows``: query rows per request; ``chunks``: ``"fixed"`` or ``"exact"``, how later
    chunks are scored (see the module). ``encoding``: ``"auto"`` (the smaller of JSON and
    CSV), ``"json"`` or ``"csv"`` (where every cell allows it; otherwise JSON).
    """

    def __init__(
        self,
        url: str = "http://127.0.0.1:8080",
        key: str | None = None,
        timeout: float = 300.0,
        retries: int = 3,
        max_wait: float = 120.0,
        chunk_rows: int = CHUNK_ROWS,
        encoding: str = "auto",
        chunks: str = "fixed",
    ) -> None:
        if chunk_rows < 1:
            raise ValueError(f"chunk_rows must be 1 or more; got {chunk_rows}.")
        if encoding not in ("auto", "json", "csv"):
            raise ValueError(f"encoding must be auto, json or csv; got {encoding!r}.")
        if chunks not in CHUNKS:
            raise ValueError(f"chunks must be fixed or exact; got {chunks!r}.")
        self.chunks = chunks
        self.transport = Transport(url, key, timeout, retries, max_wait)
        self.chunk_rows = chunk_rows
        self.encoding = encoding
        self.sent: list[str] = []  # the media type of each request body sent, in order

    def predict(
        self, train: Any, target: str, query: Any = None, method: str = "auto", **fields: Any
    ) -> Result:
        """POST /v1/predict: fit ``method`` to ``train``, tune it and predict at ``query``
        (absent: at the training rows). ``fields``: any other request field (``features``,
        ``params``, ``grid``, ``tuning``, ``interval``, ``categorical``, ``weight_by``, ...)."""
        return self._scored("predict", {"method": method, "target": target, **fields}, train, query)

    def compare(
        self, train: Any, target: str, query: Any = None, methods: Any = None, **fields: Any
    ) -> Result:
        """POST /v1/compare: tune ``methods`` (default: all that apply) on the same folds;
        the result's predictions are the recommended method's."""
        more = {} if methods is None else {"methods": list(methods)}
        return self._scored("compare", {"target": target, **more, **fields}, train, query)

    def locality(self, train: Any, query: Any = None, **fields: Any) -> Result:
        """POST /v1/locality: distances and flags without fitting (``features``, ``scale``,
        ``fractions``, ... in ``fields``)."""
        return self._scored("locality", dict(fields), train, query)

    def methods(self) -> dict[str, Any]:
        """GET /v1/methods: the catalogue."""
        return self.transport.send("GET", "/v1/methods")

    def _scored(self, kind: str, fields: dict[str, Any], train: Any, query: Any) -> Result:
        t = table(train, "train")
        q = None if query is None else table(query, "query")
        if q is None or len(q) <= self.chunk_rows:
            answer = self._post(f"/v1/{kind}", fields, t, q)
            return Result(kind, answer, q if q is not None else t, [answer])
        step = self.chunk_rows
        parts = [q.part(i, i + step) for i in range(0, len(q), step)]
        answers = [self._post(f"/v1/{kind}", fields, t, parts[0])]
        path, later = f"/v1/{kind}", fields
        if kind != "locality":
            path, later = "/v1/predict", _fixed(fields, answers[0], kind, self.chunks)
        answers += [self._post(path, later, t, part) for part in parts[1:]]
        merged = merge(kind, answers, [len(p) for p in parts])
        return Result(kind, merged, q, answers)

    def _post(self, path: str, fields: dict[str, Any], train: Table, query: Table | None) -> Any:
        tables = {"train": train, **({} if query is None else {"query": query})}
        data, ctype = _encode(fields, tables, self.encoding)
        self.sent.append(ctype.split(";")[0])
        return self.transport.send("POST", path, data, ctype)


def _fixed(fields: dict[str, Any], first: dict[str, Any], kind: str, how: str) -> dict[str, Any]:
    """The fields of a later chunk: the first answer's method and parameters fixed, or with
    ``how="exact"`` its tuned parameter's path as the grid."""
    doc = first["prediction"] if kind == "compare" else first
    out = {k: v for k, v in fields.items() if k not in ("grid", "method", "methods", "params")}
    params = dict(doc["params"])
    tuned = [name for name in doc["tuning"].get("best") or {} if name in params]
    path = doc["tuning"].get("path") or []
    if how == "exact" and len(tuned) == 1 and len(path) > 1:
        grid = {tuned[0]: [entry["params"][tuned[0]] for entry in path]}
        del params[tuned[0]]
        return {**out, "method": doc["method"], "params": params, "grid": grid}
    return {**out, "method": doc["method"], "params": params}


def _encode(fields: dict[str, Any], tables: dict[str, Table], how: str) -> tuple[bytes, str]:
    """The request body and its Content-Type: JSON or multipart CSV, as ``how`` asks."""
    form = _form_fields(fields)
    csv_ok = form is not None and all(t.csv_safe() for t in tables.values())
    if "na" in fields and not csv_ok:
        raise ValueError("`na` applies to CSV tables only, and these tables cannot go as CSV.")
    multipart = _multipart(form, tables) if csv_ok and how != "json" else None
    if "na" in fields or how == "csv":
        if multipart is not None:
            return multipart
    doc = {**fields, **{name: t.as_json() for name, t in tables.items()}}
    data = json.dumps(doc, separators=(",", ":"), allow_nan=False, ensure_ascii=False).encode()
    if multipart is not None and len(multipart[0]) < len(data):
        return multipart
    return data, _JSON


def _multipart(form: list[tuple[str, str]] | None, tables: dict[str, Table]) -> tuple[bytes, str]:
    boundary = "nearwise-" + uuid.uuid4().hex
    head = f"--{boundary}\r\nContent-Disposition: form-data; name="
    out = bytearray()
    for name, text in form or []:
        out += f'{head}"{name}"\r\n\r\n'.encode() + text.encode() + b"\r\n"
    for name, t in tables.items():
        out += f'{head}"{name}"; filename="{name}.csv"\r\nContent-Type: text/csv\r\n\r\n'.encode()
        out += t.as_csv() + b"\r\n"
    out += f"--{boundary}--\r\n".encode()
    return bytes(out), f"multipart/form-data; boundary={boundary}"


def _form_fields(fields: dict[str, Any]) -> list[tuple[str, str]] | None:
    """``fields`` as form fields (dotted names), or None when one would not read back exactly."""
    out: list[tuple[str, str]] = []
    for name, value in _flat(fields, ""):
        if '"' in name or "\r" in name or "\n" in name:
            return None
        text = _form_text(value)
        if text is None:
            return None
        out.append((name, text))
    if "na" not in fields:
        out.append(("na", ""))  # one empty item: only an empty cell is missing
    return out


def _flat(fields: dict[str, Any], prefix: str) -> list[tuple[str, Any]]:
    out: list[tuple[str, Any]] = []
    for k, v in fields.items():
        if isinstance(v, dict) and k != "na":
            out += _flat(v, f"{prefix}{k}.")
        else:
            out.append((f"{prefix}{k}", v))
    return out


def _form_text(value: Any) -> str | None:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return json.dumps(value, allow_nan=False) if value == value else None
    if isinstance(value, str):
        try:
            json.loads(value)
        except ValueError:
            return value if not value.lstrip().startswith(("[", "{")) else None
        return None  # text that reads as a JSON literal would be read as one
    if isinstance(value, list | tuple) and all(
        isinstance(v, str | int | float) and not isinstance(v, bool) for v in value
    ):
        return json.dumps(list(value), allow_nan=False, ensure_ascii=False)
    return None
