"""The HTTP handlers, one module per resource; ``ROUTERS`` lists every router the app mounts."""

from __future__ import annotations

from . import (
    audit,
    catalogue,
    comparisons,
    fits,
    households,
    index_tree,
    revealed,
    runs,
    sensitivity,
    series,
    service,
    sheets,
    tables,
    uprating,
)

ROUTERS = [comparisons.router, series.router, audit.router, catalogue.router, service.router,
           sheets.router, households.router, fits.router, uprating.router, index_tree.router,
           index_tree.sheet_router, revealed.router, sensitivity.router, runs.router,
           tables.router]
