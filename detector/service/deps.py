"""Dependencies of the routes: the engine, the settings, the write permission, and upload parsing."""

from __future__ import annotations

import hmac
from typing import Annotated, Any

import anyio.to_thread
from fastapi import Depends, Request
from starlette.datastructures import UploadFile

from .engine import Engine, InputError, files_of_field
from .settings import Settings

__all__ = ["BodyTooLarge", "EngineDep", "SettingsDep", "Writer", "run_in_worker", "read_multipart", "form_text"]


class BodyTooLarge(Exception):
    """Raised while reading a request body that passes the upload limit (answered 413)."""


def get_settings(request: Request) -> Settings:
    """The settings the app was created with."""
    return request.app.state.settings


def get_engine(request: Request) -> Engine:
    """The engine (store + model) loaded by the app's lifespan."""
    return request.app.state.engine


def require_writer(request: Request) -> str:
    """Check the bearer token of a write; returns the actor name for the audit log.

    Raises
    ------
    InputError
        401 without a token, 403 with a wrong one.
    """
    token = request.app.state.settings.token
    if token is None:
        return "anonymous@loopback"
    header = request.headers.get("authorization", "")
    scheme, _, given = header.partition(" ")
    if scheme.lower() != "bearer" or not given.strip():
        raise InputError("this request changes data: send 'Authorization: Bearer <token>'",
                         field="Authorization", code="unauthorized", status=401)
    if not hmac.compare_digest(given.strip().encode("utf-8", "replace"), token.encode("utf-8")):
        raise InputError("the bearer token is not valid", field="Authorization", code="forbidden", status=403)
    return "token"


SettingsDep = Annotated[Settings, Depends(get_settings)]
EngineDep = Annotated[Engine, Depends(get_engine)]
Writer = Annotated[str, Depends(require_writer)]


async def run_in_worker(request: Request, func: Any, *args: Any) -> Any:
    """Run blocking work (store writes, comparisons) in the app's bounded thread pool."""
    return await anyio.to_thread.run_sync(func, *args, limiter=request.app.state.limiter)


async def read_multipart(request: Request, fields: tuple[str, ...], *, json_too: bool = False
                         ) -> tuple[dict[str, list[tuple[str, bytes]]], Any]:
    """Parse a multipart upload into ``{field: [(client file name, bytes), ...]}`` and the form.

    ``json_too`` only changes the message for another content type: the route also takes JSON.

    Raises
    ------
    InputError
        Not multipart, a field missing, or a field that is not a file.
    """
    ctype = request.headers.get("content-type", "")
    if not ctype.lower().startswith("multipart/form-data"):
        raise InputError(f"expected multipart/form-data with fields {', '.join(fields)}"
                         + (" or application/json" if json_too else "") + f", got {ctype or 'no content type'!r}",
                         field="content-type", code="unsupported_media_type", status=415)
    try:
        form = await request.form(max_files=8, max_fields=16)
    except (InputError, BodyTooLarge):
        raise
    except Exception as exc:  # malformed multipart body
        raise InputError(f"malformed multipart body ({type(exc).__name__})", field="body") from None
    out: dict[str, list[tuple[str, bytes]]] = {}
    try:
        for f in fields:
            out[f] = await _field_files(form, f)
    finally:
        await form.close()
    return out, form


async def _field_files(form: Any, f: str) -> list[tuple[str, bytes]]:
    items = form.getlist(f)
    if not items:
        raise InputError(f"missing file field {f!r}", field=f)
    files = []
    for it in items:
        if not isinstance(it, UploadFile):
            raise InputError(f"field {f!r} must be a file upload, got text", field=f)
        data = await it.read()
        files.append((str(it.filename or f"{f}.bin")[:200], data))
    return files_of_field(f, files)


def form_text(form: Any, name: str, *, required: bool = False, max_len: int = 200) -> str | None:
    """A text field of a parsed form (None if absent and not required)."""
    v = form.get(name)
    if v is None or (isinstance(v, str) and v == "" and not required):
        if required:
            raise InputError(f"missing field {name!r}", field=name)
        return None
    if not isinstance(v, str):
        raise InputError(f"field {name!r} must be text, not a file", field=name)
    if len(v) > max_len:
        raise InputError(f"field {name!r} is longer than {max_len} characters", field=name)
    return v
