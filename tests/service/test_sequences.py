"""Test sequences over HTTP: reference choice, comparisons of every full-level shot, closing shot, summary."""

from __future__ import annotations

import pytest
import svc_records
from conftest import AUTH


def _new(client, **body):
    r = client.post("/v1/sequences", json={"unit_id": "TX-0000-SVC", "terminal": "2V", **body}, headers=AUTH)
    assert r.status_code == 201, r.text
    return r.json()["id"]


def _shot(client, sid, paths, kind, level):
    return client.post(f"/v1/sequences/{sid}/shots", files=svc_records.upload("record", paths),
                       data={"kind": kind, "level_percent": str(level)}, headers=AUTH)


@pytest.fixture(scope="module")
def iec_files(tmp_path_factory):
    """The six shots of the default order, as files (levels as the plan says)."""
    d = tmp_path_factory.mktemp("iec")
    w, mk = svc_records.write_record, svc_records.impulse_record
    return [
        (w(mk(8000, level_percent=75.0, seed=21), d / "01_reduced_75.csv"), "reduced", 75),
        (w(mk(8000, level_percent=100.0, seed=22), d / "02_full_100.cfg", data_format="BINARY"), "full", 100),
        (w(mk(8000, level_percent=115.0, kind="chopped", seed=23), d / "03_chopped_115.cff"), "chopped", 115),
        (w(mk(8000, level_percent=115.0, kind="chopped", seed=24), d / "04_chopped_115.cff"), "chopped", 115),
        (w(mk(8000, level_percent=100.0, seed=25), d / "05_full_100.cff"), "full", 100),
        (w(mk(8000, level_percent=75.0, seed=26), d / "06_reduced_75.csv"), "reduced", 75),
    ]


def test_iec_sequence_roles_comparisons_and_summary(client, iec_files):
    sid = _new(client)
    shots = []
    for paths, kind, level in iec_files:
        r = _shot(client, sid, paths, kind, level)
        assert r.status_code == 201, r.text
        shots.append(r.json())
    assert [s["role"] for s in shots] == ["reference", "test", "test", "test", "test", "closing"]
    assert shots[0]["comparison"] is None
    ref_digest_names = set()
    for s in shots[1:]:
        c = client.get(f"/v1/comparisons/{s['comparison']['id']}").json()
        ref_digest_names.add(c["reference_name"])  # every comparison is against the opening shot
        assert c["test_name"] == s["name"]
    assert ref_digest_names == {"01_reduced_75.csv"}
    assert [s["waveshape"]["kind"] for s in shots] == ["lightning_full", "lightning_full", "lightning_chopped",
                                                       "lightning_chopped", "lightning_full", "lightning_full"]
    assert all(not s["warnings"] for s in shots), [s["warnings"] for s in shots]
    view = client.get(f"/v1/sequences/{sid}").json()
    summ = view["summary"]
    assert summ["status"] == "complete" and summ["shots_received"] == 6 and summ["deviations"] == []
    faulted = {s["id"] for s in shots[1:] if s["comparison"]["verdict"]["fault_indicated"]}
    assert set(summ["faulted_shots"]) == faulted
    assert summ["fault_indicated"] == bool(faulted)
    assert summ["lasting_change"] == shots[5]["comparison"]["verdict"]["fault_indicated"]


def test_chopped_shots_are_compared_with_the_reduced_chopped_wave(client, iec_files, tmp_path):
    w, mk = svc_records.write_record, svc_records.impulse_record
    rc = w(mk(8000, level_percent=75.0, kind="chopped", seed=31), tmp_path / "03_reduced_chopped_75.cff")
    sid = _new(client, plan="iec_chopped")
    order = [(iec_files[0][0], "reduced", 75), (iec_files[1][0], "full", 100), (rc, "reduced_chopped", 75),
             (iec_files[2][0], "chopped", 115), (iec_files[4][0], "full", 100)]
    shots = []
    for paths, kind, level in order:
        r = _shot(client, sid, paths, kind, level)
        assert r.status_code == 201, r.text
        shots.append(r.json())
    assert [s["role"] for s in shots] == ["reference", "test", "chopped_reference", "test", "test"]
    refs = [client.get(f"/v1/comparisons/{s['comparison']['id']}").json()["reference_name"] for s in shots[1:]]
    assert refs == ["01_reduced_75.csv", "01_reduced_75.csv", "03_reduced_chopped_75.cff", "01_reduced_75.csv"]
    summ = client.get(f"/v1/sequences/{sid}").json()["summary"]
    assert summ["deviations"] == ["shot 5: full at 100 %, the plan has chopped at 115 %"]  # one chopped only
    assert summ["shots_received"] == 5 and summ["status"] == "in_progress"
    # a reduced chopped wave declared for a full wave's record is refused
    r = _shot(client, sid, iec_files[5][0], "reduced_chopped", 75)
    assert r.status_code == 422 and "chopped" in r.json()["detail"], r.text


def test_full_level_shot_before_the_reference_is_409(client, iec_files):
    sid = _new(client)
    r = _shot(client, sid, iec_files[1][0], "full", 100)
    assert r.status_code == 409 and r.json()["error"] == "no_reference"


def test_declared_kind_contradicted_by_the_record_is_422(client, iec_files):
    sid = _new(client)
    assert _shot(client, sid, iec_files[0][0], "reduced", 75).status_code == 201
    r = _shot(client, sid, iec_files[1][0], "chopped", 115)  # a full wave declared as chopped
    assert r.status_code == 422 and r.json()["field"] == "kind"
    assert "chopped" in r.json()["detail"] and "full" in r.json()["detail"]
    r = _shot(client, sid, iec_files[2][0], "full", 100)  # a chopped wave declared as full
    assert r.status_code == 422 and r.json()["field"] == "kind"
    assert len(client.get(f"/v1/sequences/{sid}").json()["shots"]) == 1  # nothing half-added


def test_reposting_a_shot_is_idempotent(client, iec_files):
    sid = _new(client)
    a = _shot(client, sid, iec_files[0][0], "reduced", 75)
    b = _shot(client, sid, iec_files[0][0], "reduced", 75)
    assert (a.status_code, b.status_code) == (201, 200) and a.json()["id"] == b.json()["id"]
    assert len(client.get(f"/v1/sequences/{sid}").json()["shots"]) == 1


def test_a_shot_that_cannot_be_compared_is_refused_and_not_stored(client, iec_files, tmp_path):
    """A shot whose comparison with its reference fails (here a voltage channel in kV written as volts:
    a thousandth of the reference's test voltage) used to be stored all the same and answered 422 once,
    then 200 with no verdict on a re-post, and the sequence waited for its verdict for good."""
    import dataclasses

    sid = _new(client)
    assert _shot(client, sid, iec_files[0][0], "reduced", 75).status_code == 201
    good = svc_records.impulse_record(8000, level_percent=100.0, seed=22)
    volts = good.replace(channels=tuple(dataclasses.replace(c, samples=c.samples * 1e-3) if c.quantity == "voltage"
                                        else c for c in good.channels))
    bad = svc_records.write_record(volts, tmp_path / "02_full_100_wrong_unit.csv")
    for _ in range(2):  # the same answer every time
        r = _shot(client, sid, bad, "full", 100)
        assert r.status_code == 422, r.text
        assert r.json()["detail"].startswith("not added to the sequence:") and "not comparable" in r.json()["detail"]
        assert r.json()["field"] == "test.voltage"  # the record the refusal concerns
    view = client.get(f"/v1/sequences/{sid}").json()
    assert len(view["shots"]) == 1 and view["summary"]["shots_received"] == 1
    r = _shot(client, sid, iec_files[1][0], "full", 100)  # the corrected shot takes its place
    assert r.status_code == 201 and r.json()["position"] == 2 and r.json()["comparison"]["verdict"] is not None


def test_a_record_declaring_the_other_level_is_refused(client, iec_files):
    """A full-level record posted as the reduced reference (its own metadata says full, 100 %) would
    make every later comparison of the sequence fail, and a shot is never changed: refused at once."""
    sid = _new(client)
    r = _shot(client, sid, iec_files[1][0], "reduced", 75)
    assert r.status_code == 422 and r.json()["field"] == "kind", r.text
    assert "declares itself a full-level shot (meta.shot_kind 'full', meta.level_percent 100)" in r.json()["detail"]
    assert client.get(f"/v1/sequences/{sid}").json()["shots"] == []


def test_reposting_a_shot_under_another_kind_or_level_is_409(client, iec_files):
    sid = _new(client)
    assert _shot(client, sid, iec_files[0][0], "reduced", 75).status_code == 201
    r = _shot(client, sid, iec_files[0][0], "reduced", 60)
    assert r.status_code == 409 and r.json()["field"] == "kind", r.text
    assert "already shot" in r.json()["detail"] and "reduced at 75 %" in r.json()["detail"]
    assert len(client.get(f"/v1/sequences/{sid}").json()["shots"]) == 1


def test_declared_level_that_the_voltage_contradicts_gives_a_warning(client, iec_files):
    sid = _new(client)
    _shot(client, sid, iec_files[0][0], "reduced", 75)
    # the 100 % record declared at 115 %: the measured ratio 100/75 departs from 115/75 by 13 %
    r = _shot(client, sid, iec_files[4][0], "full", 115)
    assert r.status_code == 201
    assert any("level ratio" in w for w in r.json()["warnings"])


def test_custom_plan_and_deviations(client, iec_files):
    sid = _new(client, plan=[{"kind": "reduced", "level_percent": 75}, {"kind": "chopped", "level_percent": 115}])
    _shot(client, sid, iec_files[0][0], "reduced", 75)
    _shot(client, sid, iec_files[1][0], "full", 100)
    summ = client.get(f"/v1/sequences/{sid}").json()["summary"]
    assert summ["status"] == "complete"
    assert summ["deviations"] == ["shot 2: full at 100 %, the plan has chopped at 115 %"]


@pytest.mark.parametrize("body, field", [
    ({"unit_id": "", "terminal": "1U"}, "unit_id"),
    ({"unit_id": "A", "terminal": "1U", "plan": "cigre"}, "plan"),
    ({"unit_id": "A", "terminal": "1U", "plan": [{"kind": "full", "level_percent": 100}]}, "plan"),
    ({"unit_id": "A", "terminal": "1U", "plan": [{"kind": "reduced", "level_percent": 120}]}, "plan"),
    ({"unit_id": "A", "terminal": "1U", "extra": 1}, "extra"),
])
def test_bad_sequence_bodies_are_422(client, body, field):
    r = client.post("/v1/sequences", json=body, headers=AUTH)
    assert r.status_code == 422, r.text
    assert r.json()["field"].startswith(field)


def test_a_sequence_body_that_is_not_json_is_415_and_broken_json_names_the_body(client):
    """The README promises 415 for a wrong content type; a form or a text body used to get 422 'Input
    should be a valid dictionary' with no field, and broken JSON a character offset as its field."""
    form = client.post("/v1/sequences", data={"unit_id": "A", "terminal": "1U"}, headers=AUTH)
    text = client.post("/v1/sequences", content=b"unit_id=A", headers={**AUTH, "content-type": "text/plain"})
    for r in (form, text):
        assert r.status_code == 415 and r.json()["field"] == "content-type", r.text
    r = client.post("/v1/sequences", content=b'{"unit_id": "A", "terminal": ', headers={**AUTH, "content-type":
                                                                                           "application/json"})
    assert r.status_code == 422 and r.json()["field"] == "body" and "not valid JSON" in r.json()["detail"], r.text


def test_a_shot_stored_without_its_comparison_is_finished_on_restart(settings, iec_files):
    """A crash between committing a shot and comparing it: the next start compares it."""
    from fastapi.testclient import TestClient

    from detector.service.app import create_app
    from detector.store import Store

    with TestClient(create_app(settings)) as c:
        sid = _new(c)
        assert _shot(c, sid, iec_files[0][0], "reduced", 75).status_code == 201
    st = Store(settings.data_dir)
    try:
        rec = st.put_record([(p.name, p.read_bytes()) for p in iec_files[1][0]])
        with pytest.raises(Exception, match="changed meanwhile"):  # the position guard of concurrent writers
            st.add_shot(sid, rec, kind="full", level_percent=100, role="test", waveshape={}, warnings=[],
                        expect_position=5)
        st.add_shot(sid, rec, kind="full", level_percent=100, role="test", waveshape={}, warnings=[],
                    expect_position=2)
        assert len(st.shots_without_comparison()) == 1
    finally:
        st.close()
    with TestClient(create_app(settings)) as c:
        shots = c.get(f"/v1/sequences/{sid}").json()["shots"]
    assert shots[1]["comparison"]["status"] == "done"
    assert "fault_indicated" in shots[1]["comparison"]["verdict"]


def test_a_chopped_shot_finished_on_restart_is_compared_with_the_reduced_chopped_wave(settings, iec_files,
                                                                                       tmp_path):
    """The reference of a shot is found again from the shots before it, so a restart picks the same one."""
    from fastapi.testclient import TestClient

    from detector.service.app import create_app
    from detector.store import Store

    w, mk = svc_records.write_record, svc_records.impulse_record
    rc = w(mk(8000, level_percent=75.0, kind="chopped", seed=32), tmp_path / "02_reduced_chopped_75.cff")
    with TestClient(create_app(settings)) as c:
        sid = _new(c, plan="iec_chopped")
        assert _shot(c, sid, iec_files[0][0], "reduced", 75).status_code == 201
        assert _shot(c, sid, rc, "reduced_chopped", 75).status_code == 201
    st = Store(settings.data_dir)
    try:  # a crash between committing the chopped shot and comparing it
        rec = st.put_record([(p.name, p.read_bytes()) for p in iec_files[2][0]])
        st.add_shot(sid, rec, kind="chopped", level_percent=115, role="test", waveshape={}, warnings=[],
                    expect_position=3)
    finally:
        st.close()
    with TestClient(create_app(settings)) as c:
        shots = c.get(f"/v1/sequences/{sid}").json()["shots"]
        comp = c.get(f"/v1/comparisons/{shots[2]['comparison']['id']}").json()
    assert shots[2]["comparison"]["status"] == "done"
    assert comp["reference_name"] == "02_reduced_chopped_75.cff"


def test_creating_a_sequence_with_an_idempotency_key_is_idempotent(client):
    """A client that retries after a lost answer gets the first sequence back, not a second one."""
    body = {"unit_id": "TX-0000-SVC", "terminal": "3W", "plan": "iec"}
    key = {**AUTH, "Idempotency-Key": "lab-7-run-0042"}
    first = client.post("/v1/sequences", json=body, headers=key)
    again = client.post("/v1/sequences", json=body, headers=key)
    assert (first.status_code, again.status_code) == (201, 200)
    assert again.json()["id"] == first.json()["id"]
    assert first.json()["meta"]["idempotency_key"] == "lab-7-run-0042"
    # the same key for another sequence is refused, naming the header
    other = client.post("/v1/sequences", json={**body, "terminal": "1U"}, headers=key)
    assert other.status_code == 409 and other.json()["field"] == "Idempotency-Key", other.json()
    # without a key every request creates its own sequence, as before
    a = client.post("/v1/sequences", json=body, headers=AUTH).json()["id"]
    b = client.post("/v1/sequences", json=body, headers=AUTH).json()["id"]
    assert len({a, b, first.json()["id"]}) == 3
    bad = client.post("/v1/sequences", json=body, headers={**AUTH, "Idempotency-Key": "with space"})
    assert bad.status_code == 422


def test_concurrent_requests_with_one_key_create_one_sequence(settings):
    """Eight threads, two store connections (as two worker processes have): one sequence for one key."""
    from concurrent.futures import ThreadPoolExecutor

    from detector.store import Store

    stores = [Store(settings.data_dir), Store(settings.data_dir)]
    try:
        with ThreadPoolExecutor(8) as pool:
            out = list(pool.map(lambda k: stores[k % 2].create_sequence_once(
                "retry-key-1", "TX-0000-SVC", "2V", [{"kind": "reduced", "level_percent": 75.0}]), range(8)))
        assert len({sid for sid, _ in out}) == 1
        assert sum(created for _, created in out) == 1
    finally:
        for s in stores:
            s.close()
