"""The FastAPI application: ``create_app(settings)`` mounts the routers and problem handlers."""

from __future__ import annotations

import sys
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from pathlib import Path

import anyio.to_thread
from fastapi import FastAPI
from fastapi.middleware.cors import CORSMiddleware
from fastapi.responses import FileResponse
from fastapi.staticfiles import StaticFiles

from .. import __version__
from ..config import Settings
from ..storage import database_of
from . import docs, problems
from .access import AccessControlMiddleware, RateLimiter, load_keys
from .keeper import Keeper
from .limits import BodyLimitMiddleware, HeaderLimitMiddleware
from .observability import RequestContextMiddleware
from .openapi import problem_openapi
from .operations import jobs
from .routes import ROUTERS
from .runs import RunStore

WEB_DIR = Path(__file__).resolve().parents[1] / "web"
#: The page's scripts and styles come from the service (inline style attributes: chart sizes),
#: its requests go to the service, downloads are blob: URLs it makes itself.
PAGE_POLICY = ("default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; "
               "img-src 'self' data: blob:; connect-src 'self'; object-src 'none'; "
               "frame-ancestors 'self'; base-uri 'self'; form-action 'none'")
#: The interpreter's thread switch interval in a service process (see ``_lifespan``).
GIL_SWITCH_SECONDS = 0.001

DESCRIPTION = """\
dualcost computes the true (Konüs) cost-of-living index of a preference model calibrated to a
base-period budget, and sets it beside the Laspeyres, Paasche, Fisher, Törnqvist and other formula
indices, to measure the substitution bias of a fixed-basket index, the compensation that keeps a
living standard, and which items drive the gap.

**Caution.** Model-based cost-of-living figures are estimates that depend on the preference model
and parameters chosen. Where results feed wage, pension or benefit indexation, defer to official
statistics and to the applicable law or agreement.

Errors are RFC 9457 problem details (`application/problem+json`) whose `errors` list points at
each offending field with a JSON Pointer. Indices are ratios (1 = no change); biases are given in
index points (base 100) and in percent.

Every answer states its provenance: the service version and `sha256:` digest of the canonical
input (the request body in the JSON Canonicalization Scheme, RFC 8785), in a JSON answer's
`provenance` member and in the `Dualcost-Version` and `Dualcost-Input-Digest` headers; CSV and
text answers carry the caution in `Dualcost-Caution`. Every operation under /v1 honours the
`Accept` header (a `format` query parameter, where there is one, decides over it) and answers
406 when the header admits none of its media types.
"""


#: The headers of an answer that a page from another origin may read (CORS): where the answer
#: came from, how its numbers are written, and the rows a household batch left out.
EXPOSED_HEADERS = ["Dualcost-Version", "Dualcost-Input-Digest", "Dualcost-Caution",
                   "Dualcost-Decimal", "Dualcost-Separator", "Dualcost-Skipped-Rows", "Location",
                   "Content-Location", "Link", "Dualcost-Run"]


@asynccontextmanager
async def _lifespan(app: FastAPI) -> AsyncIterator[None]:
    """Warm up the numerical core once, then declare the process ready."""
    from ..core.comparison import compare
    from ..core.preferences import BaseBudget, calibrate

    base = BaseBudget.from_quantities([1.0, 2.0], [1.0, 1.0])
    compare(calibrate("ces", base, {"sigma": 0.5}), base, [1.1, 2.0])
    # The computations hold the interpreter lock: more threads than this per process only
    # switch between each other (the framework's default is 40).
    anyio.to_thread.current_default_thread_limiter().total_tokens = (
        app.state.settings.compute_threads)
    # While a compute thread holds the interpreter lock, the event loop (the probes, every
    # request's reading) waits for it once per handoff: at most 1 ms instead of Python's 5 ms.
    switch = sys.getswitchinterval()
    sys.setswitchinterval(min(switch, GIL_SWITCH_SECONDS))
    keeper = Keeper(app.state.jobs, app.state.runs, app.state.settings)
    keeper.start()
    app.state.ready = True
    try:
        yield
    finally:
        app.state.ready = False
        await anyio.to_thread.run_sync(keeper.stop)
        sys.setswitchinterval(switch)


def create_app(settings: Settings | None = None) -> FastAPI:
    settings = settings or Settings()
    app = FastAPI(
        lifespan=_lifespan,
        # The documentation pages are served with their assets from this process (docs.py).
        docs_url=None,
        redoc_url=None,
        title="dualcost",
        version=__version__,
        description=DESCRIPTION,
        openapi_tags=[
            {"name": "comparisons", "description": "The Konüs index beside the formula indices."},
            {"name": "catalogue", "description": "Preference families and index formulas."},
            {"name": "demo", "description": "The invented demo scenario."},
            {"name": "service", "description": "Health and problem types."},
            {"name": "runs", "description": "Saved runs (save=true): read them, list them, "
                                            "run them again on this version."},
        ],
    )
    app.state.settings = settings
    keys = load_keys(settings.api_keys, str(settings.api_keys_file) if settings.api_keys_file else None)
    app.state.access_control = bool(keys)
    # With keys, each key's share of the job table; without, every job is everyone's.
    per_key = (settings.max_household_jobs_per_key or max(1, settings.max_household_jobs // len(keys))
               if keys else None)
    # The database of jobs and runs, opened and migrated now: a service that cannot keep them
    # does not start (StorageUnavailable says why).
    app.state.db = database_of(settings)
    app.state.jobs = jobs.JobStore(app.state.db, settings.max_household_jobs, per_key,
                                   settings.job_lease_seconds)
    app.state.runs = RunStore(app.state.db)
    app.state.rate_limiter = (RateLimiter(settings.rate_limit_per_minute,
                                          settings.rate_limit_max_clients)
                              if settings.rate_limit_per_minute else None)
    if keys or app.state.rate_limiter is not None:
        app.add_middleware(AccessControlMiddleware, keys=keys, limiter=app.state.rate_limiter)
    app.add_middleware(BodyLimitMiddleware, max_body_bytes=settings.max_body_bytes,
                       read_timeout_seconds=settings.read_timeout_seconds,
                       read_min_bytes_per_second=settings.read_min_bytes_per_second)
    if settings.cors_origins:
        app.add_middleware(CORSMiddleware, allow_origins=list(settings.cors_origins),
                           allow_methods=["GET", "HEAD", "POST", "OPTIONS"], allow_headers=["*"],
                           expose_headers=EXPOSED_HEADERS)
    app.add_middleware(HeaderLimitMiddleware, max_header_bytes=settings.max_header_bytes,
                       max_header_count=settings.max_header_count)
    problems.install(app)
    # Outermost: every request gets its id, log line and metrics, refusals included.
    app.add_middleware(RequestContextMiddleware)
    for router in ROUTERS:
        app.include_router(router)

    app.openapi = lambda: problem_openapi(app)  # type: ignore[method-assign]
    docs.install(app)
    app.mount("/static", StaticFiles(directory=WEB_DIR), name="static")

    @app.get("/", include_in_schema=False)
    def workspace() -> FileResponse:
        """The workspace page (web/): a view per operation, its charts and tables; the browser
        may load nothing but the service's own URLs (PAGE_POLICY)."""
        return FileResponse(WEB_DIR / "index.html", media_type="text/html",
                            headers={"Content-Security-Policy": PAGE_POLICY})

    return app
