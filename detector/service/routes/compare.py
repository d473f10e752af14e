"""Comparisons of a reference and a test record, their reports and figures, and wave shapes."""

from __future__ import annotations

import json
import re
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import FileResponse, JSONResponse, Response

from ..deps import EngineDep, Writer, form_text, read_multipart, run_in_worker
from ..engine import Engine, InputError
from ..schemas import (
    MULTIPART_RECORD_SCHEMA,
    ComparisonJsonIn,
    ComparisonOut,
    ErrorOut,
    WaveshapeOut,
)

router = APIRouter(prefix="/v1", tags=["comparisons"])

_ERRORS: dict[int | str, dict[str, Any]] = {
    s: {"model": ErrorOut} for s in (400, 401, 403, 404, 409, 413, 415, 422, 503)}
_ID = re.compile(r"^c[0-9a-f]{31}$")
_CHANNEL_OPTS = {
    "voltage_channel": {"type": "string", "description": "voltage channel name (default: the first)"},
    "current_channel": {"type": "string", "description": "current channel name (default: the first)"},
}


def comparison_out(row: dict[str, Any]) -> dict[str, Any]:
    """Response body of a finished comparison: id, names, verdict keys, report link."""
    return {"id": row["id"], "status": row["status"], "reference_name": row["reference_name"],
            "test_name": row["test_name"], "created_at": row["created_at"], **row["verdict"],
            "report_url": f"/v1/comparisons/{row['id']}/report"}


def _json_body(raw: bytes) -> Any:
    try:
        return json.loads(raw)
    except (ValueError, UnicodeDecodeError, RecursionError) as exc:
        raise InputError(f"the body is not valid JSON ({type(exc).__name__}: {str(exc)[:200]})", field="body") from None


def _canonical(doc: Any, field: str) -> bytes:
    try:
        return json.dumps(doc, sort_keys=True, separators=(",", ":")).encode()
    except (ValueError, RecursionError):
        raise InputError("record nested too deeply to store", field=field) from None


@router.post(
    "/comparisons",
    status_code=201,
    response_model=ComparisonOut,
    responses={200: {"model": ComparisonOut, "description": "the same comparison was answered before"}, **_ERRORS},
    openapi_extra={"requestBody": {"required": True, "content": {
        "multipart/form-data": {"schema": MULTIPART_RECORD_SCHEMA(
            {"reference": "reduced-level record: a CSV, a .cff, or a .cfg and its .dat",
             "test": "full-level record, same forms"}, _CHANNEL_OPTS)},
        "application/json": {"schema": ComparisonJsonIn.model_json_schema(ref_template="#/components/schemas/{model}")},
    }}},
)
async def create_comparison(request: Request, engine: EngineDep, actor: Writer) -> Any:
    """Compare a test record with its reference; the verdict is stored before the answer.

    Re-posting the same two records returns the stored verdict (200) instead of a new one (201).
    """
    ctype = request.headers.get("content-type", "").lower()
    if ctype.startswith("application/json"):
        doc = _json_body(await request.body())
        if not isinstance(doc, dict):
            raise InputError("expected a JSON object with 'reference' and 'test'", field="body")
        unknown = set(doc) - {"reference", "test", "voltage_channel", "current_channel"}
        if unknown:
            raise InputError(f"unknown field(s): {', '.join(sorted(unknown))}", field=sorted(unknown)[0])
        for f in ("reference", "test"):
            if f not in doc:
                raise InputError(f"missing field {f!r}", field=f)
        files = {f: [(f"{f}.json", _canonical(doc[f], f))] for f in ("reference", "test")}
        opts = {k: doc.get(k) for k in ("voltage_channel", "current_channel")}
        for k, v in opts.items():
            if v is not None and not isinstance(v, str):
                raise InputError("must be text", field=k)
    else:
        files, form = await read_multipart(request, ("reference", "test"), json_too=True)
        opts = {k: form_text(form, k) for k in ("voltage_channel", "current_channel")}

    def work() -> tuple[dict[str, Any], bool]:
        ref = engine.store.put_record(files["reference"])
        tst = engine.store.put_record(files["test"])
        return engine.compare(ref, tst, options=opts, actor=actor)

    row, created = await run_in_worker(request, work)
    return JSONResponse(comparison_out(row), status_code=201 if created else 200)


def _row(engine: Engine, cid: str) -> dict[str, Any]:
    row = engine.store.get_comparison(cid) if _ID.match(cid) else None
    if row is None:
        raise InputError(f"no comparison {cid!r}", field="id", code="not_found", status=404)
    return row


@router.get("/comparisons/{comparison_id}", response_model=ComparisonOut, responses=_ERRORS)
async def get_comparison(comparison_id: str, engine: EngineDep) -> Any:
    """A stored comparison and its verdict."""
    row = _row(engine, comparison_id)
    if row["status"] == "failed":
        e = row["error"] or {}
        raise InputError(e.get("detail", "comparison failed"), field=e.get("field"), code=e.get("error", "failed"))
    if row["status"] != "done":
        return JSONResponse({"error": "pending", "detail": "the comparison is not finished; retry shortly",
                             "field": None}, status_code=503, headers={"Retry-After": "1"})
    return comparison_out(row)


def _report_module() -> Any:
    try:
        from ... import report
    except ImportError:
        raise InputError("the report module is not installed in this build", field=None,
                         code="report_unavailable", status=503) from None
    return report


@router.get("/comparisons/{comparison_id}/report", responses={200: {"content": {"text/html": {}}}, **_ERRORS},
            response_class=Response)
async def get_report(comparison_id: str, request: Request, engine: EngineDep) -> Any:
    """Self-contained HTML report of a comparison (written once, then served from the data folder)."""
    row = _row(engine, comparison_id)
    if row["status"] != "done":
        raise InputError("no report: the comparison has no verdict", field="id", code="not_found", status=404)
    path = engine.store.data_dir / "reports" / f"{row['id']}.html"
    if not path.is_file():
        report = _report_module()

        def build() -> None:
            verdict, r = engine.verdict_object(row["id"])
            path.parent.mkdir(exist_ok=True)
            tmp = path.with_suffix(".tmp")
            report.write_report(verdict, tmp, reference_name=r["reference_name"], test_name=r["test_name"])
            tmp.replace(path)

        await run_in_worker(request, build)
    return FileResponse(path, media_type="text/html")


@router.get("/comparisons/{comparison_id}/figures/{name}", responses={200: {"content": {"image/png": {}}}, **_ERRORS},
            response_class=Response)
async def get_figure(comparison_id: str, name: str, request: Request, engine: EngineDep) -> Any:
    """One figure of the report as PNG (names listed by ``GET .../figures``)."""
    row = _row(engine, comparison_id)
    if not re.fullmatch(r"[a-z0-9_]{1,40}\.png", name):
        raise InputError("figure names look like 'overlay.png'", field="name", code="not_found", status=404)
    folder = engine.store.data_dir / "figures" / row["id"]
    if not folder.is_dir():
        await run_in_worker(request, _render_figures, engine, row["id"], folder)
    path = folder / name
    if not path.is_file():
        raise InputError(f"no figure {name!r}", field="name", code="not_found", status=404)
    return FileResponse(path, media_type="image/png")


@router.get("/comparisons/{comparison_id}/figures", responses=_ERRORS)
async def list_figures(comparison_id: str, request: Request, engine: EngineDep) -> dict[str, list[str]]:
    """Names and URLs of the report's figures."""
    row = _row(engine, comparison_id)
    if row["status"] != "done":
        raise InputError("no figures: the comparison has no verdict", field="id", code="not_found", status=404)
    folder = engine.store.data_dir / "figures" / row["id"]
    if not folder.is_dir():
        await run_in_worker(request, _render_figures, engine, row["id"], folder)
    names = sorted(p.name for p in folder.glob("*.png"))
    return {"figures": [f"/v1/comparisons/{row['id']}/figures/{n}" for n in names]}


def _render_figures(engine: Engine, cid: str, folder: Any) -> None:
    report = _report_module()
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    verdict, _ = engine.verdict_object(cid)
    figs = report.figures(verdict)
    items = figs.items() if isinstance(figs, dict) else enumerate(figs)
    tmp = folder.with_name(folder.name + ".tmp")
    tmp.mkdir(parents=True, exist_ok=True)
    for key, fig in items:
        stem = re.sub(r"[^a-z0-9_]+", "_", str(key).lower()).strip("_")[:36] or "figure"
        if isinstance(fig, (bytes, bytearray)):
            (tmp / f"{stem}.png").write_bytes(bytes(fig))
        else:
            fig.savefig(tmp / f"{stem}.png", dpi=90)
            plt.close(fig)
    try:
        tmp.rename(folder)
    except OSError:  # another request rendered them first
        pass


@router.post(
    "/waveshape",
    response_model=WaveshapeOut,
    responses=_ERRORS,
    tags=["waveshape"],
    openapi_extra={"requestBody": {"required": True, "content": {"multipart/form-data": {"schema": MULTIPART_RECORD_SCHEMA(
        {"record": "one record: a CSV, a .cff, or a .cfg and its .dat"},
        {"voltage_channel": _CHANNEL_OPTS["voltage_channel"],
         "kind": {"type": "string", "enum": ["lightning_full", "lightning_chopped", "switching"]}})}}}},
)
async def waveshape(request: Request, engine: EngineDep, actor: Writer) -> Any:
    """IEC 60060-1 parameters of one record (front time, time to half-value, test voltage...)."""
    files, form = await read_multipart(request, ("record",))
    vch = form_text(form, "voltage_channel")
    kind = form_text(form, "kind")
    if kind is not None and kind not in ("lightning_full", "lightning_chopped", "switching"):
        raise InputError("must be lightning_full, lightning_chopped or switching", field="kind")

    def work() -> dict[str, Any]:
        rec = engine.store.put_record(files["record"])
        return engine.waveshape(rec, voltage_channel=vch, kind=kind)

    return await run_in_worker(request, work)
