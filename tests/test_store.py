"""The SQLite store: content addressing, idempotency, migrations, durability across processes."""

from __future__ import annotations

import hashlib
import multiprocessing as mp
import sqlite3

import pytest

from detector._validation import ShotcheckError
from detector.store import MIGRATIONS, SCHEMA_VERSION, Store


@pytest.fixture
def store(tmp_path):
    st = Store(tmp_path / "data")
    yield st
    st.close()


def test_files_are_content_addressed_and_records_idempotent(store):
    a = store.put_record([("shot.cfg", b"cfg text"), ("shot.dat", b"\x00\x01")])
    b = store.put_record([("other-name.DAT", b"\x00\x01"), ("other-name.CFG", b"cfg text")])
    assert a.digest == b.digest  # same content, whatever the names or their order
    assert a.name == "shot.cfg" and {f.suffix for f in a.files} == {".cfg", ".dat"}
    for f in a.files:
        p = store.blob_path(f.sha256, f.suffix)
        assert hashlib.sha256(p.read_bytes()).hexdigest() == f.sha256
    assert store.get_record(a.digest).files == a.files
    c = store.put_record([("shot.cfg", b"cfg text!"), ("shot.dat", b"\x00\x01")])
    assert c.digest != a.digest


def test_client_names_are_never_paths(store, tmp_path):
    rec = store.put_record([("../../../etc/evil.csv", b"time_s,voltage_kV\n")])
    assert not (tmp_path / "etc").exists()
    assert all(p.parent.parent == store.blobs_dir for p in store.blobs_dir.rglob("*.csv"))
    with store.materialise(rec) as path:
        assert path.name == "record.csv" and path.read_bytes() == b"time_s,voltage_kV\n"
    with pytest.raises(ShotcheckError, match="unsupported file type"):
        store.put_record([("shot.exe", b"MZ")])
    with pytest.raises(ShotcheckError, match="not a SHA-256"):
        store.blob_path("../x", ".csv")


def test_comparison_lifecycle_and_audit(store):
    r = store.put_record([("r.csv", b"1")])
    t = store.put_record([("t.csv", b"2")])
    cid, existing = store.begin_comparison(r, t, "m@1")
    assert existing is None and store.pending_comparisons() == [cid]
    cid2, existing = store.begin_comparison(r, t, "m@1")
    assert cid2 == cid and existing["status"] == "pending"
    assert store.begin_comparison(r, t, "m@2")[0] != cid  # another model, another comparison
    store.finish_comparison(cid, {"fault_indicated": False, "event": "none"})
    row = store.get_comparison(cid)
    assert row["status"] == "done" and row["verdict"]["event"] == "none"
    assert [a["action"] for a in store.audit_log(cid)] == ["comparison.created", "comparison.done"]
    assert store.count_comparisons() == {"done": 1, "pending": 1}


def test_sequences_and_shots(store):
    sid = store.create_sequence("TX-0000-SVC", "2V", [{"kind": "reduced", "level_percent": 75.0}], {"watch_folder": "f1"})
    assert store.find_sequence("watch_folder", "f1") == sid and store.find_sequence("watch_folder", "f2") is None
    rec = store.put_record([("a.csv", b"a")])
    s1, created = store.add_shot(sid, rec, kind="reduced", level_percent=75, role="reference", waveshape={}, warnings=[])
    s2, again = store.add_shot(sid, rec, kind="reduced", level_percent=75, role="reference", waveshape={}, warnings=[])
    assert created and not again and s1["id"] == s2["id"] == f"{sid}-001"
    with pytest.raises(ShotcheckError, match="identifier"):
        store.find_sequence("x') OR 1=1 --", "f1")


def test_migration_from_version_1_keeps_data(tmp_path):
    """A database at schema version 1 is brought to the current version with its rows intact."""
    db = tmp_path / Store.DB_NAME
    con = sqlite3.connect(db)
    con.executescript(MIGRATIONS[0] + "; PRAGMA user_version = 1;")
    con.execute("INSERT INTO records(digest, files_json, created_at) VALUES ('d1', '[]', 'then')")
    con.commit()
    con.close()
    st = Store(tmp_path)
    try:
        assert st.schema_version == SCHEMA_VERSION == 2
        assert st.get_record("d1") is not None and st.watched_files() == []
        assert st.integrity_check() == "ok"
    finally:
        st.close()


def test_opening_waits_for_another_connections_write(tmp_path):
    """SQLite refuses the switch to WAL at once while another connection holds a write lock, without
    the busy timeout (seen: a service worker failing to start beside another on a new data folder)."""
    import threading
    import time

    holder = sqlite3.connect(tmp_path / Store.DB_NAME, isolation_level=None, check_same_thread=False)
    holder.execute("CREATE TABLE t(a)")
    holder.execute("BEGIN")
    holder.execute("INSERT INTO t VALUES (1)")  # a write lock, in the default rollback-journal mode
    threading.Timer(0.3, lambda: holder.execute("COMMIT")).start()
    t0 = time.monotonic()
    st = Store(tmp_path, timeout_s=10.0)
    try:
        assert time.monotonic() - t0 >= 0.25  # it waited for the write to end
        assert st._conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    finally:
        st.close()
        holder.close()
    # a write that outlasts the timeout is an error naming the database
    (tmp_path / "other").mkdir()
    holder = sqlite3.connect(tmp_path / "other" / Store.DB_NAME, isolation_level=None)
    holder.execute("CREATE TABLE t(a)")
    holder.execute("BEGIN")
    holder.execute("INSERT INTO t VALUES (1)")
    try:
        with pytest.raises(ShotcheckError, match="shotcheck.sqlite3.*locked.*WAL"):
            Store(tmp_path / "other", timeout_s=0.2)
    finally:
        holder.close()


def test_newer_schema_is_refused(tmp_path):
    con = sqlite3.connect(tmp_path / Store.DB_NAME)
    con.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    con.commit()
    con.close()
    with pytest.raises(ShotcheckError, match="newer"):
        Store(tmp_path)


def test_wal_mode(store):
    assert store._query("PRAGMA journal_mode")[0][0] == "wal"


def _writer(path: str, k: int) -> None:
    st = Store(path)
    for i in range(20):
        st.put_record([(f"{k}-{i}.csv", f"{k},{i}".encode())])
    st.close()


def test_concurrent_writers_in_processes(tmp_path):
    """Four processes writing at once: every record committed, database sound."""
    ctx = mp.get_context("spawn")
    procs = [ctx.Process(target=_writer, args=(str(tmp_path), k)) for k in range(4)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(60)
        assert p.exitcode == 0
    st = Store(tmp_path)
    try:
        assert st._query("SELECT COUNT(*) FROM records")[0][0] == 80
        assert st.integrity_check() == "ok"
    finally:
        st.close()
