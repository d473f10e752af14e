"""Watch-folder mode: every shot file dropped into a per-sequence folder is processed exactly once.

Layout: ``ROOT/<sequence folder>/<shot files>``. Each sub-folder of ``ROOT`` is one test sequence (its
name becomes the unit/terminal label). A shot file is a ``.csv``, a ``.cff``, a ``.json`` record, or a
``.cfg`` with its ``.dat``. Its kind and level come from the record's metadata (``shot_kind``,
``level_percent``) or, failing that, from its name (``..._reduced_75.csv``, ``shot04-chopped-115.cfg``); a
chopped shot below 80 % is a reduced-level chopped wave (kind ``reduced_chopped``).
Within a folder, files are taken in name order, and only once they have stopped growing (size and
modification time unchanged for ``settle_s``); a later file waits for an earlier one still being written.

For every processed file the watcher writes beside it ``<name>.verdict.json`` (the shot, its wave shape
and its comparison verdict) and, on request, ``<name>.report.html``; a file that cannot be processed
gets ``<name>.error.txt`` with the reason. Nothing is moved or deleted. Progress is kept in the store
(by folder, file name and content digest), so a restart after a crash resumes where it stopped and a
file is never processed twice; changed content counts as a new file.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import logging
import os
import re
import signal
import tempfile
import threading
import time
from pathlib import Path
from typing import Any

from ._validation import ShotcheckError

__all__ = ["Watcher", "shot_kind_from_name", "kind_and_level", "RESULT_SUFFIXES"]

_log = logging.getLogger("shotcheck.watch")

#: Files the watcher writes; never taken as input.
RESULT_SUFFIXES = (".verdict.json", ".error.txt", ".report.html")
_INPUT_SUFFIXES = (".csv", ".cff", ".cfg", ".json")
_NAME_KIND = re.compile(r"(?:^|[_\-. ])(reduced[_\-]?chopped|reduced|full|chopped)[_\-]?(\d{1,3}(?:\.\d+)?)"
                        r"(?:%|pc|pct)?(?=$|[_\-. ])",
                        re.IGNORECASE)
_META_KINDS = {"reduced": "reduced", "full": "full", "chopped": "chopped", "reduced_chopped": "reduced_chopped"}


def shot_kind_from_name(name: str) -> tuple[str, float] | None:
    """Kind and level [%] from a file name such as ``'T1_chopped_115.cfg'``, or None.

    Examples
    --------
    >>> shot_kind_from_name("KR-2291-07_1U_03_chopped_115.cfg")
    ('chopped', 115.0)
    >>> shot_kind_from_name("shot.csv") is None
    True
    """
    stem = name.rsplit(".", 1)[0]
    matches = list(_NAME_KIND.finditer(stem))
    if not matches:
        return None
    m = matches[-1]
    kind = m.group(1).lower()
    if kind.startswith("reduced") and kind.endswith("chopped"):
        kind = "reduced_chopped"
    return kind, float(m.group(2))


def kind_and_level(record_meta: dict[str, Any], name: str) -> tuple[str, float]:
    """Sequence shot kind and level [%] of a dropped file, from its metadata or else from its name.

    A chopped shot below 80 % of the test level is a reduced-level chopped wave.

    Raises
    ------
    ShotcheckError
        Neither the metadata nor the name give kind and level.

    Examples
    --------
    >>> kind_and_level({}, "T1_04_chopped_60.cfg")
    ('reduced_chopped', 60.0)
    >>> kind_and_level({"shot_kind": "full", "level_percent": 100}, "x.csv")
    ('full', 100.0)
    """
    kind = _META_KINDS.get(str(record_meta.get("shot_kind", "")).lower())
    level = record_meta.get("level_percent")
    from_name = shot_kind_from_name(name)
    if kind is None and from_name is not None:
        kind = from_name[0]
    if level is None and from_name is not None:
        level = from_name[1]
    if kind is None or level is None:
        raise ShotcheckError(
            f"{name}: kind and level unknown; put shot_kind and level_percent in the record's metadata or "
            "name the file like 'shot03_chopped_115.cfg' (kinds: reduced, full, chopped, reduced_chopped)"
        )
    try:
        level = float(level)
    except (TypeError, ValueError):
        raise ShotcheckError(f"{name}: level_percent must be a number, got {level!r}") from None
    if kind == "chopped" and level < 80.0:  # a chopped wave at a reduced level
        kind = "reduced_chopped"
    return kind, level


def _process_umask() -> int:
    """The process's file-creation mask (read once, at import, before any thread could race it)."""
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _process_umask()


def _atomic_write(path: Path, text: str) -> None:
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        # mkstemp makes the file readable by its owner only; results are for the acquisition software,
        # which may run as another user: the permissions a plain new file would get
        os.fchmod(fd, 0o666 & ~_UMASK)
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


#: Result file of a processed file, by its status (suffix added to the file's name).
_RESULT_OF = {"done": ".verdict.json", "failed": ".error.txt"}


def _remove(*paths: Path) -> None:
    """Remove result files that a newer result replaces (a reader must never see two that disagree)."""
    for path in paths:
        try:
            path.unlink()
        except FileNotFoundError:
            pass


@dataclasses.dataclass
class _Seen:
    signature: tuple[int, int]
    since: float


class Watcher:
    """Process shot files dropped under a folder.

    Parameters
    ----------
    root : str or Path
        Folder whose sub-folders are sequences.
    data_dir : str or Path, optional
        Store folder; default ``ROOT/.shotcheck`` (hidden, so never scanned).
    model_path : str or Path, optional
        Model file; default the bundled model.
    plan : str
        Shot order of new sequences (a name in :data:`detector.sequence.PLANS`).
    settle_s : float
        A file is taken once its size and modification time have not changed for this long [s].
    report : bool
        Also write the HTML report of every comparison (needs :mod:`detector.report`).

    Raises
    ------
    ShotcheckError
        If ``root`` is not a folder or the model cannot be loaded.
    """

    def __init__(self, root: str | os.PathLike, *, data_dir: str | os.PathLike | None = None,
                 model_path: str | os.PathLike | None = None, plan: str = "iec", settle_s: float = 2.0,
                 report: bool = False):
        from .compare import DEFAULT_MODEL_PATH, default_model
        from .sequence import parse_plan
        from .service.engine import Engine
        from .store import Store

        self.root = Path(root)
        if not self.root.is_dir():
            raise ShotcheckError(f"{self.root}: not a folder; create it or name the folder to watch")
        parse_plan(plan)
        self.plan = plan
        self.settle_s = float(settle_s)
        self.report = bool(report)
        self.store = Store(data_dir if data_dir is not None else self.root / ".shotcheck")
        mp = Path(model_path) if model_path is not None else None
        self.engine = Engine(self.store, default_model(mp), mp or DEFAULT_MODEL_PATH)
        self._seen: dict[Path, _Seen] = {}
        self._finished: dict[Path, tuple] = {}
        self._told_missing: set[Path] = set()
        self._stop = threading.Event()

    # ---- discovery ------------------------------------------------------------------------------
    def _signature(self, path: Path) -> tuple[int, int] | None:
        try:
            st = path.stat()
        except OSError:
            return None
        return st.st_size, st.st_mtime_ns

    def _stable(self, path: Path, now: float) -> bool:
        sig = self._signature(path)
        if sig is None or sig[0] == 0:
            self._seen.pop(path, None)
            return False
        prev = self._seen.get(path)
        if prev is None or prev.signature != sig:
            self._seen[path] = _Seen(sig, now)
            return self.settle_s <= 0
        return now - prev.since >= self.settle_s

    @staticmethod
    def _is_input(p: Path) -> bool:
        n = p.name
        return (not n.startswith(".") and p.is_file() and n.lower().endswith(_INPUT_SUFFIXES)
                and not n.lower().endswith(RESULT_SUFFIXES))

    @staticmethod
    def _parts(path: Path) -> list[Path]:
        """The files of one record: a .cfg with its .dat (+ .inf, .hdr), or the file alone; [] if incomplete."""
        if path.suffix.lower() != ".cfg":
            return [path]
        dat = next((q for q in (path.with_suffix(".dat"), path.with_suffix(".DAT")) if q.is_file()), None)
        if dat is None:
            return []
        extra = [q for s in (".inf", ".hdr", ".INF", ".HDR") if (q := path.with_suffix(s)).is_file()]
        return [path, dat, *extra]

    def _candidates(self, folder: Path) -> list[Path]:
        return sorted(p for p in folder.iterdir() if self._is_input(p))

    # ---- processing -----------------------------------------------------------------------------
    def scan_once(self) -> list[dict[str, Any]]:
        """One pass over every sequence folder; returns what was processed in this pass.

        Returns
        -------
        list of dict
            ``{'file', 'status' ('done' | 'failed'), 'detail'}`` per processed file.
        """
        out: list[dict[str, Any]] = []
        now = time.monotonic()
        for folder in sorted(p for p in self.root.iterdir() if p.is_dir() and not p.name.startswith(".")):
            candidates = self._candidates(folder)
            groups = [self._parts(path) for path in candidates]
            stable = [bool(parts) and all([self._stable(p, now) for p in parts]) for parts in groups]
            for path, parts, ready in zip(candidates, groups, stable, strict=True):
                if self._stop.is_set():
                    return out
                if not parts and self._stable(path, now):
                    self._tell_missing_dat(folder, path)
                if not ready:
                    break  # still being written (or its .dat still to come): keep the order, look again later
                path = parts[0]
                rel = f"{folder.name}/{path.name}"
                sig = tuple(self._seen[p].signature for p in parts)
                if self._finished.get(path) == sig:
                    continue
                try:
                    digest = hashlib.sha256(b"".join(hashlib.sha256(p.read_bytes()).digest()
                                                     for p in parts)).hexdigest()
                except OSError:  # removed or locked by its writer meanwhile: look again next pass
                    for p in parts:
                        self._seen.pop(p, None)
                    break
                status = self.store.watch_status(rel, digest)
                if status in ("done", "failed"):
                    if not path.with_name(path.name + _RESULT_OF[status]).is_file():
                        # this content's result went when a later version of the file replaced it (and that
                        # version's result went when this content came back): write it again
                        out.append(self._process(folder, parts, rel, digest))
                elif self.store.watch_claim(rel, digest):
                    out.append(self._process(folder, parts, rel, digest))
                self._finished[path] = sig
        return out

    def _tell_missing_dat(self, folder: Path, cfg: Path) -> None:
        """A settled .cfg without its .dat holds up the shots after it (they are taken in order): say so
        once, in its error file and the log, and keep waiting for the .dat."""
        if cfg in self._told_missing:
            return
        self._told_missing.add(cfg)
        later = [p.name for p in self._candidates(folder) if p.name > cfg.name]
        text = (f"shotcheck is waiting for {cfg.with_suffix('.dat').name}, the data file of {cfg.name}; "
                + (f"the {len(later)} shot file(s) after it in {folder.name} wait too (shots are taken in order)"
                   if later else "the shot is taken when it arrives"))
        _log.warning("%s/%s: %s", folder.name, cfg.name, text)
        _atomic_write(cfg.with_name(cfg.name + ".error.txt"), text + "\n")

    def _sequence_for(self, folder: Path) -> str:
        sid = self.store.find_sequence("watch_folder", folder.name)
        if sid is None:
            label = folder.name[:100]
            view = self.engine.create_sequence(label, label, self.plan, {"watch_folder": folder.name},
                                               actor="watcher")
            sid = view["id"]
        return sid

    def _process(self, folder: Path, parts: list[Path], rel: str, digest: str) -> dict[str, Any]:
        from .service.engine import InputError

        main = parts[0]
        verdict_path = main.with_name(main.name + ".verdict.json")
        error_path = main.with_name(main.name + ".error.txt")
        try:
            try:
                files = [(p.name, p.read_bytes()) for p in parts]
            except OSError as exc:
                raise ShotcheckError(f"{main.name}: cannot read the file ({exc.strerror or exc})") from None
            rec = self.store.put_record(files)
            record = self.engine.read(rec, field="record")
            kind, level = kind_and_level(dict(record.meta), main.name)
            sid = self._sequence_for(folder)
            shot, _ = self.engine.add_shot(sid, rec, kind=kind, level_percent=level, actor="watcher")
            _atomic_write(verdict_path, json.dumps(shot, indent=1))
            _remove(error_path)  # an earlier version of the file failed: its error no longer holds
            report_path = main.with_name(main.name + ".report.html")
            if self.report and shot.get("comparison") and shot["comparison"]["status"] == "done":
                self._write_report(shot["comparison"]["id"], main)
            else:
                _remove(report_path)
            result = {"file": rel, "status": "done", "detail": shot["id"]}
        except (InputError, ShotcheckError) as exc:
            field = getattr(exc, "field", None)
            reason = f"shotcheck could not process {main.name}: {exc}" + (f" (field: {field})" if field else "")
            _atomic_write(error_path, reason + "\n")
            _remove(verdict_path, main.with_name(main.name + ".report.html"))  # an earlier version's results
            result = {"file": rel, "status": "failed", "detail": str(exc)}
        except Exception as exc:  # a fault of shotcheck, not of the file: record it rather than crash-loop
            _log.exception("processing %s failed", rel)
            reason = (f"shotcheck failed on {main.name} with an internal error ({type(exc).__name__}); "
                      "please report it with this file")
            _atomic_write(error_path, reason + "\n")
            _remove(verdict_path, main.with_name(main.name + ".report.html"))
            result = {"file": rel, "status": "failed", "detail": f"internal error: {type(exc).__name__}: {exc}"}
        self.store.watch_finish(rel, digest, result["status"], result)
        return result

    def _write_report(self, cid: str, main: Path) -> None:
        try:
            from . import report
        except ImportError:
            return
        verdict, row = self.engine.verdict_object(cid)
        dest = main.with_name(main.name + ".report.html")
        tmp = main.with_name(f".{main.name}.report.tmp.html")
        report.write_report(verdict, tmp, reference_name=row["reference_name"], test_name=row["test_name"])
        os.replace(tmp, dest)

    # ---- loop -----------------------------------------------------------------------------------
    def stop(self) -> None:
        """Ask :meth:`run` to return after the file in hand."""
        self._stop.set()

    def run(self, *, interval_s: float = 1.0, max_runtime_s: float | None = None,
            idle_exit_s: float | None = None) -> int:
        """Scan until stopped (SIGINT/SIGTERM), ``max_runtime_s`` passes, or nothing new for ``idle_exit_s``.

        Parameters
        ----------
        interval_s : float
            Pause between passes [s].
        max_runtime_s, idle_exit_s : float, optional
            Bounds for unattended runs and tests [s].

        Returns
        -------
        int
            Number of files processed.
        """
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGINT, signal.SIGTERM):
                signal.signal(sig, lambda *_: self.stop())
        start = last = time.monotonic()
        n = 0
        while not self._stop.is_set():
            done = self.scan_once()
            n += len(done)
            now = time.monotonic()
            if done or any(True for _ in self._pending()):
                last = now
            if max_runtime_s is not None and now - start >= max_runtime_s:
                break
            if idle_exit_s is not None and now - last >= idle_exit_s:
                break
            self._stop.wait(interval_s)
        return n

    def _pending(self):
        """Files seen but not yet stable (keeps an idle exit from firing while a file is being written)."""
        now = time.monotonic()
        return (p for p, s in self._seen.items() if now - s.since < self.settle_s)
