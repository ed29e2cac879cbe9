"""The landing page at ``/`` and the interactive API docs at ``/docs``.

Both pages are served entirely by this process: the viewer (Swagger UI, vendored unchanged in
``web/static/swagger-ui``) and its start-up script come from ``/docs/assets/``, and a
Content-Security-Policy header tells the browser to load nothing from any other origin. The
API key guard covers ``/v1/`` only, so both pages stay open.
"""

from __future__ import annotations

import json
from functools import cache
from html import escape
from pathlib import Path

from flask import Blueprint, Response, request, url_for

from nearwise import __version__
from nearwise.web.routes import operation

STATIC = Path(__file__).resolve().parents[1] / "static"
VIEWER = STATIC / "swagger-ui"

bp = Blueprint("docs", __name__, static_folder=str(STATIC), static_url_path="/docs/assets")

#: Only this origin: scripts, styles, images, fonts and "Try it out" requests.
DOCS_POLICY = (
    "default-src 'none'; script-src 'self'; style-src 'self' 'unsafe-inline'; "
    "img-src 'self' data:; font-src 'self' data:; connect-src 'self'; "
    "base-uri 'none'; form-action 'self'; frame-ancestors 'self'"
)
#: The landing page has no script and no file of its own: one inline style sheet.
HOME_POLICY = (
    "default-src 'none'; style-src 'unsafe-inline'; img-src 'self' data:; "
    "base-uri 'none'; form-action 'none'; frame-ancestors 'self'"
)
_HTML = {
    "200": {
        "description": "An HTML page.",
        "content": {"text/html": {"schema": {"type": "string"}}},
    }
}


@cache
def viewer_version() -> str:
    """The version of the vendored Swagger UI, from its package.json."""
    return str(json.loads((VIEWER / "package.json").read_text(encoding="utf-8"))["version"])


def _page(html: str, policy: str) -> Response:
    resp = Response(html, mimetype="text/html")
    resp.headers["Content-Security-Policy"] = policy
    resp.headers["X-Content-Type-Options"] = "nosniff"
    resp.headers["Referrer-Policy"] = "no-referrer"
    return resp


@bp.get("/docs")
@operation(tags=["docs"], responses=_HTML)
def docs() -> Response:
    """Interactive API docs: browse every endpoint and try requests from the browser."""
    asset = lambda name: escape(url_for("docs.static", filename=name))  # noqa: E731
    html = f"""<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>nearwise {escape(__version__)}: API docs</title>
<link rel="icon" href="data:,">
<link rel="stylesheet" href="{asset("swagger-ui/swagger-ui.css")}">
</head>
<body>
<noscript>This page needs JavaScript. The OpenAPI document itself is at
<a href="{escape(url_for("openapi"))}">{escape(url_for("openapi"))}</a>.</noscript>
<div id="api-docs" data-spec-url="{escape(url_for("openapi"))}"
     data-viewer-version="{escape(viewer_version())}"></div>
<script src="{asset("swagger-ui/swagger-ui-bundle.js")}"></script>
<script src="{asset("docs-init.js")}"></script>
</body>
</html>
"""
    return _page(html, DOCS_POLICY)


@bp.get("/")
@operation(tags=["docs"], responses=_HTML)
def home() -> Response:
    """A short introduction: what the service does, where the docs are, a first request."""
    base = request.url_root.rstrip("/")
    link = lambda endpoint: escape(url_for(endpoint))  # noqa: E731
    html = f"""<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>nearwise {escape(__version__)}</title>
<link rel="icon" href="data:,">
<style>
body {{ font: 16px/1.5 system-ui, sans-serif; max-width: 46rem; margin: 2rem auto;
       padding: 0 1rem; color: #1b1f24; }}
pre {{ background: #f3f4f6; padding: .75rem 1rem; overflow-x: auto; font-size: 14px; }}
code {{ font-size: 14px; }}
.caution {{ border-left: 4px solid #b45309; background: #fffbeb; padding: .5rem 1rem; }}
</style>
</head>
<body>
<h1>nearwise</h1>
<p>Smoothing and prediction over HTTP for tables of measurements. Send a table and a method
(k-nearest neighbors, polynomial least squares, a smoothing spline or an additive model, or
<code>auto</code> to compare them). The service tunes how flexible the model is by
cross-validation, fits it, and returns every prediction with a standard error, a prediction
interval and plain warnings where a question lies beyond what the data can answer, together
with the whole tuning path. It is stateless: each request carries its data and nothing is
stored.</p>

<h2>Where to go</h2>
<ul>
<li><a href="{link("docs.docs")}">API docs</a>: every endpoint, with "Try it out"</li>
<li><a href="{link("openapi")}">OpenAPI 3.1 document</a> (JSON)</li>
<li><a href="{link("catalogue.methods")}">The methods catalogue</a>: parameters, ranges,
interval kinds and every warning code with its rule</li>
</ul>

<h2>A first prediction</h2>
<p>From the repository root, post the sample body (400 readings from one wind turbine, a
spline of power against wind speed, and eight query rows):</p>
<pre>curl -H 'Content-Type: application/json' \\
  --data-binary @samples/predict_spline.json \\
  {escape(base)}/v1/predict</pre>
<p>Each entry of <code>predictions</code> has a <code>value</code>, a <code>std_error</code>,
<code>lower</code> and <code>upper</code> bounds of the prediction interval, and
<code>flags</code>. The last query row, at 27 m/s, lies far beyond the strongest wind in the
data: it comes back flagged <code>outside_range</code> and <code>far_from_data</code>, with a
warning that names the row. Add <code>-H 'Accept: text/csv'</code> to get the answer as CSV.
When the service runs with <code>NEARWISE_API_KEYS</code> set, add
<code>-H 'Authorization: Bearer your-key'</code>.</p>

<h2>Cautions</h2>
<div class="caution">
<p>Predictions are statistical estimates learned from the rows you send, not measurements or
guarantees. Intervals describe the errors on rows like the training rows; they cannot make an
extrapolation safe. Read the warnings and flags, and validate the predictions against data
you trust before relying on them where safety or money is at stake. Where local codes,
standards or licensed professional practice apply, follow them: this service does not replace
them.</p>
</div>
<p><small>nearwise {escape(__version__)}</small></p>
</body>
</html>
"""
    return _page(html, HOME_POLICY)
