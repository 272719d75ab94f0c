"""The baseline for benchmarks/load.py: a bare FastAPI endpoint that parses a JSON body and
echoes it back, nothing else."""

from __future__ import annotations

from fastapi import FastAPI, Request
from fastapi.responses import JSONResponse

app = FastAPI()


@app.post("/echo")
async def echo(request: Request) -> JSONResponse:
    return JSONResponse(await request.json())
