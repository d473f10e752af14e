"""Durable store of uploaded records, comparisons, test sequences and an audit log.

One embedded SQLite database (write-ahead log, ``synchronous=FULL``) under a data folder, and the raw
uploaded files kept content-addressed beside it (``blobs/ab/abcdef....cfg``, named by their SHA-256).
The service writes a shot's files and commits its row *before* it answers 2xx, so an answered shot is
never lost, even if the process is killed right after. Nothing is ever deleted.

Identifiers are derived from content where that makes re-posting idempotent: a stored record is keyed
by the digest of its files, a comparison by the digests of its two records and the model used.

The schema carries a version (``PRAGMA user_version``) and is brought up to date by the ordered
:data:`MIGRATIONS` when a store is opened.

Examples
--------
>>> import tempfile
>>> from detector.store import Store
>>> with tempfile.TemporaryDirectory() as d:
...     st = Store(d)
...     rec = st.put_record([("shot.csv", b"time_s,voltage_kV\\n0,1\\n")])
...     st.integrity_check(), rec.files[0].suffix
('ok', '.csv')
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as _dt
import hashlib
import json
import os
import re
import secrets
import sqlite3
import tempfile
import threading
import time
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

from ._validation import ShotcheckError

__all__ = ["Store", "StoredFile", "StoredRecord", "SCHEMA_VERSION", "MIGRATIONS", "ALLOWED_SUFFIXES"]

#: Suffixes a stored record file may have (the format is chosen by suffix when it is read back).
ALLOWED_SUFFIXES = (".cfg", ".dat", ".inf", ".hdr", ".cff", ".csv", ".json")

#: COMTRADE companion files: stored with their .cfg, never a record on their own.
_COMPANIONS = (".dat", ".inf", ".hdr")

#: Ordered schema migrations; migration k brings the database from version k to k + 1.
MIGRATIONS: tuple[str, ...] = (
    # 0 -> 1: records, comparisons, sequences, shots, audit log
    """
    CREATE TABLE records (
        digest TEXT PRIMARY KEY,
        files_json TEXT NOT NULL,
        created_at TEXT NOT NULL
    );
    CREATE TABLE comparisons (
        id TEXT PRIMARY KEY,
        reference_digest TEXT NOT NULL REFERENCES records(digest),
        test_digest TEXT NOT NULL REFERENCES records(digest),
        reference_name TEXT NOT NULL,
        test_name TEXT NOT NULL,
        model_id TEXT NOT NULL,
        options_json TEXT NOT NULL DEFAULT '{}',
        status TEXT NOT NULL CHECK (status IN ('pending', 'done', 'failed')),
        verdict_json TEXT,
        error_json TEXT,
        created_at TEXT NOT NULL,
        updated_at TEXT NOT NULL
    );
    CREATE TABLE sequences (
        id TEXT PRIMARY KEY,
        unit_id TEXT NOT NULL,
        terminal TEXT NOT NULL,
        plan_json TEXT NOT NULL,
        meta_json TEXT NOT NULL DEFAULT '{}',
        created_at TEXT NOT NULL
    );
    CREATE TABLE shots (
        id TEXT PRIMARY KEY,
        sequence_id TEXT NOT NULL REFERENCES sequences(id),
        position INTEGER NOT NULL,
        record_digest TEXT NOT NULL REFERENCES records(digest),
        name TEXT NOT NULL,
        kind TEXT NOT NULL,
        level_percent REAL NOT NULL,
        role TEXT NOT NULL,
        waveshape_json TEXT NOT NULL,
        comparison_id TEXT REFERENCES comparisons(id),
        warnings_json TEXT NOT NULL DEFAULT '[]',
        created_at TEXT NOT NULL,
        UNIQUE (sequence_id, record_digest),
        UNIQUE (sequence_id, position)
    );
    CREATE TABLE audit (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        at TEXT NOT NULL,
        actor TEXT NOT NULL,
        action TEXT NOT NULL,
        object_id TEXT,
        detail_json TEXT NOT NULL DEFAULT '{}'
    );
    CREATE INDEX comparisons_status ON comparisons(status);
    """,
    # 1 -> 2: watch-folder bookkeeping (one row per file and content)
    """
    CREATE TABLE watched_files (
        rel_path TEXT NOT NULL,
        sha256 TEXT NOT NULL,
        status TEXT NOT NULL CHECK (status IN ('processing', 'done', 'failed')),
        attempts INTEGER NOT NULL DEFAULT 1,
        result_json TEXT,
        updated_at TEXT NOT NULL,
        PRIMARY KEY (rel_path, sha256)
    );
    CREATE INDEX audit_object ON audit(object_id);
    """,
)

#: Schema version a store has after opening.
SCHEMA_VERSION = len(MIGRATIONS)


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="milliseconds")


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


@dataclasses.dataclass(frozen=True)
class StoredFile:
    """One stored file of a record.

    Attributes
    ----------
    suffix : str
        Lower-case suffix (``'.cfg'``, ``'.dat'``, ``'.cff'``, ``'.csv'``, ``'.json'``).
    sha256 : str
        Content digest; the file lives at ``blobs/<sha256[:2]>/<sha256><suffix>``.
    size_bytes : int
    name : str
        File name as the client gave it; shown to people, never used as a path.
    """

    suffix: str
    sha256: str
    size_bytes: int
    name: str


@dataclasses.dataclass(frozen=True)
class StoredRecord:
    """The files of one record (a CSV, a ``.cff``, a ``.cfg`` + ``.dat`` pair, or a JSON document).

    Attributes
    ----------
    digest : str
        Digest of the suffixes and file digests: the same content gives the same digest.
    files : tuple of StoredFile
    """

    digest: str
    files: tuple[StoredFile, ...]

    @property
    def name(self) -> str:
        """Display name: the client's name of the main file."""
        main = next((f for f in self.files if f.suffix not in _COMPANIONS), self.files[0])
        return main.name


class Store:
    """SQLite (WAL) store under a data folder, safe for several threads and processes.

    Parameters
    ----------
    data_dir : str or Path
        Folder holding ``shotcheck.sqlite3`` and ``blobs/``; created if missing.
    timeout_s : float
        How long a writer waits for another writer's lock [s].

    Raises
    ------
    ShotcheckError
        If the folder cannot be created or the database is newer than this code.
    """

    DB_NAME = "shotcheck.sqlite3"

    def __init__(self, data_dir: str | os.PathLike, *, timeout_s: float = 30.0):
        self.data_dir = Path(data_dir)
        try:
            self.blobs_dir.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise ShotcheckError(f"{self.data_dir}: cannot create the data folder ({exc.strerror})") from None
        self._lock = threading.RLock()
        self._conn = sqlite3.connect(
            self.db_path, timeout=timeout_s, isolation_level=None, check_same_thread=False
        )
        self._conn.row_factory = sqlite3.Row
        self._write_ahead_log(timeout_s)
        self._conn.execute("PRAGMA synchronous=FULL")
        self._conn.execute("PRAGMA foreign_keys=ON")
        self._migrate()

    # ---- plumbing -------------------------------------------------------------------------------
    def _write_ahead_log(self, timeout_s: float) -> None:
        """Put the database in WAL mode, waiting up to ``timeout_s`` [s] for another connection's write.

        The mode is a property of the file, so only the first opening converts it. SQLite refuses the
        conversion at once ("database is locked") while another connection holds a write lock, without
        calling the busy handler that the connection's timeout sets: two service workers opening a new
        data folder together could fail to start. The conversion is retried until the timeout.
        """
        deadline = time.monotonic() + timeout_s
        pause = 0.005
        while True:
            try:
                mode = self._conn.execute("PRAGMA journal_mode").fetchone()[0]
                if mode.lower() != "wal":  # the pragma answers the mode it is in; refused: the old one
                    mode = self._conn.execute("PRAGMA journal_mode=WAL").fetchone()[0]
                if mode.lower() == "wal":
                    return
            except sqlite3.OperationalError as exc:
                if "locked" not in str(exc):
                    raise
            if time.monotonic() + pause > deadline:
                raise ShotcheckError(f"{self.db_path}: another process kept the database locked for "
                                     f"{timeout_s:g} s; it could not be put in WAL mode")
            time.sleep(pause)
            pause = min(2 * pause, 0.1)

    @property
    def db_path(self) -> Path:
        """Path of the SQLite database file."""
        return self.data_dir / self.DB_NAME

    @property
    def blobs_dir(self) -> Path:
        """Folder of the content-addressed files."""
        return self.data_dir / "blobs"

    def close(self) -> None:
        """Close the database connection."""
        with self._lock:
            self._conn.close()

    @contextlib.contextmanager
    def _tx(self) -> Iterator[sqlite3.Connection]:
        """One write transaction (BEGIN IMMEDIATE ... COMMIT), serialised within the process."""
        with self._lock:
            self._conn.execute("BEGIN IMMEDIATE")
            try:
                yield self._conn
            except BaseException:
                self._conn.execute("ROLLBACK")
                raise
            self._conn.execute("COMMIT")

    def _query(self, sql: str, args: Sequence[Any] = ()) -> list[sqlite3.Row]:
        with self._lock:
            return self._conn.execute(sql, tuple(args)).fetchall()

    def _migrate(self) -> None:
        with self._tx() as c:
            version = c.execute("PRAGMA user_version").fetchone()[0]
            if version > SCHEMA_VERSION:
                raise ShotcheckError(
                    f"{self.db_path}: schema version {version} is newer than this shotcheck's "
                    f"({SCHEMA_VERSION}); upgrade shotcheck"
                )
            for k in range(version, SCHEMA_VERSION):
                for stmt in MIGRATIONS[k].split(";"):
                    if stmt.strip():
                        c.execute(stmt)
                c.execute(f"PRAGMA user_version = {k + 1}")

    @property
    def schema_version(self) -> int:
        """Schema version of the open database."""
        return int(self._query("PRAGMA user_version")[0][0])

    def integrity_check(self) -> str:
        """Run SQLite's ``PRAGMA integrity_check``; returns ``'ok'`` for a sound database."""
        rows = self._query("PRAGMA integrity_check")
        return "; ".join(str(r[0]) for r in rows)

    # ---- files ----------------------------------------------------------------------------------
    def blob_path(self, sha256: str, suffix: str) -> Path:
        """Where the file with this digest and suffix is kept."""
        if len(sha256) != 64 or any(ch not in "0123456789abcdef" for ch in sha256):
            raise ShotcheckError(f"not a SHA-256 digest: {sha256!r}")
        if suffix not in ALLOWED_SUFFIXES:
            raise ShotcheckError(f"suffix {suffix!r} is not one of {', '.join(ALLOWED_SUFFIXES)}")
        return self.blobs_dir / sha256[:2] / f"{sha256}{suffix}"

    def _write_blob(self, data: bytes, suffix: str) -> str:
        sha = _sha256(data)
        dest = self.blob_path(sha, suffix)
        if dest.is_file() and dest.stat().st_size == len(data):
            return sha
        dest.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=dest.parent, prefix=".incoming-")
        try:
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, dest)
        except BaseException:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
            raise
        dfd = os.open(dest.parent, os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)
        return sha

    def put_record(self, files: Sequence[tuple[str, bytes]]) -> StoredRecord:
        """Store the files of one record (durably) and return its content-derived handle.

        Parameters
        ----------
        files : sequence of (name, content)
            The client's file name (only its suffix is used, to pick the format) and the bytes.

        Returns
        -------
        StoredRecord

        Raises
        ------
        ShotcheckError
            For a suffix that is not a record format.
        """
        stored = []
        for name, data in files:
            suffix = Path(str(name)).suffix.lower()
            if suffix not in ALLOWED_SUFFIXES:
                raise ShotcheckError(
                    f"file {name!r}: unsupported file type {suffix or '(none)'!r}; "
                    f"expected one of {', '.join(ALLOWED_SUFFIXES)}"
                )
            sha = self._write_blob(data, suffix)
            stored.append(StoredFile(suffix, sha, len(data), str(name)))
        stored.sort(key=lambda f: (f.suffix, f.sha256))
        digest = _sha256(json.dumps([[f.suffix, f.sha256] for f in stored]).encode())
        rec = StoredRecord(digest, tuple(stored))
        with self._tx() as c:
            c.execute(
                "INSERT OR IGNORE INTO records(digest, files_json, created_at) VALUES (?, ?, ?)",
                (digest, json.dumps([dataclasses.asdict(f) for f in stored]), _now()),
            )
        return rec

    def get_record(self, digest: str) -> StoredRecord | None:
        """Return a stored record by digest, or None."""
        rows = self._query("SELECT files_json FROM records WHERE digest = ?", (digest,))
        if not rows:
            return None
        return StoredRecord(digest, tuple(StoredFile(**f) for f in json.loads(rows[0][0])))

    @contextlib.contextmanager
    def materialise(self, record: StoredRecord) -> Iterator[Path]:
        """Yield the path of the record's main file in a private temporary folder.

        The files get fixed names (``record.cfg`` + ``record.dat``...) so a COMTRADE pair is found and
        no client-chosen name ever becomes a path.
        """
        with tempfile.TemporaryDirectory(prefix="shotcheck-") as tmp:
            main = None
            for f in record.files:
                dest = Path(tmp) / f"record{f.suffix}"
                src = self.blob_path(f.sha256, f.suffix)
                try:
                    os.link(src, dest)
                except OSError:
                    dest.write_bytes(src.read_bytes())
                if f.suffix not in _COMPANIONS:
                    main = dest
            if main is None:
                raise ShotcheckError("a .dat/.inf/.hdr file alone is not a record; send its .cfg with it")
            yield main

    # ---- comparisons ----------------------------------------------------------------------------
    @staticmethod
    def comparison_id(reference_digest: str, test_digest: str, model_id: str, options: dict | None = None) -> str:
        """Content-derived id of a comparison (same inputs and model -> same id)."""
        key = json.dumps([reference_digest, test_digest, model_id, options or {}], sort_keys=True)
        return "c" + _sha256(key.encode())[:31]

    def begin_comparison(
        self,
        reference: StoredRecord,
        test: StoredRecord,
        model_id: str,
        *,
        options: dict | None = None,
        actor: str = "service",
    ) -> tuple[str, dict[str, Any] | None]:
        """Register a comparison as pending (committed) unless it already exists.

        Returns
        -------
        comparison_id : str
        existing : dict or None
            The stored row (see :meth:`get_comparison`) if this comparison was registered before.
        """
        cid = self.comparison_id(reference.digest, test.digest, model_id, options)
        with self._tx() as c:
            row = c.execute("SELECT id FROM comparisons WHERE id = ?", (cid,)).fetchone()
            if row is None:
                now = _now()
                c.execute(
                    "INSERT INTO comparisons(id, reference_digest, test_digest, reference_name, test_name, "
                    "model_id, options_json, status, created_at, updated_at) VALUES (?,?,?,?,?,?,?,?,?,?)",
                    (cid, reference.digest, test.digest, reference.name, test.name, model_id,
                     json.dumps(options or {}, sort_keys=True), "pending", now, now),
                )
                self._audit(c, actor, "comparison.created", cid, {"reference": reference.name, "test": test.name})
                return cid, None
        return cid, self.get_comparison(cid)

    def finish_comparison(self, cid: str, verdict: dict[str, Any], *, actor: str = "service") -> None:
        """Store the verdict of a comparison (committed before the caller answers)."""
        with self._tx() as c:
            c.execute(
                "UPDATE comparisons SET status='done', verdict_json=?, error_json=NULL, updated_at=? WHERE id=?",
                (json.dumps(verdict), _now(), cid),
            )
            self._audit(c, actor, "comparison.done", cid, {"fault_indicated": verdict.get("fault_indicated")})

    def fail_comparison(self, cid: str, error: dict[str, Any], *, actor: str = "service") -> None:
        """Store why a comparison could not be made (the input was unusable)."""
        with self._tx() as c:
            c.execute(
                "UPDATE comparisons SET status='failed', error_json=?, updated_at=? WHERE id=?",
                (json.dumps(error), _now(), cid),
            )
            self._audit(c, actor, "comparison.failed", cid, error)

    def get_comparison(self, cid: str) -> dict[str, Any] | None:
        """Return a comparison as a dict (id, status, names, verdict or error, times), or None."""
        rows = self._query("SELECT * FROM comparisons WHERE id = ?", (cid,))
        if not rows:
            return None
        r = rows[0]
        return {
            "id": r["id"],
            "status": r["status"],
            "reference_digest": r["reference_digest"],
            "test_digest": r["test_digest"],
            "reference_name": r["reference_name"],
            "test_name": r["test_name"],
            "model_id": r["model_id"],
            "options": json.loads(r["options_json"]),
            "verdict": None if r["verdict_json"] is None else json.loads(r["verdict_json"]),
            "error": None if r["error_json"] is None else json.loads(r["error_json"]),
            "created_at": r["created_at"],
            "updated_at": r["updated_at"],
        }

    def pending_comparisons(self) -> list[str]:
        """Ids of comparisons registered but never finished (e.g. after a crash), oldest first."""
        return [r[0] for r in self._query("SELECT id FROM comparisons WHERE status='pending' ORDER BY created_at")]

    def count_comparisons(self) -> dict[str, int]:
        """Number of comparisons by status."""
        return {r[0]: int(r[1]) for r in self._query("SELECT status, COUNT(*) FROM comparisons GROUP BY status")}

    # ---- sequences ------------------------------------------------------------------------------
    def create_sequence(
        self, unit_id: str, terminal: str, plan: list[dict[str, Any]], meta: dict[str, Any] | None = None,
        *, actor: str = "service",
    ) -> str:
        """Create a test sequence and return its id."""
        with self._tx() as c:
            return self._insert_sequence(c, unit_id, terminal, plan, meta or {}, actor, {})

    def _insert_sequence(self, c: sqlite3.Connection, unit_id: str, terminal: str, plan: list[dict[str, Any]],
                         meta: dict[str, Any], actor: str, audit_extra: dict[str, Any]) -> str:
        """Insert a new sequence row and its audit entry inside the open transaction ``c``; return its id."""
        sid = "s" + secrets.token_hex(12)
        c.execute(
            "INSERT INTO sequences(id, unit_id, terminal, plan_json, meta_json, created_at) VALUES (?,?,?,?,?,?)",
            (sid, unit_id, terminal, json.dumps(plan), json.dumps(meta), _now()),
        )
        self._audit(c, actor, "sequence.created", sid, {"unit_id": unit_id, "terminal": terminal, **audit_extra})
        return sid

    def create_sequence_once(
        self, key: str, unit_id: str, terminal: str, plan: list[dict[str, Any]], meta: dict[str, Any] | None = None,
        *, actor: str = "service",
    ) -> tuple[str, bool]:
        """Create a sequence unless one was created with the same idempotency ``key``.

        The look-up and the insert run in one write transaction, so that two requests with one key (from
        any process of the service) create one sequence. The key is kept in the metadata as
        ``idempotency_key``.

        Returns
        -------
        sid : str
            The new or the earlier sequence's id.
        created : bool
            False if the key had been used before.

        Raises
        ------
        ShotcheckError
            The key was used for a sequence of another unit, terminal or plan.
        """
        meta = {**(meta or {}), "idempotency_key": key}
        with self._tx() as c:
            row = c.execute("SELECT id, unit_id, terminal, plan_json FROM sequences "
                            "WHERE json_extract(meta_json, '$.idempotency_key') = ? ORDER BY created_at LIMIT 1",
                            (key,)).fetchone()
            if row is not None:
                if (row["unit_id"], row["terminal"], json.loads(row["plan_json"])) != (unit_id, terminal, plan):
                    raise ShotcheckError(f"Idempotency-Key {key!r} was used for another sequence ({row['id']}: "
                                         f"unit {row['unit_id']!r}, terminal {row['terminal']!r}); use a new key")
                return str(row["id"]), False
            return self._insert_sequence(c, unit_id, terminal, plan, meta, actor, {"idempotency_key": key}), True

    def get_sequence(self, sid: str) -> dict[str, Any] | None:
        """Return a sequence (id, unit_id, terminal, plan, meta, created_at) or None."""
        rows = self._query("SELECT * FROM sequences WHERE id = ?", (sid,))
        if not rows:
            return None
        r = rows[0]
        return {"id": r["id"], "unit_id": r["unit_id"], "terminal": r["terminal"],
                "plan": json.loads(r["plan_json"]), "meta": json.loads(r["meta_json"]), "created_at": r["created_at"]}

    def find_sequence(self, meta_key: str, value: str) -> str | None:
        """Id of the oldest sequence whose metadata has ``meta_key`` equal to ``value``, or None."""
        if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", meta_key):
            raise ShotcheckError(f"metadata key {meta_key!r} must be an identifier")
        rows = self._query(f"SELECT id FROM sequences WHERE json_extract(meta_json, '$.{meta_key}') = ? "
                           "ORDER BY created_at LIMIT 1", (value,))
        return rows[0][0] if rows else None

    def find_shot(self, sid: str, record_digest: str) -> dict[str, Any] | None:
        """The shot of a sequence holding this record, or None."""
        rows = self._query("SELECT * FROM shots WHERE sequence_id=? AND record_digest=?", (sid, record_digest))
        return self._shot(rows[0]) if rows else None

    def add_shot(
        self, sid: str, record: StoredRecord, *, kind: str, level_percent: float, role: str,
        waveshape: dict[str, Any], warnings: list[str], actor: str = "service", expect_position: int | None = None,
    ) -> tuple[dict[str, Any], bool]:
        """Append a shot to a sequence (idempotent on the record's content).

        ``expect_position`` guards against another process having added a shot since the caller decided
        the role: if the new shot would not land there, :class:`ShotcheckError` is raised and nothing is
        written (the caller re-reads the sequence and decides again).

        Returns
        -------
        shot : dict
        created : bool
            False if the same record was already a shot of this sequence (that shot is returned).
        """
        with self._tx() as c:
            row = c.execute("SELECT * FROM shots WHERE sequence_id=? AND record_digest=?",
                            (sid, record.digest)).fetchone()
            if row is not None:
                return self._shot(row), False
            pos = c.execute("SELECT COALESCE(MAX(position), 0) + 1 FROM shots WHERE sequence_id=?",
                            (sid,)).fetchone()[0]
            if expect_position is not None and pos != expect_position:
                raise ShotcheckError(f"sequence {sid} changed meanwhile: next position {pos}, expected "
                                     f"{expect_position}")
            shot_id = f"{sid}-{pos:03d}"
            c.execute(
                "INSERT INTO shots(id, sequence_id, position, record_digest, name, kind, level_percent, role, "
                "waveshape_json, warnings_json, created_at) VALUES (?,?,?,?,?,?,?,?,?,?,?)",
                (shot_id, sid, pos, record.digest, record.name, kind, float(level_percent), role,
                 json.dumps(waveshape), json.dumps(warnings), _now()),
            )
            self._audit(c, actor, "shot.added", shot_id, {"kind": kind, "level_percent": level_percent, "role": role})
            row = c.execute("SELECT * FROM shots WHERE id=?", (shot_id,)).fetchone()
        return self._shot(row), True

    def link_shot(self, shot_id: str, comparison_id: str) -> None:
        """Record which comparison judged a shot."""
        with self._tx() as c:
            c.execute("UPDATE shots SET comparison_id=? WHERE id=?", (comparison_id, shot_id))

    def shots_without_comparison(self) -> list[dict[str, Any]]:
        """Shots other than references that have no comparison linked (left so by a crash)."""
        return [self._shot(r) for r in self._query(
            "SELECT * FROM shots WHERE role != 'reference' AND comparison_id IS NULL ORDER BY sequence_id, position")]

    def list_shots(self, sid: str) -> list[dict[str, Any]]:
        """Shots of a sequence in the order they were posted."""
        return [self._shot(r) for r in self._query(
            "SELECT * FROM shots WHERE sequence_id=? ORDER BY position", (sid,))]

    @staticmethod
    def _shot(r: sqlite3.Row) -> dict[str, Any]:
        return {"id": r["id"], "sequence_id": r["sequence_id"], "position": r["position"],
                "record_digest": r["record_digest"], "name": r["name"], "kind": r["kind"],
                "level_percent": r["level_percent"], "role": r["role"],
                "waveshape": json.loads(r["waveshape_json"]), "comparison_id": r["comparison_id"],
                "warnings": json.loads(r["warnings_json"]), "created_at": r["created_at"]}

    # ---- watch folder ---------------------------------------------------------------------------
    def watch_status(self, rel_path: str, sha256: str) -> str | None:
        """Status of a watched file with this content ('processing', 'done', 'failed') or None."""
        rows = self._query("SELECT status FROM watched_files WHERE rel_path=? AND sha256=?", (rel_path, sha256))
        return rows[0][0] if rows else None

    def watch_claim(self, rel_path: str, sha256: str) -> bool:
        """Mark a watched file as being processed; False if it is already done or failed."""
        with self._tx() as c:
            row = c.execute("SELECT status FROM watched_files WHERE rel_path=? AND sha256=?",
                            (rel_path, sha256)).fetchone()
            if row is None:
                c.execute("INSERT INTO watched_files(rel_path, sha256, status, updated_at) VALUES (?,?,?,?)",
                          (rel_path, sha256, "processing", _now()))
                return True
            if row[0] == "processing":  # interrupted before: try again
                c.execute("UPDATE watched_files SET attempts = attempts + 1, updated_at=? "
                          "WHERE rel_path=? AND sha256=?", (_now(), rel_path, sha256))
                return True
            return False

    def watch_finish(self, rel_path: str, sha256: str, status: str, result: dict[str, Any],
                     *, actor: str = "watcher") -> None:
        """Mark a watched file done or failed (the single commit that makes it processed)."""
        if status not in ("done", "failed"):
            raise ShotcheckError(f"status must be 'done' or 'failed', got {status!r}")
        with self._tx() as c:
            c.execute("UPDATE watched_files SET status=?, result_json=?, updated_at=? WHERE rel_path=? AND sha256=?",
                      (status, json.dumps(result), _now(), rel_path, sha256))
            self._audit(c, actor, f"watch.{status}", rel_path, {"sha256": sha256})

    def watched_files(self) -> list[dict[str, Any]]:
        """All watched-file rows."""
        return [dict(r) for r in self._query("SELECT * FROM watched_files ORDER BY rel_path")]

    # ---- audit ----------------------------------------------------------------------------------
    @staticmethod
    def _audit(c: sqlite3.Connection, actor: str, action: str, object_id: str | None, detail: dict) -> None:
        c.execute("INSERT INTO audit(at, actor, action, object_id, detail_json) VALUES (?,?,?,?,?)",
                  (_now(), actor, action, object_id, json.dumps(detail, default=str)))

    def audit(self, action: str, object_id: str | None = None, detail: dict | None = None,
              *, actor: str = "service") -> None:
        """Append an entry to the audit log."""
        with self._tx() as c:
            self._audit(c, actor, action, object_id, detail or {})

    def audit_log(self, object_id: str | None = None) -> list[dict[str, Any]]:
        """Audit entries, oldest first, optionally for one object."""
        if object_id is None:
            rows = self._query("SELECT * FROM audit ORDER BY seq")
        else:
            rows = self._query("SELECT * FROM audit WHERE object_id=? ORDER BY seq", (object_id,))
        return [{**dict(r), "detail": json.loads(r["detail_json"])} for r in rows]
