"""The ``dualcost`` command: ``dualcost serve`` starts the service, ``dualcost check`` audits
published index numbers (see :mod:`dualcost.pipeline_check`)."""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence

from . import __version__
from .config import Settings


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="dualcost", description="True cost-of-living indices "
                                     "beside the formula price indices.")
    parser.add_argument("--version", action="version", version=f"dualcost {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    serve = sub.add_parser("serve", help="start the HTTP service (demo scenario at /v1/demo)")
    defaults = Settings()
    serve.add_argument("--host", default=defaults.host, help="address (default %(default)s)")
    serve.add_argument("--port", type=int, default=defaults.port, help="port (default %(default)s)")
    serve.add_argument("--workers", type=int, default=defaults.workers,
                       help="worker processes (default %(default)s)")
    serve.add_argument("--log-level", default="info",
                       choices=["critical", "error", "warning", "info", "debug"])
    check = sub.add_parser(
        "check", help="recompute published index numbers from their panel; exit 1 if one differs",
        description="Recompute a pipeline's published index numbers from the prices and "
                    "quantities they were computed from, print a table (with a hint when the "
                    "options seem not to match the published values', such as a base period "
                    "later than the panel's first), optionally write JUnit XML, and exit 0 (all "
                    "agree), 1 (a value differs) or 2 (the check cannot run: an input cannot be "
                    "read, or the service named by --url cannot be reached or refuses the "
                    "request).")
    check.add_argument("published", help="published values: CSV (formula,period,value[,series]) "
                       "or JSON")
    check.add_argument("panel", help="the panel: long-form CSV (period,item,price[,quantity]"
                       "[,expenditure]) or the JSON body of POST /v1/index-series")
    check.add_argument("--base-period", help="base (price-reference) period (default: the first)")
    check.add_argument("--reference-period", help="index reference period (default: the base)")
    check.add_argument("--reference-value", type=int, choices=[1, 100],
                       help="value of the series in the reference period (default 100)")
    check.add_argument("--model", help="a preference model as JSON, if the published figures "
                       "include model-based ones")
    check.add_argument("--tolerance", type=float, help="absolute tolerance (default: half a unit "
                       "in the last published decimal place)")
    check.add_argument("--url", help="check against a running service instead of in process")
    check.add_argument("--api-key", help="API key for --url (or set DUALCOST_API_KEY)")
    check.add_argument("--separator", choices=["comma", "semicolon", "tab"],
                       help="how the CSV files separate fields (default: detected)")
    check.add_argument("--decimal", choices=["point", "comma"],
                       help="the CSV files' decimal mark (default: detected; a decimal comma "
                            "needs fields separated by semicolons or tabs)")
    check.add_argument("--junit", help="write a JUnit XML report to this file")
    return parser


def serve(host: str, port: int, workers: int, log_level: str) -> int:
    import uvicorn

    # Workers are separate processes: they read their settings from the environment.
    os.environ["DUALCOST_HOST"] = host
    os.environ["DUALCOST_PORT"] = str(port)
    os.environ["DUALCOST_WORKERS"] = str(workers)
    settings = Settings()  # fail here, with pydantic's message, if the environment is invalid
    from .api.access import load_keys
    from .api.observability import logging_config
    from .api.transport import BoundedHttpToolsProtocol

    keys = load_keys(settings.api_keys, str(settings.api_keys_file) if settings.api_keys_file else None)
    stored = _open_database(settings)
    if stored is None:
        return 2
    print(f"dualcost {__version__}: http://{host}:{port}/ (API docs /docs, demo /v1/demo), "
          f"{workers} worker(s)", flush=True)
    if keys:
        print(f"access control: on, {len(keys)} API key(s); send one in the X-API-Key header",
              flush=True)
    else:
        print("access control: OFF (no API keys configured): anyone who can reach this address "
              "can use the service; set DUALCOST_API_KEYS or DUALCOST_API_KEYS_FILE to require keys",
              flush=True)
    print(f"database: {stored} (household jobs and saved runs)", flush=True)
    # The request head is bounded as it arrives (dualcost.api.transport), before uvicorn keeps it.
    uvicorn.run("dualcost.api.app:create_app", factory=True, host=host, port=port,
                workers=workers, log_level=log_level, access_log=False,
                http=BoundedHttpToolsProtocol,
                log_config=logging_config(log_level, json_lines=settings.log_json))
    return 0


def _open_database(settings: Settings) -> str | None:
    """Open and migrate the database once, before any worker starts; its printable URL, or
    None after saying on standard error why it cannot be used (the service does not start)."""
    from .core.errors import StorageUnavailable
    from .storage import database_of, describe_url

    try:
        database_of(settings)
    except StorageUnavailable as exc:
        print(f"dualcost: not starting: {exc}. Check DUALCOST_DATABASE_URL (or "
              "DUALCOST_DATA_DIR) and that the database server is reachable.", file=sys.stderr,
              flush=True)
        return None
    return describe_url(settings.database())


def main(argv: Sequence[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    if args.command == "serve":
        return serve(args.host, args.port, args.workers, args.log_level)
    if args.command == "check":
        from .pipeline_check import check

        if args.api_key is None:
            args.api_key = os.environ.get("DUALCOST_API_KEY")
        return check(args)
    return 2  # pragma: no cover - argparse has already refused unknown commands


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
