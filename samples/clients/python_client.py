"""Post a request body to nearwise and print the predictions, or the error it explains.

    python samples/clients/python_client.py                          # the turbine spline sample
    python samples/clients/python_client.py samples/predict_warehouse.json
    python samples/clients/python_client.py samples/compare_warehouse.json compare
    NEARWISE_URL=http://host:9000 python samples/clients/python_client.py
    NEARWISE_API_KEY=your-key python samples/clients/python_client.py  # sent as a bearer token

Needs `requests`. Exits with 1 when the service answers with an error.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

import requests

BASE = os.environ.get("NEARWISE_URL", "http://127.0.0.1:8080").rstrip("/")
KEY = os.environ.get("NEARWISE_API_KEY", "")
DEFAULT_BODY = Path(__file__).resolve().parents[1] / "predict_spline.json"


def show_problem(problem: dict) -> None:
    """An RFC 9457 problem: its title and detail, then each place at fault."""
    print(f"error {problem.get('status')}: {problem.get('title')}")
    print(problem.get("detail"))
    for err in problem.get("errors", []):
        if "pointer" in err:
            where = err["pointer"]
        else:  # a CSV part: part, line and column
            where = f"{err.get('part')} line {err.get('line')}, column {err.get('column')}"
        print(f"  {where}: {err.get('message')}")


def fmt(x: float | None) -> str:
    return "-" if x is None else f"{x:.6g}"


def show_answer(answer: dict) -> None:
    doc = answer.get("prediction", answer)  # compare nests the recommended method's answer
    if "recommended" in answer:
        print(f"recommended: {answer['recommended']} ({answer['reason']})")
    print(f"method {doc['method']}, cross-validated error {fmt(doc['fit']['cv_error'])}")
    print("row\tvalue\tlower\tupper\tflags")
    for i, p in enumerate(doc["predictions"]):
        flags = " ".join(p["flags"])
        print(f"{i}\t{fmt(p['value'])}\t{fmt(p['lower'])}\t{fmt(p['upper'])}\t{flags}")
    for w in doc["warnings"]:
        print(f"warning {w['code']}: {w['message']}")


def main() -> int:
    body = Path(sys.argv[1]) if len(sys.argv) > 1 else DEFAULT_BODY
    endpoint = sys.argv[2] if len(sys.argv) > 2 else "predict"
    headers = {"Content-Type": "application/json"}
    if KEY:
        headers["Authorization"] = f"Bearer {KEY}"
    resp = requests.post(
        f"{BASE}/v1/{endpoint}", data=body.read_bytes(), headers=headers, timeout=120
    )
    if resp.headers.get("Content-Type", "").startswith("application/problem+json"):
        show_problem(resp.json())
        return 1
    resp.raise_for_status()  # any other failure, e.g. from a proxy in front of the service
    show_answer(resp.json())
    return 0


if __name__ == "__main__":
    try:
        sys.exit(main())
    except (requests.RequestException, OSError, json.JSONDecodeError) as exc:
        print(f"request failed: {exc}", file=sys.stderr)
        sys.exit(2)
