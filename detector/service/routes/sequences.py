"""Test sequences of one terminal: create, post shots one by one, read the sequence verdict."""

from __future__ import annotations

import re
from typing import Annotated, Any

from fastapi import APIRouter, Header, Request
from fastapi.encoders import jsonable_encoder
from fastapi.responses import JSONResponse

from ..deps import EngineDep, Writer, form_text, read_multipart, run_in_worker
from ..engine import InputError
from ..schemas import MULTIPART_RECORD_SCHEMA, ErrorOut, SequenceIn, SequenceOut, ShotOut

router = APIRouter(prefix="/v1/sequences", tags=["sequences"])

_ERRORS: dict[int | str, dict[str, Any]] = {
    s: {"model": ErrorOut} for s in (400, 401, 403, 404, 409, 413, 415, 422, 503)}
_ID = re.compile(r"^s[0-9a-f]{24}$")


def _check_id(sid: str) -> str:
    if not _ID.match(sid):
        raise InputError(f"no sequence {sid!r}", field="id", code="not_found", status=404)
    return sid


@router.post("", status_code=201, response_model=SequenceOut,
             responses={200: {"model": SequenceOut, "description": "created before with the same Idempotency-Key"},
                        **_ERRORS})
async def create_sequence(
    body: SequenceIn, request: Request, engine: EngineDep, actor: Writer,
    idempotency_key: Annotated[str | None, Header(
        max_length=200, pattern=r"^[\x21-\x7e]+$",
        description="Optional client key: a retried request with the same key returns the sequence the first "
                    "one created (200) instead of a second one")] = None,
) -> Any:
    """Create a sequence for one terminal of one unit, with a named shot order or a list of steps."""
    plan: Any = body.plan if isinstance(body.plan, str) else [s.model_dump() for s in body.plan]
    view = await run_in_worker(request, lambda: engine.create_sequence(
        body.unit_id, body.terminal, plan, body.meta, actor=actor, idempotency_key=idempotency_key))
    created = view.pop("created", True)
    return JSONResponse(jsonable_encoder(SequenceOut.model_validate(view)), status_code=201 if created else 200)


@router.get("/{sequence_id}", response_model=SequenceOut, responses=_ERRORS)
async def get_sequence(sequence_id: str, request: Request, engine: EngineDep) -> Any:
    """The sequence, its shots with their verdicts, and the summary verdict."""
    return await run_in_worker(request, engine.sequence_view, _check_id(sequence_id))


@router.post(
    "/{sequence_id}/shots",
    status_code=201,
    response_model=ShotOut,
    responses={200: {"model": ShotOut, "description": "the same record was posted before"}, **_ERRORS},
    openapi_extra={"requestBody": {"required": True, "content": {"multipart/form-data": {"schema": MULTIPART_RECORD_SCHEMA(
        {"record": "the shot: a CSV, a .cff, or a .cfg and its .dat"},
        {"kind": {"type": "string", "enum": ["reduced", "full", "chopped", "reduced_chopped"]},
         "level_percent": {"type": "number", "exclusiveMinimum": 0, "maximum": 200},
         "voltage_channel": {"type": "string"}, "current_channel": {"type": "string"}})}}}},
)
async def add_shot(sequence_id: str, request: Request, engine: EngineDep, actor: Writer) -> Any:
    """Post the next shot with its kind and level; it is compared with its reference in the sequence.

    The opening reduced-level full wave becomes the reference; full-level full shots are compared with
    it, and a closing reduced-level shot is compared with the opening one. The first reduced-level
    chopped wave is compared with the opening one and becomes the reference of the chopped shots after
    it; without one, chopped shots are compared with the opening full wave.
    """
    sid = _check_id(sequence_id)
    files, form = await read_multipart(request, ("record",))
    kind = form_text(form, "kind", required=True)
    level_text = form_text(form, "level_percent", required=True)
    try:
        level = float(level_text or "")
    except ValueError:
        raise InputError(f"must be a number of percent, got {level_text!r}", field="level_percent") from None
    vch, cch = form_text(form, "voltage_channel"), form_text(form, "current_channel")

    def work() -> tuple[dict[str, Any], bool]:
        rec = engine.store.put_record(files["record"])
        return engine.add_shot(sid, rec, kind=str(kind), level_percent=level, voltage_channel=vch,
                               current_channel=cch, actor=actor)

    shot, created = await run_in_worker(request, work)
    return JSONResponse(shot, status_code=201 if created else 200)
