"""The HTTP handlers, one module per resource; ``ROUTERS`` lists every router the app mounts."""

from __future__ import annotations

from . import audit, catalogue, comparisons, fits, households, runs, series, service, sheets

ROUTERS = [comparisons.router, series.router, audit.router, catalogue.router, service.router,
           sheets.router, households.router, fits.router, runs.router]
