"""POST/GET /v1/comparisons, wave shape, model card, health: answers match the domain API and are stored."""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
import svc_records
from conftest import AUTH
from threadpoolctl import threadpool_limits

from detector.compare import compare
from detector.formats import read
from detector.model import load_model
from detector.store import Store

# DESIGN.md section 6: the keys of the verdict JSON
VERDICT_KEYS = {"fault_indicated", "event", "probabilities", "fault_time_us", "location", "metrics", "exceeded",
                "waveshape", "warnings", "model"}


def _post_pair(client, ref, test, headers=AUTH):
    files = svc_records.upload("reference", ref) + svc_records.upload("test", test)
    return client.post("/v1/comparisons", files=files, headers=headers)


def _differences(a, b, path="") -> list[str]:
    """Paths where two JSON-like values differ (floats to 1e-9 relative)."""
    if isinstance(a, float) and isinstance(b, float):
        return [] if a == pytest.approx(b, rel=1e-9, abs=1e-12) else [f"{path}: {a!r} != {b!r}"]
    if isinstance(a, dict) and isinstance(b, dict):
        if a.keys() != b.keys():
            return [f"{path}: keys {sorted(set(a) ^ set(b))}"]
        return [d for k in a for d in _differences(a[k], b[k], f"{path}.{k}")]
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            return [f"{path}: lengths {len(a)} != {len(b)}"]
        return [d for i, (x, y) in enumerate(zip(a, b, strict=True)) for d in _differences(x, y, f"{path}[{i}]")]
    return [] if a == b else [f"{path}: {a!r} != {b!r}"]


def test_multipart_comparison_is_the_domain_verdict_and_is_stored(client, record_files, model_path, settings):
    ref, test = record_files["reduced_csv"], record_files["full_cfg"]
    r = _post_pair(client, ref, test)
    assert r.status_code == 201, r.text
    body = r.json()
    assert VERDICT_KEYS <= body.keys()
    assert body["reference_name"] == ref[0].name and body["test_name"] == test[0].name
    # the service adds nothing to and changes nothing in the verdict of detector.compare
    with threadpool_limits(limits=1, user_api="openmp"):  # as the service runs it (see engine); same numbers
        direct = compare(read(ref[0]), read(test[0]), model=load_model(model_path)).to_dict()
    direct = json.loads(json.dumps(direct).replace("NaN", "null"))
    diffs = _differences({k: body[k] for k in VERDICT_KEYS}, direct)
    assert not diffs, "\n".join(diffs)
    # GET returns the stored verdict
    g = client.get(f"/v1/comparisons/{body['id']}")
    assert g.status_code == 200 and g.json() == body
    # committed in the store, with the uploaded bytes kept content-addressed
    st = Store(settings.data_dir)
    row = st.get_comparison(body["id"])
    assert row["status"] == "done" and row["verdict"]["event"] == body["event"]
    for p in ref + test:
        sha = hashlib.sha256(p.read_bytes()).hexdigest()
        assert st.blob_path(sha, p.suffix).read_bytes() == p.read_bytes()
    actions = [a["action"] for a in st.audit_log(body["id"])]
    assert actions == ["comparison.created", "comparison.done"]
    assert st.integrity_check() == "ok"


def test_a_second_shot_against_one_reference_reuses_its_evaluation_with_the_same_verdict(
        client, record_files, model_path, monkeypatch, tmp_path):
    """Every full-level shot of a sequence is compared with one reference: the process keeps the read
    reference and its IEC 60060-1 evaluation (stored records never change) and the verdict stays the
    domain API's. A copy of the reference under another file name is read anew (its name appears in
    the messages)."""
    import shutil

    import detector.waveshape as ws

    calls: list[str] = []
    real = ws.evaluate_waveshape

    def counting(record, *a, **k):
        calls.append(str(record.source))
        return real(record, *a, **k)

    import detector.features as features

    monkeypatch.setattr(ws, "evaluate_waveshape", counting)
    monkeypatch.setattr(features, "evaluate_waveshape", counting)
    ref = record_files["reduced_csv"]
    bodies = []
    for test in (record_files["full_cfg"], record_files["full_cff"]):
        r = _post_pair(client, ref, test)
        assert r.status_code == 201, r.text
        bodies.append(r.json())
    # the reference is evaluated once for both comparisons, each test shot once (inside compare)
    assert calls.count(ref[0].name) == 1, calls
    assert calls.count(record_files["full_cfg"][0].name) == 1 and calls.count(record_files["full_cff"][0].name) == 1
    with threadpool_limits(limits=1, user_api="openmp"):
        direct = compare(read(ref[0]), read(record_files["full_cff"][0]), model=load_model(model_path)).to_dict()
    direct = json.loads(json.dumps(direct).replace("NaN", "null"))
    diffs = _differences({k: bodies[1][k] for k in VERDICT_KEYS}, direct)
    assert not diffs, "\n".join(diffs)
    renamed = tmp_path / "TX_01_reduced_75_copy.csv"
    shutil.copyfile(ref[0], renamed)
    r = _post_pair(client, [renamed], record_files["chopped_cff"])  # a new pair (the same one would be a re-post)
    assert r.status_code == 201, r.text
    assert r.json()["reference_name"] == renamed.name and calls.count(renamed.name) == 1


def test_reposting_the_same_content_is_idempotent(client, record_files, settings):
    ref, test = record_files["reduced_csv"], record_files["full_cff"]
    first = _post_pair(client, ref, test)
    again = _post_pair(client, ref, test)
    assert first.status_code == 201 and again.status_code == 200
    assert again.json()["id"] == first.json()["id"]
    assert Store(settings.data_dir).count_comparisons() == {"done": 1}


def test_json_records_in_kV_and_in_V_give_the_same_verdict(client):
    ref = svc_records.impulse_record(4000, level_percent=75.0, seed=7)
    test = svc_records.impulse_record(4000, seed=8)
    a = client.post("/v1/comparisons", json={"reference": svc_records.as_json(ref), "test": svc_records.as_json(test)},
                    headers=AUTH)
    b = client.post("/v1/comparisons", json={"reference": svc_records.as_json(ref, unit_v="V"),
                                             "test": svc_records.as_json(test, unit_v="V")}, headers=AUTH)
    assert a.status_code == 201 and b.status_code == 201, (a.text, b.text)
    assert a.json()["id"] != b.json()["id"]  # different bytes, different stored records
    pa, pb = a.json()["probabilities"], b.json()["probabilities"]
    assert pa == pytest.approx(pb, abs=1e-6)
    ws = a.json()["waveshape"]["test"]
    # the record was built at 550 kV extreme value (svc_records); a kV/V slip would be a factor 1000
    assert abs(ws["peak_kV"]) == pytest.approx(550.0, rel=0.01)


def test_waveshape_of_a_double_exponential(client, record_files):
    r = client.post("/v1/waveshape", files=svc_records.upload("record", record_files["full_cff"]), headers=AUTH)
    assert r.status_code == 200, r.text
    ws = r.json()
    assert ws["kind"] == "lightning_full"
    # tau1 = 68.22 us, tau2 = 0.405 us give T1 = 1.2 us and T2 = 50 us (Kuffel, Zaengl & Kuffel, table of
    # impulse wave constants; recalled, REFERENCE.md); tolerance for 10 ns sampling and 12-bit quantisation
    assert ws["front_time_us"] == pytest.approx(1.2, abs=0.03)
    assert ws["time_to_half_us"] == pytest.approx(50.0, abs=0.5)
    chopped = client.post("/v1/waveshape", files=svc_records.upload("record", record_files["chopped_cff"]),
                          headers=AUTH).json()
    assert chopped["kind"] == "lightning_chopped"
    # the collapse is centred 4.0 us after t = 0 (svc_records); IEC 60060-1:2010 measures the time to
    # chopping from the virtual origin, which lies before t = 0 (from memory, clause not at hand)
    assert 3.8 < chopped["chopping_time_us"] < 4.5


def test_model_card_health_ready_and_openapi(client, model_path):
    m = client.get("/v1/model").json()
    assert m["schema_version"] == load_model(model_path).schema_version
    assert len(m["feature_names"]) > 10 and m["id"].endswith(hashlib.sha256(model_path.read_bytes()).hexdigest()[:16])
    assert client.get("/health").json()["status"] == "ok"
    ready = client.get("/ready").json()
    assert ready["status"] == "ready" and ready["store_schema_version"] == 2
    paths = client.get("/openapi.json").json()["paths"]
    # the paths issue 5 fixes
    for p in ("/v1/comparisons", "/v1/comparisons/{comparison_id}", "/v1/comparisons/{comparison_id}/report",
              "/v1/waveshape", "/v1/sequences", "/v1/sequences/{sequence_id}/shots", "/v1/sequences/{sequence_id}",
              "/v1/model", "/health", "/ready"):
        assert p in paths, p


def test_unknown_ids_are_404_with_the_error_shape(client):
    for url in ("/v1/comparisons/c" + "0" * 31, "/v1/comparisons/../../etc/passwd", "/v1/sequences/s" + "1" * 24,
                "/v1/comparisons/c" + "0" * 31 + "/report"):
        r = client.get(url)
        assert r.status_code == 404, url
        if r.headers["content-type"].startswith("application/json"):
            assert set(r.json()) == {"error", "detail", "field"}


def test_report_and_figures(client, record_files):
    pytest.importorskip("detector.report", reason="detector.report is being written by another engineer")
    cid = _post_pair(client, record_files["reduced_csv"], record_files["full_cff"]).json()["id"]
    rep = client.get(f"/v1/comparisons/{cid}/report")
    assert rep.status_code == 200 and rep.headers["content-type"].startswith("text/html")
    assert b"<html" in rep.content[:2000].lower()
    figs = client.get(f"/v1/comparisons/{cid}/figures").json()["figures"]
    assert figs
    png = client.get(figs[0])
    assert png.status_code == 200 and png.content[:8] == b"\x89PNG\r\n\x1a\n"


def test_no_stack_trace_in_an_internal_error(client, monkeypatch):
    """An unexpected failure answers 500 with the error shape and no traceback text."""
    from detector.service import engine as engine_mod

    def boom(*a, **k):
        raise RuntimeError("secret internal path /srv/x.py line 3")

    monkeypatch.setattr(engine_mod.Engine, "compare", boom)
    ref = svc_records.as_json(svc_records.impulse_record(2000, level_percent=75.0))
    r = client.post("/v1/comparisons", json={"reference": ref, "test": ref}, headers=AUTH)
    assert r.status_code == 500
    assert r.json()["error"] == "internal_error"
    assert "Traceback" not in r.text and "secret" not in r.text


def test_recover_finishes_a_comparison_left_pending(settings, model_path, record_files):
    """A crash between 'pending' and 'done' is finished by the next start (lifespan recovery)."""
    from fastapi.testclient import TestClient

    from detector.service.app import create_app

    st = Store(settings.data_dir)
    ref = st.put_record([(p.name, p.read_bytes()) for p in record_files["reduced_csv"]])
    test = st.put_record([(p.name, p.read_bytes()) for p in record_files["full_cff"]])
    from detector.service.engine import _model_id

    cid, _ = st.begin_comparison(ref, test, _model_id(model_path, load_model(model_path).card))
    assert st.pending_comparisons() == [cid]
    with TestClient(create_app(settings)) as c:
        r = c.get(f"/v1/comparisons/{cid}")
    assert r.status_code == 200 and r.json()["status"] == "done"
    assert st.pending_comparisons() == []
    assert np.isfinite(r.json()["probabilities"]["none"])
