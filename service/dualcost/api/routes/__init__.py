"""The HTTP handlers, one module per resource; ``ROUTERS`` lists every router the app mounts."""

from __future__ import annotations

from . import audit, comparisons, series, sheets

ROUTERS = [comparisons.router, series.router, audit.router, sheets.router]
