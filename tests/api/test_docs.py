"""The interactive API documentation: /docs (Swagger UI) and /redoc (ReDoc) are served with every
asset from the service itself, so that they work without internet access (tests/e2e/test_api_docs.py
renders them in a browser with the network closed)."""

from __future__ import annotations

import re
from urllib.parse import urljoin

import pytest
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.config import Settings
from tests.conftest import EXAMPLES

#: src and href attributes, and the spec URL each page hands its script.
_URLS = re.compile(r"""(?:src|href|spec-url)\s*=\s*["']([^"']+)["']|url:\s*'([^']+)'""")


def referenced(html: str) -> list[str]:
    return [a or b for a, b in _URLS.findall(html)]


@pytest.mark.parametrize("page", ["/docs", "/redoc"])
def test_every_asset_a_documentation_page_names_is_served_here(client, page) -> None:
    r = client.get(page)
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/html")
    urls = referenced(r.text)
    assert any(u.endswith(".js") for u in urls) and "/openapi.json" in urls
    for url in urls:
        # Relative to the service: no scheme, no host, nothing from a CDN or a font service.
        assert url.startswith("/") and not url.startswith("//"), url
        asset = client.get(urljoin("http://testserver" + page, url))
        assert asset.status_code == 200, url
        assert asset.content, url
    assert "http://" not in r.text and "https://" not in r.text


def test_the_assets_have_their_media_types(client) -> None:
    types = {"/docs/assets/swagger-ui-bundle.js": "javascript",
             "/docs/assets/swagger-ui.css": "text/css",
             "/docs/assets/redoc.standalone.js": "javascript",
             "/docs/assets/favicon.png": "image/png"}
    for url, media in types.items():
        r = client.get(url)
        assert r.status_code == 200 and media in r.headers["content-type"], url
    assert client.get("/docs/assets/no-such-file.js").status_code == 404


def test_swagger_ui_sends_the_document_to_no_online_validator(client) -> None:
    assert '"validatorUrl": null' in client.get("/docs").text


def test_documentation_stays_open_when_api_keys_are_required() -> None:
    """Like /openapi.json, the pages and their assets need no key; /v1/ does."""
    client = TestClient(create_app(Settings(examples_dir=EXAMPLES, api_keys=("k" * 24,))))
    assert client.get("/v1/demo").status_code == 401
    for url in ("/docs", "/redoc", "/openapi.json", "/docs/assets/swagger-ui-bundle.js",
                "/docs/assets/redoc.standalone.js"):
        assert client.get(url).status_code == 200, url


def test_the_root_path_of_a_proxy_prefixes_every_asset() -> None:
    """Behind a proxy that mounts the service under a prefix, the pages name their assets under
    it (ASGI root_path)."""
    client = TestClient(create_app(Settings(examples_dir=EXAMPLES)), root_path="/dualcost")
    urls = referenced(client.get("/docs").text) + referenced(client.get("/redoc").text)
    assert urls and all(u.startswith("/dualcost/") for u in urls), urls


@pytest.mark.parametrize("page", ["/docs", "/redoc"])
def test_the_pages_let_the_browser_load_only_from_the_service(client, page) -> None:
    """A Content-Security-Policy keeps the browser from fetching anything elsewhere (ReDoc's
    bundle would load its maker's logo from a CDN)."""
    policy = client.get(page).headers["content-security-policy"]
    directives = dict(d.strip().split(" ", 1) for d in policy.split(";"))
    assert directives["default-src"] == "'self'"
    for name in ("script-src", "style-src", "img-src", "connect-src", "font-src", "worker-src"):
        assert "http" not in directives[name] and "*" not in directives[name], name
