"""The interactive API documentation, served whole by this process: nothing is fetched from elsewhere.

FastAPI's own ``/docs`` (Swagger UI) and ``/redoc`` (ReDoc) pages load their scripts, style sheet
and icon from public CDNs, so without internet access they are blank. Here the two pages are
written by FastAPI's ``get_swagger_ui_html`` and ``get_redoc_html`` with every asset pointing at
``/docs/assets/``, a static mount of the files the ``fastapi-offline`` package ships (Swagger UI's
``swagger-ui-bundle.js`` and ``swagger-ui.css``, ReDoc's ``redoc.standalone.js``, an icon; MIT,
the bundled Swagger UI under Apache 2.0). ReDoc's web fonts are left out and Swagger UI's online
validator badge is switched off (``validatorUrl: null``). ReDoc's bundle still draws its maker's
logo from their CDN in the side menu; a Content-Security-Policy on both pages (:data:`POLICY`)
lets the browser load nothing but the service's own URLs, so that image is not fetched (the
menu shows the link's text without it) and nothing else can be either.

The pages and their assets are open without an API key, like ``/openapi.json``: access control
covers ``/v1/`` only (:mod:`dualcost.api.access`).
"""

from __future__ import annotations

from pathlib import Path

import fastapi_offline
from fastapi import FastAPI, Request
from fastapi.openapi.docs import get_redoc_html, get_swagger_ui_html
from fastapi.responses import HTMLResponse
from fastapi.staticfiles import StaticFiles

#: The directory of bundled assets in the fastapi-offline package.
ASSETS_DIR = Path(fastapi_offline.__file__).resolve().parent / "static"
ASSETS_URL = "/docs/assets"
SWAGGER_JS, SWAGGER_CSS, REDOC_JS, FAVICON = (
    "swagger-ui-bundle.js", "swagger-ui.css", "redoc.standalone.js", "favicon.png")
#: Swagger UI's settings: FastAPI's defaults, without the badge that sends the document to an
#: online validator.
#: Everything from the service itself; inline scripts and styles (the pages' start-up script,
#: ReDoc's generated styles), images as data: URLs and ReDoc's search worker as a blob: URL.
POLICY = ("default-src 'self'; script-src 'self' 'unsafe-inline'; style-src 'self' 'unsafe-inline'; "
          "img-src 'self' data:; font-src 'self' data:; worker-src 'self' blob:; "
          "connect-src 'self'; frame-ancestors 'self'; base-uri 'self'; form-action 'self'")
SWAGGER_PARAMETERS = {"dom_id": "#swagger-ui", "layout": "BaseLayout", "deepLinking": True,
                      "showExtensions": True, "showCommonExtensions": True, "validatorUrl": None}


def confined(page: HTMLResponse) -> HTMLResponse:
    """A documentation page that the browser may complete from the service alone."""
    page.headers["Content-Security-Policy"] = POLICY
    return page


def install(app: FastAPI) -> None:
    """The ``/docs`` and ``/redoc`` pages and their assets (create the app with ``docs_url=None``
    and ``redoc_url=None``)."""
    missing = [name for name in (SWAGGER_JS, SWAGGER_CSS, REDOC_JS, FAVICON)
               if not (ASSETS_DIR / name).is_file()]
    if missing:  # a broken install: say so at start-up rather than serve a blank page
        raise RuntimeError(f"the API documentation's assets are missing from {ASSETS_DIR}: "
                           f"{', '.join(missing)} (reinstall fastapi-offline)")
    app.mount(ASSETS_URL, StaticFiles(directory=ASSETS_DIR), name="docs_assets")

    def asset(request: Request, name: str) -> str:
        return f"{request.scope.get('root_path', '')}{ASSETS_URL}/{name}"

    def openapi_url(request: Request) -> str:
        return f"{request.scope.get('root_path', '')}{app.openapi_url}"

    # Named as FastAPI names its own pages: the metrics count requests under these names.
    @app.get("/docs", include_in_schema=False)
    async def swagger_ui_html(request: Request) -> HTMLResponse:
        return confined(get_swagger_ui_html(
            openapi_url=openapi_url(request), title=f"{app.title} - Swagger UI",
            swagger_js_url=asset(request, SWAGGER_JS), swagger_css_url=asset(request, SWAGGER_CSS),
            swagger_favicon_url=asset(request, FAVICON), swagger_ui_parameters=SWAGGER_PARAMETERS))

    @app.get("/redoc", include_in_schema=False)
    async def redoc_html(request: Request) -> HTMLResponse:
        return confined(get_redoc_html(
            openapi_url=openapi_url(request), title=f"{app.title} - ReDoc",
            redoc_js_url=asset(request, REDOC_JS), redoc_favicon_url=asset(request, FAVICON),
            with_google_fonts=False))
