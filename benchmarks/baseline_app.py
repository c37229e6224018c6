"""The baseline for the load benchmark: a bare FastAPI app that parses the same JSON body and
answers ``{"cards": []}``.

It runs under the same uvicorn settings as the service, so the ratio service/baseline isolates
what Tonicity adds (validation, ingestion, clinical rules, card rendering, card log) from what
any FastAPI JSON endpoint costs on this machine.

    uvicorn benchmarks.baseline_app:app --port 8099
"""

from __future__ import annotations

import json

from fastapi import FastAPI, Request
from fastapi.responses import JSONResponse

app = FastAPI(title="baseline", openapi_url=None, docs_url=None, redoc_url=None)


@app.post("/cds-services/{service_id}")
async def hook(service_id: str, request: Request) -> JSONResponse:
    body = json.loads(await request.body())
    if not isinstance(body, dict):
        return JSONResponse({"resourceType": "OperationOutcome"}, status_code=400)
    return JSONResponse({"cards": []})


@app.get("/healthz")
async def healthz() -> dict[str, str]:
    return {"status": "ok"}
