"""Writing COMTRADE records (see :mod:`detector.formats.comtrade` for the choices the writer makes)."""

from __future__ import annotations

import datetime as dt
import math
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from .._validation import RecordError, ShotcheckError
from ..record import Record
from ..units import QUANTITY_UNITS
from ._comtrade_spec import (
    _TS_MAX,
    CODE_RANGE,
    DATA_TYPES,
    REVISIONS,
    SUFFIXES,
    _binary_dtype,
    _Cfg,
    _format_inf,
)

__all__ = ["choose_timemult", "write"]


# ---- writing -----------------------------------------------------------------------------------


def choose_timemult(sample_interval_s: float, last_time_s: float, data_type: str) -> float:
    """Choose ``timemult`` (a power of ten, in microseconds per time-stamp tick).

    The tick is the largest power of ten that divides the sample interval exactly (1 ns at 1 GS/s,
    so ``timemult = 0.001``), at most 1 us; if none does, it is 1/1000 of the interval's decade.
    It is coarsened if the last time stamp would not fit its field.

    Parameters
    ----------
    sample_interval_s : float
        Sample interval [s].
    last_time_s : float
        Time of the last sample relative to time stamp 0 [s].
    data_type : str
        ``'ASCII'`` (10-digit stamps) or a binary type (unsigned 32-bit stamps).

    Returns
    -------
    float
        ``timemult``; a tick is ``timemult`` microseconds.
    """
    dec = math.floor(math.log10(sample_interval_s))
    k = None
    for e in range(min(dec, -6), dec - 13, -1):
        r = sample_interval_s / 10.0**e
        if abs(r - round(r)) <= 1e-9 * r:
            k = e
            break
    if k is None:
        k = min(dec - 3, -6)
    limit = _TS_MAX["ASCII" if data_type == "ASCII" else "BINARY"]
    while last_time_s / 10.0**k > limit:
        k += 1
    return float(f"1e{k + 6}")


def _format_dt(t: dt.datetime) -> str:
    return t.strftime("%d/%m/%Y,%H:%M:%S.%f")


def _check_field(text: str, what: str, path: str) -> str:
    if "," in text or "\n" in text or "\r" in text:
        raise RecordError(f"{what} {text!r} contains a comma or line break, which COMTRADE cannot store",
                          path=path, field=what)
    return text


def write(
    record: Record,
    path: str | os.PathLike,
    *,
    data_format: str = "ASCII",
    revision: int = 2013,
    timemult: float | None = None,
    timestamps_only: bool = False,
) -> None:
    """Write a record as COMTRADE: ``.cfg`` + ``.dat`` (+ ``.inf``), or one ``.cff`` file.

    Parameters
    ----------
    record : Record
        Record to write; every channel is written as an analog channel in its source unit.
    path : str or path-like
        ``.cfg`` (siblings ``.dat``/``.inf`` get the same stem) or ``.cff`` (revision 2013 only).
    data_format : {'ASCII', 'BINARY', 'BINARY32', 'FLOAT32'}
        Data file type; BINARY32 and FLOAT32 need revision 2013.
    revision : {1999, 2013}
        Revision year of IEEE C37.111.
    timemult : float, optional
        Time stamp tick in microseconds; chosen automatically by :func:`choose_timemult` if None.
    timestamps_only : bool
        Write ``nrates = 0`` so that the time stamps carry the time base.

    Raises
    ------
    ShotcheckError
        Bad option combination (e.g. FLOAT32 with 1999, .cff with 1999).
    RecordError
        Names or metadata the format cannot hold, or a time axis that does not fit the time stamps.
    """
    sp = str(path)
    p = Path(path)
    fmt = str(data_format).upper()
    if fmt not in DATA_TYPES:
        raise ShotcheckError(
            f"Invalid value for 'data_format': {data_format!r}. Allowed values are 'ASCII', 'BINARY', "
            "'BINARY32' and 'FLOAT32'."
        )
    if revision not in REVISIONS:
        raise ShotcheckError(f"Invalid value for 'revision': {revision!r}. Allowed values are 1999 and 2013.")
    if revision not in DATA_TYPES[fmt]:
        raise ShotcheckError(f"data_format {fmt} needs revision 2013 (C37.111-1999 has ASCII and BINARY only)")
    cff = p.suffix.lower() == ".cff"
    if cff and revision != 2013:
        raise ShotcheckError("the single-file .cff format exists in revision 2013 only")
    if p.suffix.lower() not in SUFFIXES:
        raise ShotcheckError(f"COMTRADE file name must end in .cfg or .cff, got {p.name!r}")

    n = record.n_samples
    dt_s = record.sample_interval_s
    t0 = record.start_time_s
    tm = timemult if timemult is not None else choose_timemult(dt_s, max(t0, 0.0) + record.duration_s, fmt)
    tick = tm * 1e-6
    ts0 = math.floor(t0 / tick) if t0 >= 0 else 0
    offset = t0 - ts0 * tick
    stamps = ts0 + np.rint(np.arange(n) * (dt_s / tick))
    limit = _TS_MAX["ASCII" if fmt == "ASCII" else "BINARY"]
    if stamps[-1] > limit:
        raise RecordError(
            f"last time stamp {stamps[-1]:.0f} exceeds {limit} with timemult {tm:g}; choose a larger timemult",
            path=sp, field="timemult",
        )
    if timestamps_only and np.any(np.abs((stamps - ts0) * tick - np.arange(n) * dt_s) > 1e-4 * dt_s):
        raise RecordError(
            f"time stamps with timemult {tm:g} cannot resolve the interval {dt_s:g} s; "
            "use a smaller timemult or a sample rate line", path=sp, field="timemult",
        )

    rows = [
        f"{_check_field(str(record.meta.get('lab', '')), 'station_name', sp)},"
        f"{_check_field(str(record.meta.get('unit_id', '')), 'rec_dev_id', sp)},{revision}",
        f"{len(record.channels)},{len(record.channels)}A,0D",
    ]
    codes = np.empty((n, len(record.channels)), dtype=np.float64)
    for k, c in enumerate(record.channels):
        unit = c.source_unit if c.source_unit in QUANTITY_UNITS else c.unit
        q, factor = QUANTITY_UNITS[unit]
        if q != c.quantity:
            unit, factor = c.unit, 1.0
        v = c.samples / factor
        if fmt == "FLOAT32":
            a, b = 1.0, 0.0
            codes[:, k] = v.astype(np.float32)
            lo, hi = repr(float(codes[:, k].min())), repr(float(codes[:, k].max()))
        else:
            big = CODE_RANGE[fmt]
            vmin, vmax = float(v.min()), float(v.max())
            b = 0.5 * (vmax + vmin)
            a = 0.5 * (vmax - vmin) / big
            if not a > 0:
                a = (abs(b) or 1.0) / big
            codes[:, k] = np.clip(np.rint((v - b) / a), -big, big)
            lo, hi = str(-big), str(big)
        name = _check_field(c.name, "channel name", sp)
        unit_text = "uA" if unit == "µA" else unit
        rows.append(f"{k + 1},{name},,,{unit_text},{a!r},{b!r},0,{lo},{hi},1,1,P")
    rows.append("50")  # nominal line frequency: no meaning for an impulse record, kept at a common value
    if timestamps_only:
        rows += ["0", f"0,{n}"]
    else:
        rows += ["1", f"{_rate_text(dt_s)},{n}"]
    when = _recorded_at(record.meta)
    rows += [_format_dt(when), _format_dt(when), fmt, f"{tm:.12g}"]
    if revision == 2013:
        rows += ["0,0", "0,0"]
    cfg_text = "\r\n".join(rows) + "\r\n"

    if fmt == "ASCII":
        table = np.column_stack([np.arange(1, n + 1, dtype=np.float64), stamps, codes]).astype(np.int64)
        row_fmt = ",".join(["%d"] * table.shape[1]) + "\r\n"
        dat = ((row_fmt * n) % tuple(table.ravel().tolist())).encode("ascii")
    else:
        cfg_stub = _Cfg("", "", revision, len(record.channels), 0, [], 1, [(1.0, n)], None, fmt, tm, 0)
        arr = np.zeros(n, dtype=_binary_dtype(cfg_stub))
        arr["n"] = np.arange(1, n + 1)
        arr["ts"] = stamps.astype(np.uint32)
        arr["x"] = codes
        dat = arr.tobytes()
    meta_to_write = {
        k: v for k, v in record.meta.items()
        if not str(k).startswith("comtrade_") and k != "channel_skew_s"
    }
    inf_needed = bool({k for k in meta_to_write if k != "source_format"}) or offset != 0.0
    inf_text = _format_inf(meta_to_write, offset, sp) if inf_needed else ""

    if cff:
        out = [b"--- file type: CFG ---\r\n", cfg_text.encode("utf-8"),
               b"--- file type: INF ---\r\n", inf_text.encode("utf-8"),
               b"--- file type: HDR ---\r\n"]
        if fmt == "ASCII":
            out += [b"--- file type: DAT ASCII ---\r\n", dat]
        else:
            out += [f"--- file type: DAT BINARY: {len(dat)} ---\r\n".encode("ascii"), dat]
        p.write_bytes(b"".join(out))
        return
    low = p.suffix.islower() or not p.suffix[1:].isupper()
    p.write_bytes(cfg_text.encode("utf-8"))
    p.with_suffix(".dat" if low else ".DAT").write_bytes(dat)
    inf_path = p.with_suffix(".inf" if low else ".INF")
    if inf_text:
        inf_path.write_bytes(inf_text.encode("utf-8"))
    elif inf_path.exists():
        inf_path.unlink()  # a stale INF from an earlier write would change the metadata read back


def _rate_text(sample_interval_s: float) -> str:
    """Shortest decimal text of the sample rate whose reciprocal gives back the interval."""
    rate = 1.0 / sample_interval_s
    for digits in range(6, 18):
        text = f"{rate:.{digits}g}"
        if abs(1.0 / float(text) - sample_interval_s) <= 1e-15 * sample_interval_s:
            return text
    return repr(rate)


def _recorded_at(meta: Mapping[str, Any]) -> dt.datetime:
    text = meta.get("recorded_at")
    if text:
        try:
            t = dt.datetime.fromisoformat(str(text))
            return t.replace(tzinfo=None)
        except ValueError:
            pass
    return dt.datetime(2000, 1, 1)
