"""Labelled synthetic data sets: many scenarios simulated in parallel, stored in compressed shards.

Layout of a data set directory::

    manifest.json          format version, seed, number of cases, shard size, families, columns
    labels.csv             one row per case (see LABEL_COLUMNS), sorted by case id
    shard_00000.npz        SHARD_SIZE pairs each; per-case arrays concatenated with offsets
    ...
    comtrade/              optional: case_000000_reference.cfg/.dat, case_000000_test.cfg/.dat

Each shard holds, for ``ref`` and ``test``: ``<r>_U`` and ``<r>_I`` (int16 recorder codes of all cases
concatenated), ``<r>_offsets`` (n+1 sample offsets), ``<r>_lsb`` (n, 2) code step [V, A],
``<r>_dt`` (n,) sample interval [s], ``<r>_meta`` (n,) JSON text of meta and processing history; plus
``case_id`` (n,). A record's samples are ``codes * lsb``, exactly the digitiser's output. Shards are
written as zip files with fixed time stamps, so the same seed gives byte-identical files.

Reproducibility: case ``i`` draws from ``numpy.random.SeedSequence(seed, spawn_key=(i, ...))`` only, so
its data does not depend on the worker count, the chunking or the scheduler. Event classes are
balanced exactly: case ``i`` has class ``classes[i % len(classes)]`` of its family.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import sys
import time
import zipfile
from collections.abc import Iterable, Iterator, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from detector._validation import ShotcheckError
from detector.record import Channel, Record

from .scenario import Family, _resolve_family, bundled_families, make_pair, sample_scenario

__all__ = ["generate", "load_dataset", "read_labels", "make_case", "LABEL_COLUMNS", "SHARD_SIZE", "FORMAT_VERSION"]

FORMAT_VERSION = 1
SHARD_SIZE = 200
#: Cases per task sent to a worker (small enough for an even load, large enough to amortise start-up).
CHUNK_SIZE = 10
#: Attempts per case before giving up (an attempt fails if the generator cannot be designed for the
#: drawn winding, or the drawn fault does not ignite); each attempt draws a fresh scenario.
MAX_ATTEMPTS = 6

#: Label table columns and their types, in file order.
LABEL_COLUMNS: dict[str, type] = {
    "case_id": int, "shard": int, "index_in_shard": int, "seed": int, "attempt": int,
    "event": str, "fault_occurred": bool, "fault_node_a": int, "fault_node_b": int, "shorted_turns": int,
    "position": float, "fault_time_us": float, "fault_phase": str, "breakdown_voltage_V": float,
    "arc_resistance_ohm": float, "discharge_charge_C": float,
    "reference_level_percent": float, "test_level_percent": float, "reference_kind": str, "test_kind": str,
    "chop_time_reference_us": float, "chop_time_test_us": float, "sample_rate_Hz": float, "bits": int,
    "family": str, "n_sections": int, "total_turns": float, "total_inductance_H": float,
    "total_ground_capacitance_F": float, "alpha": float, "k0": float,
    "damping": float, "series_resistance_ohm": float, "turns_per_section": int, "neutral": str, "shunt_ohm": float,
    "magnetising_reference_H": float, "magnetising_test_H": float, "bil_kV": float, "polarity": str,
    "front_time_us": float, "time_to_half_us": float, "front_resistor_drift": float,
    "tail_resistor_drift": float, "effect_current_lsb": float, "effect_voltage_lsb": float,
}


# ------------------------------------------------------------------------------------------ one case
def _families(design_file: str | Path | Sequence[str | Path] | None) -> list[Family]:
    if design_file is None:
        return list(bundled_families().values())
    if isinstance(design_file, str | Path):
        return [_resolve_family(design_file)]
    return [_resolve_family(d) for d in design_file]


def make_case(seed: int, case_index: int, families: Sequence[Family]) -> tuple[Record, Record, dict[str, Any]]:
    """Build case ``case_index`` of the data set with root ``seed``: (reference, test, label).

    Parameters
    ----------
    seed : int
        Root seed of the data set.
    case_index : int
        Case number; its random stream is ``SeedSequence(seed, spawn_key=(case_index, 0, attempt))``.
    families : sequence of Family
        Winding families; the case draws one with equal probability.

    Returns
    -------
    reference, test : detector.record.Record
    label : dict
        The row of the label table (without ``shard`` and ``index_in_shard``).
    """
    fam_rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(case_index, 2)))
    fam = families[int(fam_rng.integers(len(families)))] if len(families) > 1 else families[0]
    classes = fam.values["faults.classes"]
    event = classes[case_index % len(classes)]
    last: Exception | None = None
    for attempt in range(MAX_ATTEMPTS):
        rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(case_index, 0, attempt)))
        sc = sample_scenario(rng, fam, event=event, case_index=case_index, seed=seed)
        try:
            ref, test, label = make_pair(sc)
        except (ShotcheckError, ArithmeticError, np.linalg.LinAlgError) as exc:
            last = exc
            continue
        if event != "none" and not label["fault_occurred"]:
            last = ShotcheckError(f"the {event} fault did not occur in the simulated test shot")
            continue
        label = {"case_id": case_index, "seed": seed, "attempt": attempt, **label}
        return ref, test, label
    raise ShotcheckError(
        f"case {case_index} (family {fam.name!r}, event {event}) failed after {MAX_ATTEMPTS} attempts: {last}"
    )


def _encode(rec: Record) -> dict[str, Any]:
    codes, lsbs = [], []
    for ch in (rec.voltage, rec.current):
        lsb = rec.meta["voltage_range_V" if ch.quantity == "voltage" else "current_range_A"] * 2.0 / 2 ** rec.meta["bits"]
        c = np.rint(ch.samples / lsb)
        codes.append(c.astype(np.int16))
        lsbs.append(lsb)
    meta = json.dumps({"meta": dict(rec.meta), "processing": list(rec.processing),
                       "start_time_s": rec.start_time_s}, sort_keys=True)
    return {"U": codes[0], "I": codes[1], "lsb": lsbs, "dt": rec.sample_interval_s, "meta": meta}


def _decode(U_codes: np.ndarray, I_codes: np.ndarray, lsb: np.ndarray, dt: float, meta_json: str, source: str) -> Record:
    info = json.loads(meta_json)
    return Record(
        start_time_s=info["start_time_s"],
        sample_interval_s=float(dt),
        channels=(Channel("U", "voltage", U_codes.astype(np.float64) * lsb[0], source_unit="kV"),
                  Channel("I_N", "current", I_codes.astype(np.float64) * lsb[1], source_unit="A")),
        meta=info["meta"],
        processing=tuple(info["processing"]),
        source=source,
    )


def _run_chunk(seed: int, indices: Sequence[int], families: Sequence[Family]) -> list[dict[str, Any]]:
    """Worker task: build and encode the cases ``indices`` (runs in a joblib or Dask worker)."""
    out = []
    for i in indices:
        ref, test, label = make_case(seed, int(i), families)
        out.append({"ref": _encode(ref), "test": _encode(test), "label": label})
    return out


# ---------------------------------------------------------------------------------------- storage
def _write_npz(path: Path, arrays: dict[str, np.ndarray]) -> None:
    """np.savez_compressed layout with fixed zip time stamps (byte-reproducible)."""
    tmp = path.with_suffix(".tmp")
    with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_DEFLATED, compresslevel=6) as zf:
        for name in sorted(arrays):
            buf = io.BytesIO()
            np.lib.format.write_array(buf, np.asarray(arrays[name]), allow_pickle=False)
            info = zipfile.ZipInfo(f"{name}.npy", date_time=(1980, 1, 1, 0, 0, 0))
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            zf.writestr(info, buf.getvalue(), compresslevel=6)
    os.replace(tmp, path)


def _shard_arrays(cases: list[dict[str, Any]]) -> dict[str, np.ndarray]:
    arrays: dict[str, np.ndarray] = {"case_id": np.array([c["label"]["case_id"] for c in cases], dtype=np.int64)}
    for r in ("ref", "test"):
        lens = [c[r]["U"].size for c in cases]
        arrays[f"{r}_offsets"] = np.concatenate([[0], np.cumsum(lens)]).astype(np.int64)
        arrays[f"{r}_U"] = np.concatenate([c[r]["U"] for c in cases])
        arrays[f"{r}_I"] = np.concatenate([c[r]["I"] for c in cases])
        arrays[f"{r}_lsb"] = np.array([c[r]["lsb"] for c in cases], dtype=np.float64)
        arrays[f"{r}_dt"] = np.array([c[r]["dt"] for c in cases], dtype=np.float64)
        arrays[f"{r}_meta"] = np.array([c[r]["meta"] for c in cases], dtype=np.str_)
    return arrays


def _shard_name(k: int) -> str:
    return f"shard_{k:05d}.npz"


def _fmt_cell(v: Any) -> str:
    if isinstance(v, bool):
        return "1" if v else "0"
    if isinstance(v, float):
        return "" if math.isnan(v) else repr(v)
    return str(v)


def _write_labels(path: Path, rows: list[dict[str, Any]]) -> None:
    missing = set(LABEL_COLUMNS) - set(rows[0]) if rows else set()
    if missing:
        raise RuntimeError(f"label rows lack columns {sorted(missing)}")
    with open(path, "w", newline="", encoding="utf-8") as fh:
        wr = csv.writer(fh, lineterminator="\n")
        wr.writerow(LABEL_COLUMNS)
        for row in sorted(rows, key=lambda r: r["case_id"]):
            wr.writerow([_fmt_cell(row[c]) for c in LABEL_COLUMNS])


def read_labels(directory: str | Path) -> list[dict[str, Any]]:
    """Read ``labels.csv`` of a data set, values converted to their column types (empty = NaN/None).

    Parameters
    ----------
    directory : str or Path
        Data set directory.

    Returns
    -------
    list of dict
        One dict per case, ordered by case id.
    """
    path = Path(directory) / "labels.csv"
    if not path.is_file():
        raise ShotcheckError(f"{path}: no label table; is {directory} a data set written by generate()?")
    out = []
    with open(path, newline="", encoding="utf-8") as fh:
        rd = csv.DictReader(fh)
        if rd.fieldnames != list(LABEL_COLUMNS):
            raise ShotcheckError(f"{path}: header does not match this version's label columns")
        for row in rd:
            conv: dict[str, Any] = {}
            for k, typ in LABEL_COLUMNS.items():
                s = row[k]
                if s is None:  # a short (e.g. truncated) line
                    raise ShotcheckError(f"{path}: line {rd.line_num}: {k}: missing; expected "
                                         f"{len(LABEL_COLUMNS)} fields (a truncated file?)")
                try:
                    if typ is float:
                        conv[k] = math.nan if s == "" else float(s)
                    elif typ is int:
                        conv[k] = int(s)
                    elif typ is bool:
                        conv[k] = s == "1"
                    else:
                        conv[k] = s
                except ValueError:
                    raise ShotcheckError(f"{path}: line {rd.line_num}: {k}: expected "
                                         f"{'a number' if typ is float else 'an integer'}, got {s!r}") from None
            out.append(conv)
    return out


def load_dataset(directory: str | Path, *, case_ids: Iterable[int] | None = None
                 ) -> Iterator[tuple[Record, Record, dict[str, Any]]]:
    """Iterate over a data set's cases in case order.

    Parameters
    ----------
    directory : str or Path
        Directory written by :func:`generate`.
    case_ids : iterable of int, optional
        Only these cases (only the shards holding them are read); default all.

    Yields
    ------
    reference : detector.record.Record
        Reduced-level shot (channels ``U`` [V], ``I_N`` [A]).
    test : detector.record.Record
        Full-level shot.
    label : dict
        The case's row of ``labels.csv`` with typed values.
    """
    d = Path(directory)
    man_path = d / "manifest.json"
    if not man_path.is_file():
        raise ShotcheckError(f"{man_path}: missing; {d} is not a data set written by generate()")
    manifest = json.loads(man_path.read_text(encoding="utf-8"))
    if manifest.get("format_version") != FORMAT_VERSION:
        raise ShotcheckError(
            f"{man_path}: format_version {manifest.get('format_version')!r}, this version reads {FORMAT_VERSION}"
        )
    labels = read_labels(d)
    if case_ids is not None:
        wanted = {int(c) for c in case_ids}
        labels = [lab for lab in labels if lab["case_id"] in wanted]
    by_shard: dict[int, list[dict[str, Any]]] = {}
    for lab in labels:
        by_shard.setdefault(lab["shard"], []).append(lab)
    for k in sorted(by_shard):
        path = d / _shard_name(k)
        try:
            with np.load(path, allow_pickle=False) as z:
                a = {name: z[name] for name in z.files}
        except FileNotFoundError:
            raise ShotcheckError(f"{path}: missing; labels.csv lists cases in it") from None
        except (OSError, ValueError, zipfile.BadZipFile):  # pickled objects are never loaded
            raise ShotcheckError(f"{path}: not a shard written by generate() (not an archive of plain "
                                 "arrays); write the data set again") from None
        need = {"case_id"} | {f"{r}_{f}" for r in ("ref", "test")
                              for f in ("offsets", "U", "I", "lsb", "dt", "meta")}
        if not need <= set(a):
            raise ShotcheckError(f"{path}: not a shard written by generate() (missing arrays "
                                 f"{sorted(need - set(a))[:4]}); write the data set again")
        for lab in by_shard[k]:
            j = lab["index_in_shard"]
            if not 0 <= j < a["case_id"].size or int(a["case_id"][j]) != lab["case_id"]:
                raise ShotcheckError(f"{path}: case {lab['case_id']} not at index {j}; the data set is inconsistent")
            recs = []
            for r in ("ref", "test"):
                o0, o1 = a[f"{r}_offsets"][j], a[f"{r}_offsets"][j + 1]
                recs.append(_decode(a[f"{r}_U"][o0:o1], a[f"{r}_I"][o0:o1], a[f"{r}_lsb"][j], a[f"{r}_dt"][j],
                                    str(a[f"{r}_meta"][j]), f"{path}#case{lab['case_id']}:{r}"))
            yield recs[0], recs[1], lab


# ---------------------------------------------------------------------------------------- runners
def _iter_local(tasks: list[list[int]], seed: int, families: list[Family], workers: int) -> Iterator[list[dict]]:
    if workers == 1:
        for idx in tasks:
            yield _run_chunk(seed, idx, families)
        return
    from joblib import Parallel, delayed

    par = Parallel(n_jobs=workers, backend="loky", return_as="generator")
    yield from par(delayed(_run_chunk)(seed, idx, families) for idx in tasks)


def _iter_dask(tasks: list[list[int]], seed: int, families: list[Family], scheduler: Any) -> Iterator[list[dict]]:
    try:
        from distributed import Client
    except ImportError:  # pragma: no cover - depends on the installation
        raise ShotcheckError("--scheduler needs the 'distributed' package (pip install shotcheck[dask])") from None
    own = not isinstance(scheduler, Client)
    try:
        client = Client(scheduler, set_as_default=False) if own else scheduler
    except (OSError, TimeoutError, ValueError) as exc:
        raise ShotcheckError(f"cannot connect to the Dask scheduler {scheduler!r}: {exc}") from None
    try:
        futures = [client.submit(_run_chunk, seed, idx, families, pure=False) for idx in tasks]
        for fut in futures:
            yield fut.result()
            fut.release()
    finally:
        if own:
            client.close()


def generate(
    n_cases: int,
    out_dir: str | Path,
    *,
    seed: int,
    design_file: str | Path | Sequence[str | Path] | None = None,
    workers: int | None = None,
    scheduler: Any = None,
    write_comtrade: bool = False,
    progress: bool = True,
) -> dict[str, Any]:
    """Simulate ``n_cases`` labelled record pairs and store them in ``out_dir``.

    Parameters
    ----------
    n_cases : int
        Number of cases (record pairs), >= 1.
    out_dir : str or Path
        Output directory; created if missing; must not already hold a data set.
    seed : int
        Root seed (>= 0); the same seed gives the same data whatever ``workers`` or ``scheduler``.
    design_file : str, Path or sequence, optional
        Winding family TOML file(s) or bundled family names; default: all bundled families.
    workers : int, optional
        Local worker processes (joblib/loky); default: the number of CPUs. 1 runs in this process.
    scheduler : str or distributed.Client, optional
        Address of a running Dask distributed scheduler (``tcp://host:8786``) or a client; the cases
        then run on that cluster (whose workers must have shotcheck installed) and ``workers`` is
        ignored. Results come back to this process, which writes every file, so the workers need
        no shared file system.
    write_comtrade : bool
        Also write every record as COMTRADE (``comtrade/case_NNNNNN_reference.cfg``...).
    progress : bool
        Show a tqdm progress bar on stderr.

    Returns
    -------
    dict
        The manifest written to ``manifest.json`` (includes ``elapsed_s`` and ``pairs_per_s``).

    Raises
    ------
    ShotcheckError
        Bad arguments, a bad design file, an existing data set in ``out_dir``, or an unreachable
        scheduler.
    """
    if isinstance(n_cases, bool) or not isinstance(n_cases, int | np.integer) or n_cases < 1:
        raise ShotcheckError(f"n_cases must be a whole number >= 1, got {n_cases!r}")
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise ShotcheckError(f"seed must be a whole number >= 0, got {seed!r}")
    if workers is not None:
        if isinstance(workers, bool) or not isinstance(workers, int | np.integer) or workers < 1:
            raise ShotcheckError(f"workers must be a whole number >= 1, got {workers!r}")
    families = _families(design_file)
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise ShotcheckError(f"{out}: exists and is not a directory")
    if (out / "manifest.json").exists() or (out / "labels.csv").exists():
        raise ShotcheckError(f"{out}: already holds a data set; choose an empty or new directory")
    out.mkdir(parents=True, exist_ok=True)
    write = None
    if write_comtrade:
        try:
            from detector.formats import write
        except ImportError:
            raise ShotcheckError("COMTRADE output needs detector.formats.write, which is not available") from None
        (out / "comtrade").mkdir(exist_ok=True)
    n_cases, seed = int(n_cases), int(seed)
    # chunking only balances the load: case i's data does not depend on it
    w = 1 if scheduler is not None else (workers if workers is not None else (os.cpu_count() or 1))
    size = max(1, min(CHUNK_SIZE, n_cases // (4 * w) if scheduler is None else n_cases // 8))
    tasks = [list(range(s, min(s + size, n_cases))) for s in range(0, n_cases, size)]
    if scheduler is not None:
        results = _iter_dask(tasks, seed, families, scheduler)
        where = f"dask:{scheduler}" if isinstance(scheduler, str) else "dask"
    else:
        w = max(1, min(w, len(tasks)))
        results = _iter_local(tasks, seed, families, w)
        where = f"local:{w}"

    from tqdm import tqdm

    t0 = time.perf_counter()
    rows: list[dict[str, Any]] = []
    pending: list[dict[str, Any]] = []
    shard = 0
    with tqdm(total=n_cases, disable=not progress, file=sys.stderr, unit="pair", desc="synth") as bar:
        for chunk in results:
            for case in chunk:
                case["label"].update(shard=shard, index_in_shard=len(pending))
                pending.append(case)
                if write is not None:
                    cid = case["label"]["case_id"]
                    for r, name in (("ref", "reference"), ("test", "test")):
                        rec = _decode(case[r]["U"], case[r]["I"], np.asarray(case[r]["lsb"]), case[r]["dt"],
                                      case[r]["meta"], "")
                        write(rec, out / "comtrade" / f"case_{cid:06d}_{name}.cfg", data_format="BINARY")
                if len(pending) == SHARD_SIZE:
                    _write_npz(out / _shard_name(shard), _shard_arrays(pending))
                    rows.extend(c["label"] for c in pending)
                    pending, shard = [], shard + 1
            bar.update(len(chunk))
    if pending:
        _write_npz(out / _shard_name(shard), _shard_arrays(pending))
        rows.extend(c["label"] for c in pending)
    elapsed = time.perf_counter() - t0
    _write_labels(out / "labels.csv", rows)
    counts = {}
    for r in rows:
        counts[r["event"]] = counts.get(r["event"], 0) + 1
    manifest = {
        "format_version": FORMAT_VERSION,
        "n_cases": n_cases,
        "seed": seed,
        "shard_size": SHARD_SIZE,
        "n_shards": shard + (1 if pending else 0),
        "families": [{"name": f.name, "source": f.source, "values": _finite_json(dict(f.values))}
                     for f in families],
        "event_counts": counts,
        "columns": list(LABEL_COLUMNS),
        "runner": where,
        "elapsed_s": elapsed,
        "pairs_per_s": n_cases / max(elapsed, 1e-9),
        "comtrade": bool(write_comtrade),
    }
    (out / "manifest.json").write_text(json.dumps(manifest, indent=2, default=_json_value, allow_nan=False),
                                       encoding="utf-8")
    return manifest


def _finite_json(obj: Any) -> Any:
    """Non-finite floats as text ('inf'), so manifest.json stays strict JSON."""
    if isinstance(obj, float) and not math.isfinite(obj):
        return str(obj)
    if isinstance(obj, dict):
        return {k: _finite_json(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_finite_json(v) for v in obj]
    return obj


def _json_value(v: Any) -> Any:
    if isinstance(v, np.generic):
        return v.item()
    raise TypeError(f"not JSON serialisable: {type(v).__name__}")
