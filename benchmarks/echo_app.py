"""The baselines for benchmarks/load.py: bare FastAPI endpoints that parse a JSON body and echo
it back, nothing else. ``/echo`` parses and writes with the standard library's json (Starlette's
``request.json()`` and ``JSONResponse``); ``/echo-orjson`` parses and writes with orjson, the
fastest parse-and-write an endpoint can do, the honest floor."""

from __future__ import annotations

import orjson
from fastapi import FastAPI, Request
from fastapi.responses import JSONResponse, Response

app = FastAPI()


@app.post("/echo")
async def echo(request: Request) -> JSONResponse:
    return JSONResponse(await request.json())


@app.post("/echo-orjson")
async def echo_orjson(request: Request) -> Response:
    return Response(orjson.dumps(orjson.loads(await request.body())),
                    media_type="application/json")
