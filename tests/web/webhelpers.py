"""Small builders shared by the web tests."""

from __future__ import annotations

from typing import Any

import numpy as np


def curve(n: int = 40, seed: int = 0) -> list[list[float]]:
    """Rows ``[x, y]`` of a noisy sine: invented test data."""
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0.0, 10.0, n))
    y = np.sin(x) + rng.normal(0.0, 0.1, n)
    return [[float(a), float(b)] for a, b in zip(x, y, strict=True)]


def body(method: str = "knn", **more: Any) -> dict[str, Any]:
    """A valid predict request on :func:`curve`, with fields replaced or added."""
    doc: dict[str, Any] = {
        "method": method,
        "target": "y",
        "train": {"columns": ["x", "y"], "rows": curve()},
    }
    doc.update(more)
    return doc


def problem(resp: Any, status: int) -> dict[str, Any]:
    """Check ``resp`` is a problem+json answer with ``status``; return its body."""
    assert resp.status_code == status, resp.get_data(as_text=True)
    assert resp.mimetype == "application/problem+json"
    doc = resp.get_json(force=True)
    assert set(doc) == {"type", "title", "status", "detail", "code", "errors"}
    assert doc["status"] == status
    assert "Traceback" not in resp.get_data(as_text=True)
    return doc


def pointers(doc: dict[str, Any]) -> list[str]:
    return [e.get("pointer") for e in doc["errors"]]
