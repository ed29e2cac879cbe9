"""The page of each problem type at its ``type`` URI, ``/problems/{code}``: what the problem
means and how to fix the request, as HTML or plain text. Open without an API key."""

from __future__ import annotations

from html import escape

from flask import Blueprint, Response

from nearwise.web.body import negotiate
from nearwise.web.openapi_parts import problems
from nearwise.web.problem_types import TYPES, ProblemType
from nearwise.web.problems import Problem
from nearwise.web.routes import operation

bp = Blueprint("problem_pages", __name__)

#: A page with one inline style sheet, nothing else loaded.
POLICY = "default-src 'none'; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'"
OFFERED = ["text/html", "text/plain"]


@bp.get("/problems/<code>")
@operation(
    tags=["docs"],
    parameters=[
        {
            "in": "path",
            "name": "code",
            "required": True,
            "description": "A problem's `code`, as in its `type` URI.",
            "schema": {"type": "string", "enum": sorted(TYPES)},
        }
    ],
    responses={
        "200": {
            "description": "What the problem means, and an example of the fix.",
            "content": {m: {"schema": {"type": "string"}} for m in OFFERED},
        },
        **problems(404, 406),
    },
)
def problem_page(code: str) -> Response:
    """The page of one problem type: what it means and how to fix the request."""
    kind = TYPES.get(code)
    if kind is None:
        raise Problem(
            404,
            "No problem type has this code; every problem's `type` names one that has a page.",
            code="not_found",
        )
    if negotiate(OFFERED) == "text/plain":
        return Response(text(code, kind), mimetype="text/plain")
    resp = Response(html(code, kind), mimetype="text/html")
    resp.headers["Content-Security-Policy"] = POLICY
    resp.headers["X-Content-Type-Options"] = "nosniff"
    return resp


def text(code: str, kind: ProblemType) -> str:
    return (
        f"{kind.title} ({kind.status}, code {code})\n\n"
        f"What it means: {kind.meaning}\n\nHow to fix it: {kind.fix}\n"
    )


def html(code: str, kind: ProblemType) -> str:
    return f"""<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>{escape(kind.title)} - nearwise</title>
<style>body {{ font: 16px/1.5 system-ui, sans-serif; max-width: 40rem; margin: 2rem auto;
padding: 0 1rem; }} code {{ font-size: 14px; }}</style>
</head>
<body>
<h1>{escape(kind.title)}</h1>
<p>Status {kind.status}, code <code>{escape(code)}</code>.</p>
<h2>What it means</h2>
<p>{escape(kind.meaning)}</p>
<h2>How to fix it</h2>
<p>{escape(kind.fix)}</p>
<p>The answer's <code>detail</code> and <code>errors</code> name the place at fault.
See <a href="/docs">the API docs</a>.</p>
</body>
</html>
"""
