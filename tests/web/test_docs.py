"""The landing page at / and the API docs at /docs: open, offline, and the viewer we ship."""

from __future__ import annotations

import hashlib
import json
import re
import tomllib
from fnmatch import fnmatch
from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import urlsplit

import pytest

from nearwise.web.app import create_app
from nearwise.web.routes.docs import STATIC, VIEWER, viewer_version
from nearwise.web.settings import Settings

ROOT = Path(__file__).resolve().parents[2]


class Refs(HTMLParser):
    """Every URL a page makes the browser load (src, stylesheet and icon hrefs) or link to."""

    def __init__(self) -> None:
        super().__init__()
        self.loads: list[str] = []
        self.links: list[str] = []
        self.text: list[str] = []
        self.data_attrs: dict[str, str] = {}

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        for key in ("src", "srcset", "poster", "data", "action", "formaction"):
            if key in a:
                self.loads.append(a[key])
        if tag == "link" and "href" in a:
            self.loads.append(a["href"])
        if tag == "a" and "href" in a:
            self.links.append(a["href"])
        self.data_attrs.update({k: v for k, v in a.items() if k.startswith("data-")})

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def parse(html: str) -> Refs:
    refs = Refs()
    refs.feed(html)
    return refs


def same_origin(url: str) -> bool:
    """A relative or same-origin path: no scheme, no host (a data: URL loads nothing)."""
    parts = urlsplit(url)
    if parts.scheme == "data":
        return True
    return not parts.scheme and not parts.netloc and not url.startswith("//")


def keyed_client():
    app = create_app(Settings(api_keys=("secret",)))
    app.config["TESTING"] = True
    return app.test_client()


@pytest.mark.parametrize("path", ["/", "/docs"])
def test_pages_are_html_and_open_without_a_key(path: str) -> None:
    client = keyed_client()
    assert client.get("/v1/methods").status_code == 401
    resp = client.get(path)
    assert resp.status_code == 200 and resp.mimetype == "text/html"
    assert resp.headers["X-Content-Type-Options"] == "nosniff"


@pytest.mark.parametrize("path", ["/", "/docs"])
def test_pages_load_nothing_from_another_host(client, path: str) -> None:
    resp = client.get(path)
    refs = parse(resp.get_data(as_text=True))
    assert refs.loads, "the page should reference its assets"
    for url in refs.loads + refs.links:
        assert same_origin(url), url
    policy = resp.headers["Content-Security-Policy"]
    directives = dict(d.strip().split(" ", 1) for d in policy.split(";"))
    assert directives["default-src"] == "'none'"
    for sources in directives.values():
        for source in sources.split():
            assert source in {"'self'", "'none'", "'unsafe-inline'", "data:"}, source


def test_every_asset_of_the_docs_page_is_served(client) -> None:
    refs = parse(client.get("/docs").get_data(as_text=True))
    kinds = {".js": "text/javascript", ".css": "text/css"}
    served = []
    for url in refs.loads:
        if url.startswith("data:"):
            continue
        with client.get(url) as resp:  # a file response: close it
            assert resp.status_code == 200, url
            assert resp.mimetype == kinds[Path(url).suffix], url
            assert resp.headers["Content-Length"] != "0", url
        served.append(url)
    assert {Path(u).name for u in served} == {
        "swagger-ui.css",
        "swagger-ui-bundle.js",
        "docs-init.js",
    }
    assert refs.data_attrs["data-spec-url"] == "/openapi.json"


def test_assets_stay_inside_the_static_folder(client) -> None:
    for path in ("/docs/assets/../routes/docs.py", "/docs/assets/%2e%2e/app.py", "/docs/assets/x"):
        resp = client.get(path)
        assert resp.status_code == 404 and resp.mimetype == "application/problem+json"


def test_shipped_viewer_is_swagger_ui_5_or_newer_and_unchanged() -> None:
    version = viewer_version()
    major = int(version.split(".")[0])
    assert major >= 5, f"Swagger UI {version} does not render OpenAPI 3.1; ship 5.x or newer"
    bundle = (VIEWER / "swagger-ui-bundle.js").read_text(encoding="utf-8")
    assert f'PACKAGE_VERSION:"{version}"' in bundle
    source = (VIEWER / "SOURCE.txt").read_text(encoding="utf-8")
    assert f"swagger-ui-dist {version}" in source
    sums = dict(
        (name, digest) for digest, name in re.findall(r"^([0-9a-f]{64})  (\S+)$", source, re.M)
    )
    assert set(sums) >= {"swagger-ui-bundle.js", "swagger-ui.css", "LICENSE"}
    for name, digest in sums.items():
        assert hashlib.sha256((VIEWER / name).read_bytes()).hexdigest() == digest, name
    assert "Apache License" in (VIEWER / "LICENSE").read_text(encoding="utf-8")
    assert json.loads((VIEWER / "package.json").read_text(encoding="utf-8"))["license"] == (
        "Apache-2.0"
    )


def test_viewer_start_up_turns_the_remote_validator_off() -> None:
    script = (STATIC / "docs-init.js").read_text(encoding="utf-8")
    assert "validatorUrl: null" in script
    assert "http" not in script


def test_static_files_are_package_data() -> None:
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    globs = config["tool"]["setuptools"]["package-data"]["nearwise"]
    package = ROOT / "service" / "nearwise"
    for path in STATIC.rglob("*"):
        if path.is_file():
            rel = path.relative_to(package).as_posix()
            assert any(fnmatch(rel, g) for g in globs), f"{rel} is not package data"


def test_landing_page_says_what_where_how_and_the_cautions(client) -> None:
    resp = client.get("/", base_url="http://nearwise.example:9000")
    refs = parse(resp.get_data(as_text=True))
    text = " ".join(" ".join(refs.text).split())
    assert {"/docs", "/openapi.json", "/v1/methods"} <= set(refs.links)
    assert "cross-validation" in text and "stateless" in text
    # the worked example posts a sample that exists, to the origin the page was asked on
    assert "--data-binary @samples/predict_spline.json" in text
    assert "http://nearwise.example:9000/v1/predict" in text
    assert (ROOT / "samples" / "predict_spline.json").is_file()
    for caution in ("statistical estimates", "validate", "safety or money", "local codes"):
        assert caution in text, caution
    assert "licensed professional practice" in text


def test_landing_page_escapes_the_host(client) -> None:
    html = client.get("/", base_url="http://a<b>:9000").get_data(as_text=True)
    assert "a<b>" not in html


def test_unknown_pages_are_still_problems(client) -> None:
    resp = client.get("/docs/")
    assert resp.status_code == 404 and resp.mimetype == "application/problem+json"
