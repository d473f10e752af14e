"""Watch-folder mode: each dropped file processed exactly once, results beside it, nothing moved or deleted."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import svc_records

from detector._validation import ShotcheckError
from detector.store import Store
from detector.watch import Watcher, shot_kind_from_name

REPO = Path(__file__).resolve().parents[2]


def _listing(root: Path) -> set[str]:
    return {str(p.relative_to(root)) for p in root.rglob("*") if ".shotcheck" not in p.parts}


def test_kind_from_name():
    assert shot_kind_from_name("TX_01_reduced_75.csv") == ("reduced", 75.0)
    assert shot_kind_from_name("shot4-Chopped-115.cfg") == ("chopped", 115.0)
    assert shot_kind_from_name("shot_full.cff") is None  # no level: not guessed
    assert shot_kind_from_name("fullscale100.cff") is None
    assert shot_kind_from_name("a_full_100pc.csv") == ("full", 100.0)
    assert shot_kind_from_name("S03_reduced_chopped_85.cff") == ("reduced_chopped", 85.0)
    assert shot_kind_from_name("S03_reduced-chopped-70.cfg") == ("reduced_chopped", 70.0)


def test_kind_and_level_from_metadata_or_name():
    from detector.watch import kind_and_level

    assert kind_and_level({}, "T1_03_chopped_60.cff") == ("reduced_chopped", 60.0)  # chopped below 80 %
    assert kind_and_level({"shot_kind": "chopped", "level_percent": 115}, "x.cff") == ("chopped", 115.0)
    assert kind_and_level({"shot_kind": "reduced_chopped", "level_percent": "70"}, "x.cff") == ("reduced_chopped",
                                                                                                70.0)
    with pytest.raises(ShotcheckError, match="kind and level unknown"):
        kind_and_level({}, "shot.csv")
    with pytest.raises(ShotcheckError, match="must be a number"):
        kind_and_level({"shot_kind": "full", "level_percent": "high"}, "x.csv")


def test_watcher_processes_once_writes_results_and_keeps_user_files(tmp_path, model_path, record_files):
    root = tmp_path / "watched"
    seq = root / "TX-0000-SVC_2V"
    seq.mkdir(parents=True)
    for key in ("reduced_csv", "full_cfg", "chopped_cff"):
        for p in record_files[key]:
            (seq / p.name).write_bytes(p.read_bytes())
    (seq / "notes_without_kind.csv").write_bytes(record_files["full_cff"][0].read_bytes()[:0] + b"x")
    (seq / "readme.txt").write_text("not a record")
    before = _listing(root)
    w = Watcher(root, model_path=model_path, settle_s=0.0)
    done = w.scan_once()
    assert [d["status"] for d in done] == ["done", "done", "done", "failed"]
    assert w.scan_once() == []  # nothing twice
    w2 = Watcher(root, model_path=model_path, settle_s=0.0)  # a restart resumes, processes nothing again
    assert w2.scan_once() == []
    after = _listing(root)
    assert before <= after  # nothing moved or deleted
    added = after - before
    assert added == {"TX-0000-SVC_2V/TX_01_reduced_75.csv.verdict.json", "TX-0000-SVC_2V/TX_02_full_100.cfg.verdict.json",
                     "TX-0000-SVC_2V/TX_03_chopped_115.cff.verdict.json", "TX-0000-SVC_2V/notes_without_kind.csv.error.txt"}
    full = json.loads((seq / "TX_02_full_100.cfg.verdict.json").read_text())
    assert full["role"] == "test" and full["comparison"]["status"] == "done"
    assert "fault_indicated" in full["comparison"]["verdict"]
    reason = (seq / "notes_without_kind.csv.error.txt").read_text()
    assert "notes_without_kind.csv" in reason and "/tmp" not in reason.replace(str(tmp_path), "")
    for st in (w.store, w2.store):
        st.close()


def test_a_growing_file_waits_and_later_files_keep_their_order(tmp_path, model_path, record_files):
    root = tmp_path / "w"
    seq = root / "s1"
    seq.mkdir(parents=True)
    ref = record_files["reduced_csv"][0].read_bytes()
    (seq / "a_reduced_75.csv").write_bytes(ref[: len(ref) // 2])  # still being written
    (seq / "b_full_100.cff").write_bytes(record_files["full_cff"][0].read_bytes())
    w = Watcher(root, model_path=model_path, settle_s=0.3)
    assert w.scan_once() == []
    time.sleep(0.1)
    with open(seq / "a_reduced_75.csv", "ab") as fh:
        fh.write(ref[len(ref) // 2:])
    assert w.scan_once() == []  # it grew: wait again
    time.sleep(0.4)
    assert [d["status"] for d in w.scan_once()] == ["done", "done"]
    assert json.loads((seq / "b_full_100.cff.verdict.json").read_text())["role"] == "test"
    w.store.close()


def _start(root: Path, model_path: Path, log) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "detector.service_cli", "watch", str(root), "--model", str(model_path),
         "--interval", "0.1", "--settle", "0.2", "--max-runtime", "120"],
        cwd=REPO, stdout=log, stderr=subprocess.STDOUT, env={**os.environ, "PYTHONPATH": str(REPO)})


def _done(root: Path) -> int:
    db = root / ".shotcheck" / Store.DB_NAME
    if not db.is_file():
        return 0
    st = Store(root / ".shotcheck")
    try:
        return sum(1 for r in st.watched_files() if r["status"] in ("done", "failed"))
    finally:
        st.close()


def _wait(cond, timeout_s: float) -> bool:
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if cond():
            return True
        time.sleep(0.1)
    return False


@pytest.mark.slow
def test_100_files_two_kill_restart_cycles_each_processed_exactly_once(tmp_path, model_path):
    """issue 5: 100 files dropped while the watcher is killed (SIGKILL) and restarted twice."""
    root = tmp_path / "drop"
    src = tmp_path / "src"
    src.mkdir()
    files = []
    for f in range(10):  # ten sequences of ten shots: a reduced reference then nine full-level shots
        for k in range(10):
            kind, level = ("reduced", 75.0) if k == 0 else ("full", 100.0)
            rec = svc_records.impulse_record(3000, level_percent=level, seed=1000 + 10 * f + k)
            name = f"U{f:02d}_{k:02d}_{kind}_{level:g}.csv"
            svc_records.write_record(rec, src / name)
            files.append((f"seq{f:02d}", name))
    root.mkdir()

    def drop(batch):
        for folder, name in batch:
            (root / folder).mkdir(exist_ok=True)
            tmp = root / folder / f".{name}.part"  # written under a hidden name, then renamed, like a recorder
            tmp.write_bytes((src / name).read_bytes())
            tmp.rename(root / folder / name)

    procs: list[subprocess.Popen] = []
    t0 = time.monotonic()
    with open(tmp_path / "watch.log", "wb") as log:
        try:
            drop(files[:40])
            procs.append(_start(root, model_path, log))
            assert _wait(lambda: _done(root) >= 15, 45), "watcher made no progress"
            procs[-1].send_signal(signal.SIGKILL)
            procs[-1].wait(10)
            drop(files[40:70])  # dropped while no watcher runs
            procs.append(_start(root, model_path, log))
            assert _wait(lambda: _done(root) >= 50, 45), "no progress after the first restart"
            procs[-1].send_signal(signal.SIGKILL)
            procs[-1].wait(10)
            drop(files[70:])
            procs.append(_start(root, model_path, log))
            ok = _wait(lambda: _done(root) >= 100, 60)
            procs[-1].send_signal(signal.SIGTERM)
            assert procs[-1].wait(20) == 0  # a clean stop on SIGTERM
        finally:
            for p in procs:
                if p.poll() is None:
                    p.kill()
                    p.wait(10)
    assert ok, (tmp_path / "watch.log").read_text()[-2000:]
    elapsed = time.monotonic() - t0

    st = Store(root / ".shotcheck")
    try:
        rows = st.watched_files()
        assert len(rows) == 100 and {r["status"] for r in rows} == {"done"}
        done_events = [a["object_id"] for a in st.audit_log() if a["action"] == "watch.done"]
        assert sorted(done_events) == sorted(f"{fo}/{n}" for fo, n in files)  # each exactly once
        assert st._query("SELECT COUNT(*) FROM shots")[0][0] == 100
        assert st._query("SELECT COUNT(DISTINCT sequence_id) FROM shots")[0][0] == 10
        assert st.integrity_check() == "ok"
        retried = sum(r["attempts"] - 1 for r in rows)
    finally:
        st.close()
    for folder, name in files:
        assert (root / folder / f"{name}.verdict.json").is_file()
        assert not (root / folder / f"{name}.error.txt").exists()
        assert (root / folder / name).read_bytes() == (src / name).read_bytes()
    print(f"watch: 100 files, 2 SIGKILL restarts, {elapsed:.1f} s, {retried} interrupted file(s) redone")


def test_watcher_writes_the_html_report_on_request(tmp_path, model_path, record_files):
    seq = tmp_path / "w" / "s1"
    seq.mkdir(parents=True)
    for key in ("reduced_csv", "full_cff"):
        for p in record_files[key]:
            (seq / p.name).write_bytes(p.read_bytes())
    w = Watcher(tmp_path / "w", model_path=model_path, settle_s=0.0, report=True)
    try:
        assert [d["status"] for d in w.scan_once()] == ["done", "done"]
    finally:
        w.store.close()
    html = (seq / "TX_05_full_100.cff.report.html").read_text(encoding="utf-8")
    assert "<html" in html.lower() and "TX_05_full_100.cff" in html
    assert not (seq / "TX_01_reduced_75.csv.report.html").exists()  # the reference has no comparison


def test_a_file_that_vanishes_mid_scan_is_looked_at_again(tmp_path, model_path, record_files, monkeypatch):
    seq = tmp_path / "w" / "s1"
    seq.mkdir(parents=True)
    target = seq / record_files["reduced_csv"][0].name
    target.write_bytes(record_files["reduced_csv"][0].read_bytes())
    real = Path.read_bytes
    calls = {"n": 0}

    def flaky(self):
        if self == target and calls["n"] == 0:
            calls["n"] += 1
            raise FileNotFoundError(2, "No such file or directory")
        return real(self)

    monkeypatch.setattr(Path, "read_bytes", flaky)
    w = Watcher(tmp_path / "w", model_path=model_path, settle_s=0.0)
    try:
        assert w.scan_once() == []  # no crash, nothing marked
        assert [d["status"] for d in w.scan_once()] == ["done"]
    finally:
        w.store.close()


def test_results_are_readable_by_others_and_a_new_result_replaces_the_old_one(tmp_path, model_path, record_files):
    """The acquisition software may read the results as another user (the verdict used to be made with
    mkstemp's owner-only mode); and a file changed after its verdict that then fails must not leave the
    old verdict beside its new error (nor the reverse): a reader would pick the stale one."""
    import stat

    root = tmp_path / "watched"
    seq = root / "TX-0000-SVC_2V"
    seq.mkdir(parents=True)
    for key in ("reduced_csv", "full_cff"):
        for p in record_files[key]:
            (seq / p.name).write_bytes(p.read_bytes())
    full = seq / record_files["full_cff"][0].name
    w = Watcher(root, model_path=model_path, settle_s=0.0)
    assert [d["status"] for d in w.scan_once()] == ["done", "done"]
    verdict = full.with_name(full.name + ".verdict.json")
    mask = os.umask(0)
    os.umask(mask)
    assert stat.S_IMODE(verdict.stat().st_mode) == 0o666 & ~mask
    full.write_bytes(b"not a record any more")  # the shot file replaced by its writer
    assert [d["status"] for d in w.scan_once()] == ["failed"]
    error = full.with_name(full.name + ".error.txt")
    assert error.is_file() and not verdict.exists()
    assert stat.S_IMODE(error.stat().st_mode) == 0o666 & ~mask
    full.write_bytes(record_files["full_cff"][0].read_bytes())  # and put back
    assert [d["status"] for d in w.scan_once()] == ["done"]
    assert verdict.is_file() and not error.exists()
    w.store.close()


def test_a_cfg_without_its_dat_says_what_it_waits_for(tmp_path, model_path, record_files):
    """A .cfg whose .dat never comes holds up the shots after it (they are taken in order); that used to
    happen without a word. Its error file says what it waits for; when the .dat comes, the shot is taken
    and the error file goes."""
    root = tmp_path / "watched"
    seq = root / "TX-0000-SVC_2V"
    seq.mkdir(parents=True)
    for p in record_files["reduced_csv"]:
        (seq / p.name).write_bytes(p.read_bytes())
    cfg, dat = record_files["full_cfg"][0], record_files["full_cfg"][1]
    assert dat.suffix == ".dat"
    (seq / cfg.name).write_bytes(cfg.read_bytes())
    later = seq / ("zz_" + record_files["chopped_cff"][0].name)
    later.write_bytes(record_files["chopped_cff"][0].read_bytes())
    w = Watcher(root, model_path=model_path, settle_s=0.0)
    assert [d["status"] for d in w.scan_once()] == ["done"]  # the reference; then the .cfg waits
    note = seq / (cfg.name + ".error.txt")
    assert note.is_file()
    text = note.read_text()
    assert f"waiting for {dat.name}" in text and "1 shot file(s) after it" in text
    assert not (seq / (later.name + ".verdict.json")).exists()
    (seq / dat.name).write_bytes(dat.read_bytes())
    for p in record_files["full_cfg"][2:]:
        (seq / p.name).write_bytes(p.read_bytes())
    assert [d["status"] for d in w.scan_once()] == ["done", "done"]
    assert not note.exists() and (seq / (later.name + ".verdict.json")).is_file()
    w.store.close()
