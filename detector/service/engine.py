"""The work behind the service and the watcher, free of any web framework.

:class:`Engine` ties the durable :class:`~detector.store.Store`, the loaded model and the domain
functions together: store the uploaded files, register the comparison, read the records, compare,
commit the verdict, and only then return. The HTTP routes and :mod:`detector.watch` call it.
"""

from __future__ import annotations

import collections
import functools
import hashlib
import json
import math
import threading
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .._validation import ShotcheckError
from ..record import Channel, Record
from ..sequence import (
    REDUCED_KINDS,
    check_declared,
    check_level,
    level_warning,
    parse_plan,
    reference_of,
    role_for,
    summarize,
)
from ..store import Store, StoredRecord
from ..units import parse_unit

__all__ = ["Engine", "InputError", "record_from_json", "files_of_field", "MAX_JSON_SAMPLES"]

#: Largest number of samples per channel a JSON record may carry.
MAX_JSON_SAMPLES = 2_000_000


class _SequenceMoved(Exception):
    """A shot was added to the sequence by another process between reading it and writing."""


class InputError(ShotcheckError):
    """A request the user can fix: carries an error code and the offending field.

    Parameters
    ----------
    message : str
    field : str or None
        Request field concerned (``'reference'``, ``'test.channels[1].unit'``...).
    code : str
        Stable machine-readable error code.
    status : int
        HTTP status the service answers with (4xx).
    """

    def __init__(self, message: str, *, field: str | None = None, code: str = "invalid_input", status: int = 422):
        super().__init__(message)
        self.field = field
        self.code = code
        self.status = status

    def to_dict(self) -> dict[str, Any]:
        """``{'error', 'detail', 'field'}`` (the service's error shape)."""
        return {"error": self.code, "detail": str(self), "field": self.field}


def _json_number(x: Any, field: str) -> float:
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        raise InputError(f"must be a number, got {type(x).__name__}", field=field)
    return float(x)


#: Keys of a record and of a channel in the JSON form (others are refused, not ignored).
_RECORD_KEYS = ("sample_interval_s", "start_time_s", "channels", "meta")
_CHANNEL_KEYS = ("name", "unit", "quantity", "samples")


def record_from_json(doc: Any, *, name: str = "record") -> Record:
    """Build a record from its JSON form.

    Parameters
    ----------
    doc : dict
        ``{"sample_interval_s": 1e-8, "start_time_s": 0.0, "channels": [{"name": "U", "unit": "kV",
        "samples": [...]}, {"name": "I_N", "unit": "A", "samples": [...]}], "meta": {...}}``. Units
        are those of :func:`detector.units.parse_unit` (V, kV, MV, A, mA, kA...); samples are scaled to
        SI. ``quantity`` is optional and must agree with the unit when given.
    name : str
        Field name for messages (``'reference'`` or ``'test'``).

    Returns
    -------
    Record

    Raises
    ------
    InputError, RecordError
        Naming the field and what was expected.
    """
    if not isinstance(doc, Mapping):
        raise InputError(f"expected a JSON object with sample_interval_s and channels, got {type(doc).__name__}",
                         field=name)
    for key in ("sample_interval_s", "channels"):
        if key not in doc:
            raise InputError(f"missing '{key}'", field=f"{name}.{key}")
    # a misspelt key (start_time for start_time_s) would otherwise be dropped and its default used
    unknown = sorted(str(k) for k in doc if k not in _RECORD_KEYS)
    if unknown:
        raise InputError(f"unknown key {unknown[0]!r}; a record has {', '.join(_RECORD_KEYS)}",
                         field=f"{name}.{unknown[0]}")
    dt = _json_number(doc["sample_interval_s"], f"{name}.sample_interval_s")
    t0 = _json_number(doc.get("start_time_s", 0.0), f"{name}.start_time_s")
    chans_in = doc["channels"]
    if not isinstance(chans_in, list) or not chans_in:
        raise InputError("expected a non-empty list of channels", field=f"{name}.channels")
    chans = []
    for k, ch in enumerate(chans_in):
        f = f"{name}.channels[{k}]"
        if not isinstance(ch, Mapping):
            raise InputError("expected an object with name, unit and samples", field=f)
        unknown = sorted(str(k) for k in ch if k not in _CHANNEL_KEYS)
        if unknown:
            raise InputError(f"unknown key {unknown[0]!r}; a channel has {', '.join(_CHANNEL_KEYS)}",
                             field=f"{f}.{unknown[0]}")
        unit = ch.get("unit")
        if not isinstance(unit, str):
            raise InputError("missing or non-text unit (e.g. 'kV', 'A')", field=f"{f}.unit")
        quantity, factor = parse_unit(unit, path=None, field=f"{f}.unit")
        q = ch.get("quantity")
        if q is not None and q != quantity:
            raise InputError(f"quantity {q!r} contradicts unit {unit!r} (a {quantity} unit)", field=f"{f}.quantity")
        samples = ch.get("samples")
        if not isinstance(samples, list):
            raise InputError("expected a list of numbers", field=f"{f}.samples")
        if len(samples) > MAX_JSON_SAMPLES:
            raise InputError(f"{len(samples)} samples exceed the limit of {MAX_JSON_SAMPLES}", field=f"{f}.samples",
                             status=413, code="too_large")
        bad = next((j for j, x in enumerate(samples) if isinstance(x, bool) or not isinstance(x, (int, float))), None)
        if bad is not None:  # numpy would read null as NaN and true as 1
            raise InputError(f"samples must all be numbers (no null, text, true/false or nested lists); sample {bad} "
                             f"is {json.dumps(samples[bad])[:40]}", field=f"{f}.samples[{bad}]")
        try:
            arr = np.asarray(samples, dtype=np.float64)
        except (TypeError, ValueError, OverflowError):
            raise InputError("samples must all be numbers (no null, text or nested lists)",
                             field=f"{f}.samples") from None
        if arr.ndim != 1:
            raise InputError("samples must be a flat list of numbers", field=f"{f}.samples")
        with np.errstate(over="ignore", invalid="ignore"):
            arr = arr * factor
        cname = ch.get("name", f"channel {k}")
        chans.append(Channel(str(cname), quantity, arr, source_unit=unit))
    meta = doc.get("meta", {})
    if not isinstance(meta, Mapping):
        raise InputError("expected an object", field=f"{name}.meta")
    return Record(start_time_s=t0, sample_interval_s=dt, channels=tuple(chans), meta=dict(meta), source=name)


def files_of_field(field: str, files: Sequence[tuple[str, bytes]]) -> list[tuple[str, bytes]]:
    """Check that the files sent under one field make one record.

    Accepted: one ``.csv``, one ``.cff``, one ``.json``, or a ``.cfg`` with its ``.dat`` (and, if the
    recorder wrote them, its ``.inf`` and ``.hdr``).

    Raises
    ------
    InputError
        Naming the field and what was expected.
    """
    if not files:
        raise InputError("no file sent; send a CSV, a .cff, or a .cfg and its .dat", field=field)
    suffixes = sorted(Path(n).suffix.lower() for n, _ in files)
    for n, data in files:
        if len(data) == 0 and Path(n).suffix.lower() not in (".inf", ".hdr"):
            raise InputError(f"file {n!r} is empty", field=field)
    if len(set(suffixes)) != len(suffixes):
        raise InputError(f"two files of the same type ({', '.join(suffixes)}) under one field", field=field)
    main = [s for s in suffixes if s not in (".inf", ".hdr")]
    if main == [".cfg", ".dat"]:
        # the parts of one COMTRADE record share its name: a .dat of another shot would be read under this
        # .cfg's header without a word (the same counts, another shot's samples)
        stems = {Path(n).stem.lower() for n, _ in files}
        if len(stems) > 1:
            shown = ", ".join(repr(n) for n, _ in files)
            raise InputError(f"files {shown} are not the parts of one record: a .cfg, its .dat (and .inf, .hdr) "
                             "have the same name before the extension", field=field)
        return list(files)
    if suffixes in ([".csv"], [".cff"], [".json"]):
        return list(files)
    if suffixes == [".cfg"]:
        raise InputError("a .cfg file needs its .dat file under the same field", field=field)
    if suffixes == [".dat"]:
        raise InputError("a .dat file needs its .cfg file under the same field", field=field)
    shown = ", ".join(repr(n) for n, _ in files)
    raise InputError(
        f"files {shown} do not make one record; send a CSV, a .cff, or a .cfg and its .dat "
        "(supported: .cfg with .dat, .cff, .csv, .json)",
        field=field,
    )


def _model_id(path: Path | None, card: Mapping[str, Any]) -> str:
    if path is not None and path.is_file():
        h = hashlib.sha256(path.read_bytes()).hexdigest()[:16]
    else:
        h = hashlib.sha256(json.dumps(dict(card), sort_keys=True, default=str).encode()).hexdigest()[:16]
    return f"{card.get('name', 'model')}@{h}"


@functools.lru_cache(maxsize=1)
def _thread_controller() -> Any:
    """The process's native thread pools, found once (finding them costs ~2 ms), with BLAS set to one thread.

    The service works on several requests in parallel (threads and worker processes); a BLAS thread pool
    on top of that only oversubscribes the cores. BLAS thread counts are process-wide, so the limit is set
    once for the life of the process rather than around each comparison (restoring it at the end of one
    comparison would change it under another that is still running).
    """
    import sklearn.ensemble  # noqa: F401  (loads scikit-learn's OpenMP runtime before the scan)
    from threadpoolctl import ThreadpoolController

    controller = ThreadpoolController()
    controller.limit(limits=1, user_api="blas")  # kept: not used as a context, so never restored
    return controller


def _single_threaded_compare(reference: Record, test: Record, model: Any, reference_shape: Any = None) -> Any:
    """``detector.compare.compare`` with OpenMP limited to one thread in the calling thread.

    BLAS is already single-threaded in a service process (:func:`_thread_controller`); OpenMP thread
    counts are per calling thread, so that limit is set and restored around each comparison.
    """
    from ..compare import compare

    with _thread_controller().limit(limits=1, user_api="openmp"):
        return compare(reference, test, model=model, reference_shape=reference_shape)


#: Reference records (read, and their IEC 60060-1 evaluation) kept per process: every full-level shot
#: of a sequence is compared with the same reference. At most this many, and at most
#: :data:`REFERENCE_CACHE_BYTES` of samples (uploads may be large).
REFERENCE_CACHE_SIZE = 8
REFERENCE_CACHE_BYTES = 256 * 2**20


def _record_bytes(record: Record) -> int:
    return sum(int(c.samples.nbytes) for c in record.channels)


def _finite_or_none(obj: Any) -> Any:
    """Replace NaN/inf (not valid JSON) by None throughout a JSON-ready structure."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _finite_or_none(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite_or_none(v) for v in obj]
    return obj


class Engine:
    """Store + model + domain functions, for one process.

    Parameters
    ----------
    store : Store
    model : ShotModel
        Loaded once (see :func:`detector.compare.default_model` / :func:`detector.model.load_model`).
    model_path : Path or None
        File the model came from (its digest identifies the model in stored comparisons).
    """

    def __init__(self, store: Store, model: Any, model_path: Path | None = None):
        self.store = store
        self.model = model
        self.model_path = model_path
        self.model_id = _model_id(model_path, getattr(model, "card", {}))
        self._seq_locks: dict[str, threading.Lock] = {}
        self._seq_guard = threading.Lock()
        self._references: collections.OrderedDict[tuple[Any, ...], tuple[Record, Any]] = collections.OrderedDict()
        self._references_guard = threading.Lock()

    def reference(self, rec: StoredRecord, *, field: str = "reference", voltage_channel: str | None = None,
                  current_channel: str | None = None) -> tuple[Record, Any]:
        """A stored reference record read, with its wave shape (None if it cannot be evaluated).

        Kept for the next comparisons with the same reference (the last :data:`REFERENCE_CACHE_SIZE`,
        within :data:`REFERENCE_CACHE_BYTES` of samples; a larger record is not kept).
        Stored records never change (their digest is their content), so the key is the digest, the
        client's file name (it appears in messages) and the channel choice.

        Raises
        ------
        InputError
            As :meth:`read` (failures are not kept).
        """
        from ..waveshape import evaluate_waveshape

        key = (rec.digest, rec.name, field, voltage_channel, current_channel)
        with self._references_guard:
            hit = self._references.get(key)
            if hit is not None:
                self._references.move_to_end(key)
                return hit
        r = self.read(rec, field=field, voltage_channel=voltage_channel, current_channel=current_channel)
        try:
            shape = evaluate_waveshape(r)
        except ShotcheckError:
            shape = None  # compare() evaluates it again and says why in its warnings
        if _record_bytes(r) <= REFERENCE_CACHE_BYTES:
            with self._references_guard:
                self._references[key] = (r, shape)
                self._references.move_to_end(key)
                while (len(self._references) > REFERENCE_CACHE_SIZE
                       or sum(_record_bytes(v[0]) for v in self._references.values()) > REFERENCE_CACHE_BYTES):
                    self._references.popitem(last=False)
        return r, shape

    # ---- records --------------------------------------------------------------------------------
    def read(self, rec: StoredRecord, *, field: str, voltage_channel: str | None = None,
             current_channel: str | None = None) -> Record:
        """Read a stored record; errors name the client's file, never a server path.

        Raises
        ------
        InputError
        """
        from ..formats import read

        display = rec.name
        try:
            with self.store.materialise(rec) as path:
                try:
                    if path.suffix == ".json":
                        try:
                            doc = json.loads(path.read_bytes())
                        except (ValueError, UnicodeDecodeError, RecursionError) as exc:
                            raise InputError(f"{display}: not valid JSON ({exc})", field=field) from None
                        try:
                            r = record_from_json(doc, name=field)
                            if voltage_channel is not None or current_channel is not None:
                                r = r.select(voltage_channel, current_channel)
                        except InputError:
                            raise
                        except ShotcheckError as exc:
                            raise InputError(str(exc), field=getattr(exc, "field", None) or field,
                                             code="invalid_record") from None
                        return r
                    r = read(path, voltage_channel=voltage_channel, current_channel=current_channel)
                    return r.replace(source=display)
                except InputError:
                    raise
                except ShotcheckError as exc:
                    msg = str(exc)
                    for comp in (".dat", ".inf", ".hdr"):
                        msg = msg.replace(str(path.with_suffix(comp)), display.rsplit(".", 1)[0] + comp)
                    msg = msg.replace(str(path), display).replace(str(path.parent), "(upload)")
                    fld = getattr(exc, "field", None)
                    raise InputError(msg, field=f"{field}.{fld}" if fld else field, code="invalid_record") from None
        except OSError as exc:  # the stored file vanished: a server-side fault, not the client's
            raise RuntimeError(f"stored file of {display} unreadable: {exc}") from exc

    # ---- comparisons ----------------------------------------------------------------------------
    def compare(
        self, reference: StoredRecord, test: StoredRecord, *, options: Mapping[str, Any] | None = None,
        actor: str = "service",
    ) -> tuple[dict[str, Any], bool]:
        """Compare two stored records, committing the verdict before returning.

        Parameters
        ----------
        reference, test : StoredRecord
        options : mapping, optional
            ``voltage_channel`` / ``current_channel`` names applied to both records.
        actor : str
            Who asked (for the audit log).

        Returns
        -------
        row : dict
            The stored comparison (see :meth:`detector.store.Store.get_comparison`).
        created : bool
            False if the same comparison had been answered before (idempotent re-post).

        Raises
        ------
        InputError
            The records are unusable (the failure is stored too).
        """
        opts = {k: str(v) for k, v in (options or {}).items() if v is not None}
        cid, existing = self.store.begin_comparison(reference, test, self.model_id, options=opts, actor=actor)
        if existing is not None and existing["status"] == "done":
            return existing, False
        if existing is not None and existing["status"] == "failed":
            e = existing["error"] or {}
            raise InputError(e.get("detail", "comparison failed"), field=e.get("field"),
                             code=e.get("error", "invalid_record"))
        self._run(cid, reference, test, opts, actor)
        row = self.store.get_comparison(cid)
        assert row is not None
        return row, existing is None

    def _run(self, cid: str, reference: StoredRecord, test: StoredRecord, opts: Mapping[str, str],
             actor: str) -> dict[str, Any]:
        ref = tst = None
        try:
            ref, ref_shape = self.reference(reference, field="reference", **opts)
            tst = self.read(test, field="test", **opts)
            verdict = _finite_or_none(_single_threaded_compare(ref, tst, self.model, ref_shape).to_dict())
        except InputError as exc:
            self.store.fail_comparison(cid, exc.to_dict(), actor=actor)
            raise
        except ShotcheckError as exc:
            # the comparison's own refusals name the record by its file: the field says which of the two
            fld, path = getattr(exc, "field", None), getattr(exc, "path", None)
            owners = [name for name, r in (("reference", ref), ("test", tst)) if r is not None and path is not None
                      and r.source == path]
            if fld and len(owners) == 1:
                fld = f"{owners[0]}.{fld}"
            err = InputError(str(exc), field=fld, code="invalid_record")
            self.store.fail_comparison(cid, err.to_dict(), actor=actor)
            raise err from None
        self.store.finish_comparison(cid, verdict, actor=actor)
        return verdict

    def verdict_object(self, cid: str) -> tuple[Any, dict[str, Any]]:
        """Recompute the full :class:`~detector.compare.Verdict` of a stored comparison (for reports)."""
        row = self.store.get_comparison(cid)
        if row is None or row["status"] != "done":
            raise InputError(f"no finished comparison {cid!r}", field="id", code="not_found", status=404)
        ref_rec = self.store.get_record(row["reference_digest"])
        test_rec = self.store.get_record(row["test_digest"])
        assert ref_rec is not None and test_rec is not None
        ref, ref_shape = self.reference(ref_rec, field="reference", **row["options"])
        tst = self.read(test_rec, field="test", **row["options"])
        return _single_threaded_compare(ref, tst, self.model, ref_shape), row

    def recover(self) -> int:
        """Finish what a crash left undone: pending comparisons, and shots stored without their comparison.

        Returns
        -------
        int
            Number of comparisons and shots finished.
        """
        n = 0
        for cid in self.store.pending_comparisons():
            row = self.store.get_comparison(cid)
            if row is None:
                continue
            ref = self.store.get_record(row["reference_digest"])
            tst = self.store.get_record(row["test_digest"])
            if ref is None or tst is None:
                self.store.fail_comparison(cid, {"error": "missing_record", "detail": "record files missing",
                                                 "field": None}, actor="recovery")
                continue
            try:
                self._run(cid, ref, tst, row["options"], "recovery")
            except InputError:
                pass
            n += 1
        for shot in self.store.shots_without_comparison():
            try:
                self._finish_shot(shot, {}, "recovery")
            except InputError:
                pass
            n += 1
        return n

    # ---- wave shape -----------------------------------------------------------------------------
    def waveshape(self, rec: StoredRecord, *, field: str = "record", voltage_channel: str | None = None,
                  kind: str | None = None) -> dict[str, Any]:
        """IEC 60060-1 parameters of a stored record (``WaveShape.to_dict()``)."""
        from ..waveshape import evaluate_waveshape

        r = self.read(rec, field=field, voltage_channel=voltage_channel)
        try:
            return _finite_or_none(evaluate_waveshape(r, kind=kind).to_dict())
        except ShotcheckError as exc:
            raise InputError(str(exc), field=field, code="invalid_record") from None

    # ---- sequences ------------------------------------------------------------------------------
    def create_sequence(self, unit_id: str, terminal: str, plan: Any, meta: Mapping[str, Any] | None = None,
                        *, actor: str = "service", idempotency_key: str | None = None) -> dict[str, Any]:
        """Create a sequence and return its view (see :meth:`sequence_view`).

        With ``idempotency_key``, a repeated request (a client retrying after a lost answer) returns the
        sequence the first one created; the view then has ``"created": False``.
        """
        for fld, val in (("unit_id", unit_id), ("terminal", terminal)):
            if not isinstance(val, str) or not val.strip() or len(val) > 100:
                raise InputError("must be non-empty text of at most 100 characters", field=fld)
        try:
            steps = parse_plan(plan)
        except ShotcheckError as exc:
            raise InputError(str(exc), field="plan") from None
        plan_rows = [s.to_dict() for s in steps]
        if idempotency_key is None:
            sid = self.store.create_sequence(unit_id.strip(), terminal.strip(), plan_rows, dict(meta or {}),
                                             actor=actor)
            return {**self.sequence_view(sid), "created": True}
        try:
            sid, created = self.store.create_sequence_once(idempotency_key, unit_id.strip(), terminal.strip(),
                                                           plan_rows, dict(meta or {}), actor=actor)
        except ShotcheckError as exc:
            raise InputError(str(exc), field="Idempotency-Key", code="conflict", status=409) from None
        return {**self.sequence_view(sid), "created": created}

    def _lock_for(self, sid: str) -> threading.Lock:
        with self._seq_guard:
            return self._seq_locks.setdefault(sid, threading.Lock())

    def add_shot(self, sid: str, rec: StoredRecord, *, kind: str, level_percent: float,
                 voltage_channel: str | None = None, current_channel: str | None = None,
                 actor: str = "service") -> tuple[dict[str, Any], bool]:
        """Add a shot to a sequence, compare it with the reference it needs, and return the shot view.

        Returns
        -------
        shot : dict
            With ``role``, ``waveshape``, ``comparison`` (verdict) and ``warnings``.
        created : bool
            False for a re-post of the same content.

        Raises
        ------
        InputError
            Unknown sequence (404), no reference yet (409), a declared kind or level that the record
            contradicts (422), an unusable record (422).
        """
        seq = self.store.get_sequence(sid)
        if seq is None:
            raise InputError(f"no sequence {sid!r}", field="id", code="not_found", status=404)
        from ..sequence import SHOT_KINDS

        if kind not in SHOT_KINDS:
            raise InputError(f"must be one of {', '.join(SHOT_KINDS)}, got {kind!r}", field="kind")
        try:
            level = check_level(kind, level_percent)
        except ShotcheckError as exc:
            raise InputError(str(exc), field="level_percent") from None
        opts = {"voltage_channel": voltage_channel, "current_channel": current_channel}
        opts = {k: v for k, v in opts.items() if v is not None}
        with self._lock_for(sid):
            for attempt in range(5):  # another worker process may add a shot meanwhile: decide again
                try:
                    return self._add_shot_once(sid, rec, kind, level, opts, actor)
                except _SequenceMoved:
                    if attempt == 4:
                        raise InputError("the sequence is being changed by another request; post again",
                                         field="id", code="conflict", status=409) from None
        raise AssertionError("unreachable")

    def _add_shot_once(self, sid: str, rec: StoredRecord, kind: str, level: float, opts: Mapping[str, str],
                       actor: str) -> tuple[dict[str, Any], bool]:
        existing = self.store.find_shot(sid, rec.digest)
        if existing is not None:
            if existing["kind"] != kind or float(existing["level_percent"]) != float(level):
                raise InputError(
                    f"{rec.name}: this record is already shot {existing['id']} of the sequence, posted as "
                    f"{existing['kind']} at {float(existing['level_percent']):g} %, not as {kind} at {level:g} %; "
                    "a shot is stored once and never changed", field="kind", code="conflict", status=409)
            if existing["role"] != "reference" and existing["comparison_id"] is None:
                existing = self._finish_shot(existing, opts, actor)  # a crash came between shot and verdict
            row = self.store.get_comparison(existing["comparison_id"]) if existing["comparison_id"] else None
            if row is not None and row["status"] == "failed":
                # stored by a version that kept shots it could not compare: say so again, as the first time
                e = row["error"] or {}
                raise InputError(f"stored as shot {existing['id']} but not comparable: {e.get('detail', '')}",
                                 field=e.get("field"), code=e.get("error", "invalid_record"))
            return self._shot_view(existing), False
        previous = self.store.list_shots(sid)
        try:
            role, ref_id = role_for(kind, previous)
        except ShotcheckError as exc:
            raise InputError(str(exc), field="kind", code="no_reference", status=409) from None
        record = self.read(rec, field="record", **opts)
        if not record.has_current:
            raise InputError(f"{rec.name}: no current channel; a shot needs the neutral current",
                             field="record.channels", code="invalid_record")
        from ..compare import declared_level

        said_level, said = declared_level(record)
        posted_level = "reduced" if kind in REDUCED_KINDS else "full"
        if said_level is not None and said_level != posted_level:
            # a full shot posted as the reduced reference would make every later comparison of the sequence
            # fail (their files in the wrong order), and a stored shot is never changed
            raise InputError(f"{rec.name}: posted as {kind} at {level:g} % ({posted_level} level), but the record "
                             f"declares itself a {said_level}-level shot ({said}); post it with its own kind and "
                             "level, or correct its metadata", field="kind", code="invalid_record")
        from ..waveshape import evaluate_waveshape

        bare = record.replace(meta={k: v for k, v in record.meta.items() if k != "shot_kind"})
        try:
            ws = evaluate_waveshape(bare)
            check_declared(kind, ws.kind, name=rec.name)
        except ShotcheckError as exc:
            raise InputError(str(exc), field="kind", code="invalid_record") from None
        wsd = _finite_or_none(ws.to_dict())
        warnings: list[str] = []
        ref_shot = next((s for s in previous if s["id"] == ref_id), None)
        if ref_shot is not None:
            vt_ref = ref_shot["waveshape"].get("test_voltage_kV")
            vt = wsd.get("test_voltage_kV")
            if vt_ref and vt:
                w = level_warning(level / float(ref_shot["level_percent"]), abs(vt) / abs(vt_ref))
                if w:
                    warnings.append(w)
        cid = None
        if ref_shot is not None:
            # compared before it is stored: a shot that cannot be compared is refused, not kept as a shot
            # whose verdict never comes (the sequence would wait for it for good)
            ref_rec = self.store.get_record(ref_shot["record_digest"])
            assert ref_rec is not None
            try:
                row, _ = self.compare(ref_rec, rec, options=opts, actor=actor)
            except InputError as exc:
                raise InputError(f"not added to the sequence: {exc}", field=exc.field,
                                 code=exc.code) from None
            cid = row["id"]
        try:
            shot, created = self.store.add_shot(sid, rec, kind=kind, level_percent=level, role=role,
                                                waveshape=wsd, warnings=warnings, actor=actor,
                                                expect_position=len(previous) + 1)
        except ShotcheckError:
            raise _SequenceMoved() from None
        if cid is not None and created:
            self.store.link_shot(shot["id"], cid)
            shot = {**shot, "comparison_id": cid}
        return self._shot_view(shot), created

    def _finish_shot(self, shot: dict[str, Any], opts: Mapping[str, str], actor: str) -> dict[str, Any]:
        """Compare a stored shot with its reference in the sequence and link the comparison to it."""
        shots = self.store.list_shots(shot["sequence_id"])
        ref_id = reference_of(shot, shots)
        ref_shot = next((s for s in shots if s["id"] == ref_id), None)
        if ref_shot is None:
            return shot
        ref_rec = self.store.get_record(ref_shot["record_digest"])
        rec = self.store.get_record(shot["record_digest"])
        assert ref_rec is not None and rec is not None
        try:
            row, _ = self.compare(ref_rec, rec, options=opts, actor=actor)
            cid = row["id"]
        except InputError as exc:
            cid = Store.comparison_id(ref_rec.digest, rec.digest, self.model_id, dict(opts))
            self.store.link_shot(shot["id"], cid)
            raise InputError(f"stored as shot {shot['id']} but not comparable: {exc}", field=exc.field,
                             code=exc.code) from None
        self.store.link_shot(shot["id"], cid)
        return {**shot, "comparison_id": cid}

    def _shot_view(self, shot: Mapping[str, Any]) -> dict[str, Any]:
        out = {k: v for k, v in shot.items() if k != "record_digest"}
        cid = shot.get("comparison_id")
        row = self.store.get_comparison(cid) if cid else None
        out["comparison"] = None if row is None else {
            "id": row["id"], "status": row["status"], "verdict": row["verdict"], "error": row["error"]}
        return out

    def sequence_view(self, sid: str) -> dict[str, Any]:
        """Sequence with its plan, shots, per-shot verdicts and the summary verdict.

        Raises
        ------
        InputError
            404 for an unknown sequence.
        """
        from ..sequence import Step

        seq = self.store.get_sequence(sid)
        if seq is None:
            raise InputError(f"no sequence {sid!r}", field="id", code="not_found", status=404)
        shots = [self._shot_view(s) for s in self.store.list_shots(sid)]
        verdicts = {s["comparison"]["id"]: s["comparison"]["verdict"] for s in shots if s["comparison"]}
        plan = [Step(p["kind"], p["level_percent"]) for p in seq["plan"]]
        return {**seq, "shots": shots, "summary": summarize(plan, shots, verdicts)}
