"""What the client returns: the whole answer, with its rows as records or a DataFrame.

For a table scored in chunks, :func:`merge` joins the answers: the predictions (or locality
rows) in order, and each warning about query rows with its ``rows`` renumbered to the whole
query and the count that opens its message updated; every other part of the answer (tuning,
fit, model, data-set warnings) is the first request's, the one that tuned.
"""

from __future__ import annotations

import copy
import re
from typing import Any

from nearwise.client.tables import Table

_COUNT = re.compile(r"^\d+(?= (query )?row\(s\))")


class Result:
    """One answer of the service.

    ``answer`` is the whole JSON document (for a chunked query: the merged one, see
    :func:`merge`), ``answers`` every document received, in order. ``records()`` and
    ``predictions`` give one row per query row (per training row when no query was sent): the
    row's own columns, then the answer's fields for it (``value``, ``std_error``, ``lower``,
    ``upper``, ``flags``, and ``residual`` and ``cv_residual`` for fitted values; ``nearest``,
    ``ratio`` and ``flags`` for locality). A row column with the name of an answer field is
    renamed ``query_<name>``.
    """

    def __init__(self, kind: str, answer: dict[str, Any], rows: Table, answers: list) -> None:
        self.kind = kind  # "predict", "compare" or "locality"
        self.answer = answer
        self.answers = answers
        self._rows = rows

    @property
    def _doc(self) -> dict[str, Any]:
        """The predict document: the answer itself, or compare's recommended ``prediction``."""
        return self.answer["prediction"] if self.kind == "compare" else self.answer

    def _entries(self) -> list[dict[str, Any]]:
        return self.answer["query"] if self.kind == "locality" else self._doc["predictions"]

    @property
    def warnings(self) -> list[dict[str, Any]]:
        """Every warning: compare's own first, then those of the prediction."""
        if self.kind == "compare":
            return [*self.answer.get("warnings", []), *self._doc.get("warnings", [])]
        return list(self.answer.get("warnings", []))

    @property
    def tuning(self) -> dict[str, Any]:
        """The tuning report (scheme, folds, seed, rule, best, path, ...)."""
        return self._doc["tuning"]

    @property
    def method(self) -> str:
        return self._doc["method"]

    @property
    def params(self) -> dict[str, Any]:
        """Every parameter in force, fixed and tuned."""
        return self._doc["params"]

    def records(self) -> list[dict[str, Any]]:
        """One dict per row: the row's own cells, then the answer's fields for it."""
        entries = self._entries()
        names = _row_names(self._rows.columns, entries)
        return [
            {**dict(zip(names, row, strict=True)), **entry}
            for row, entry in zip(self._rows.rows, entries, strict=True)
        ]

    def frame(self) -> Any:
        """:meth:`records` as a pandas DataFrame, indexed like the table sent (when that was
        a DataFrame). Needs pandas."""
        try:
            import pandas as pd
        except ImportError:
            raise ImportError(
                "pandas is not installed: use Result.records() (a list of dicts) or "
                "Result.answer (the whole JSON answer), or install pandas."
            ) from None
        entries = self._entries()
        names = _row_names(self._rows.columns, entries)
        frame = pd.DataFrame.from_records(self.records(), columns=[*names, *_keys(entries)])
        if self._rows.index is not None:
            frame.index = self._rows.index
        return frame

    @property
    def predictions(self) -> Any:
        """The predictions as a pandas DataFrame (see :meth:`frame`)."""
        if self.kind == "locality":
            raise AttributeError("a locality answer has no predictions: use frame() or records()")
        return self.frame()

    def __repr__(self) -> str:
        return f"<Result {self.kind}: {len(self._entries())} rows, {len(self.answers)} request(s)>"


def _keys(entries: list[dict[str, Any]]) -> list[str]:
    keys: dict[str, None] = {}
    for e in entries[:1]:
        keys.update(dict.fromkeys(e))
    return list(keys)


def _row_names(columns: tuple[str, ...], entries: list[dict[str, Any]]) -> list[str]:
    taken = set(_keys(entries))
    return [f"query_{c}" if c in taken else c for c in columns]


def merge(kind: str, answers: list[dict[str, Any]], sizes: list[int]) -> dict[str, Any]:
    """The answers of consecutive query chunks (of ``sizes`` rows) as one answer."""
    first = copy.deepcopy(answers[0])
    if kind == "compare":  # the later chunks were predicted with the recommended method
        first["prediction"] = _merge_doc("predictions", [first["prediction"], *answers[1:]], sizes)
        return first
    return _merge_doc(
        "query" if kind == "locality" else "predictions", [first, *answers[1:]], sizes
    )


def _merge_doc(key: str, docs: list[dict[str, Any]], sizes: list[int]) -> dict[str, Any]:
    out = copy.deepcopy(docs[0])
    out[key] = [entry for doc in docs for entry in doc[key]]
    row_codes = {code for entry in out[key] for code in entry.get("flags", [])}
    warnings = [w for w in out.get("warnings", [])]
    by_code = {w["code"]: w for w in warnings if w["code"] in row_codes}
    offset = 0
    for doc, size in zip(docs, sizes, strict=True):
        if doc is not docs[0]:
            for w in doc.get("warnings", []):
                if w["code"] not in row_codes:
                    continue  # about the data set: the first request's stands
                rows = [r + offset for r in w.get("rows", [])]
                if w["code"] in by_code:
                    by_code[w["code"]]["rows"] = [*by_code[w["code"]].get("rows", []), *rows]
                else:
                    by_code[w["code"]] = {**w, "rows": rows}
                    warnings.append(by_code[w["code"]])
        offset += size
    for w in by_code.values():
        w["message"] = _COUNT.sub(str(len(w.get("rows", []))), w["message"])
    out["warnings"] = warnings
    return out
