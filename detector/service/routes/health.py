"""Liveness, readiness and the model card."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse

from ... import __version__
from ..deps import EngineDep
from ..schemas import ErrorOut, HealthOut, ModelOut, ReadyOut

router = APIRouter(tags=["health"])


@router.get("/health", response_model=HealthOut)
async def health() -> dict[str, Any]:
    """Liveness: the process answers."""
    return {"status": "ok", "version": __version__}


@router.get("/ready", response_model=ReadyOut, responses={503: {"model": ErrorOut}})
async def ready(request: Request) -> Any:
    """Readiness: the model is loaded and the store answers."""
    engine = getattr(request.app.state, "engine", None)
    if engine is None:
        return JSONResponse({"error": "not_ready", "detail": "starting up", "field": None}, status_code=503,
                            headers={"Retry-After": "1"})
    try:
        counts = engine.store.count_comparisons()
        version = engine.store.schema_version
    except Exception as exc:  # the database is unusable: say so without a trace
        return JSONResponse({"error": "not_ready", "detail": f"store unavailable ({type(exc).__name__})",
                             "field": None}, status_code=503, headers={"Retry-After": "5"})
    return {"status": "ready", "model": engine.model_id, "store_schema_version": version, "comparisons": counts}


@router.get("/v1/model", response_model=ModelOut, tags=["model"])
async def model_card(engine: EngineDep) -> dict[str, Any]:
    """Card of the loaded model: training data, figures, versions, thresholds."""
    m = engine.model
    return {
        "id": engine.model_id,
        "schema_version": str(m.schema_version),
        "feature_names": [str(n) for n in m.feature_names],
        "thresholds": {str(k): float(v) for k, v in m.thresholds.items()},
        "card": dict(m.card),
    }
