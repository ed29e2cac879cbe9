"""Send a request body to nearwise with its Python client and print the predictions, or the
error it explains.

    python samples/clients/python_client.py                          # the turbine spline sample
    python samples/clients/python_client.py samples/predict_warehouse.json
    python samples/clients/python_client.py samples/compare_warehouse.json compare
    NEARWISE_URL=http://host:9000 python samples/clients/python_client.py
    NEARWISE_API_KEY=your-key python samples/clients/python_client.py  # sent as a bearer token

Needs the nearwise package (``pip install nearwise`` or ``pip install -e .``), nothing else.
The body file's fields become the client's arguments: ``train``, ``target``, ``query``,
``method`` (or ``methods`` for compare) and any other field as a keyword. Exits with 1 when the
service refuses the request, 2 when it cannot be reached.
"""

from __future__ import annotations

import json
import os
import sys
import urllib.error
from pathlib import Path
from typing import Any

from nearwise.client import Client, ProblemError, Result

BASE = os.environ.get("NEARWISE_URL", "http://127.0.0.1:8080")
KEY = os.environ.get("NEARWISE_API_KEY") or None
DEFAULT_BODY = Path(__file__).resolve().parents[1] / "predict_spline.json"


def show_problem(err: ProblemError) -> None:
    """An RFC 9457 problem: its title and detail, then each place at fault."""
    print(f"error {err.status}: {err.title}")
    print(err.detail)
    for e in err.errors:
        if "pointer" in e:
            where = e["pointer"]
        else:  # a CSV part: part, line and column
            where = f"{e.get('part')} line {e.get('line')}, column {e.get('column')}"
        print(f"  {where}: {e.get('message')}")


def fmt(x: float | None) -> str:
    return "-" if x is None else f"{x:.6g}"


def show_result(result: Result) -> None:
    if result.kind == "compare":
        print(f"recommended: {result.answer['recommended']} ({result.answer['reason']})")
    fit = (result.answer.get("prediction") or result.answer)["fit"]
    print(f"method {result.method}, cross-validated error {fmt(fit['cv_error'])}")
    print("row\tvalue\tlower\tupper\tflags")
    for i, p in enumerate(result.records()):
        flags = " ".join(p["flags"])
        print(f"{i}\t{fmt(p['value'])}\t{fmt(p['lower'])}\t{fmt(p['upper'])}\t{flags}")
    for w in result.warnings:
        print(f"warning {w['code']}: {w['message']}")


def send(client: Client, doc: dict[str, Any], endpoint: str) -> Result:
    """The body's fields as the client's arguments."""
    train, target, query = doc.pop("train"), doc.pop("target"), doc.pop("query", None)
    if endpoint == "compare":
        return client.compare(train, target, query, methods=doc.pop("methods", None), **doc)
    return client.predict(train, target, query, method=doc.pop("method", "auto"), **doc)


def main() -> int:
    body = Path(sys.argv[1]) if len(sys.argv) > 1 else DEFAULT_BODY
    endpoint = sys.argv[2] if len(sys.argv) > 2 else "predict"
    doc = json.loads(body.read_text(encoding="utf-8"))
    try:
        result = send(Client(BASE, key=KEY), doc, endpoint)
    except ProblemError as err:
        show_problem(err)
        return 1
    show_result(result)
    return 0


if __name__ == "__main__":
    try:
        sys.exit(main())
    except (urllib.error.URLError, OSError, json.JSONDecodeError) as exc:
        print(f"request failed: {exc}", file=sys.stderr)
        sys.exit(2)
