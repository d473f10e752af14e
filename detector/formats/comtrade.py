"""COMTRADE records (IEEE C37.111-1999 and C37.111-2013 / IEC 60255-24:2013).

Reads and writes ``.cfg`` + ``.dat`` pairs (optionally with ``.inf``) in the data file types ASCII,
BINARY (16-bit), BINARY32 and FLOAT32 (the last two 2013 only), and the 2013 single-file ``.cff``
(sections ``--- file type: CFG ---``, ``INF``, ``HDR``, ``DAT ASCII`` or ``DAT BINARY: <bytes>``).

Reading
-------
* Analog values are ``a * x + b`` in the channel unit; with the ``S`` flag they are secondary values
  and are multiplied by ``primary / secondary``; then converted to SI by the unit.
* Channels whose unit is a voltage unit (V, mV, kV, MV) or a current unit (A, mA, uA, kA) become
  :class:`~detector.record.Channel` objects, in file order; other analog channels and all digital
  channels are ignored. Index arguments (``voltage_channel=1``) count those voltage/current channels
  from 0 in file order.
* Time axis: with a sample rate (``nrates >= 1``) the interval is ``1 / samp`` and the first sample's
  time stamp (``timestamp * timemult`` microseconds) is the start time (0 if missing). With
  ``nrates = 0`` the time stamps are critical and give the time of every sample; they must increase
  and be uniform. Several different sample rates in one file are refused (resample first).
* Metadata: ``station_name`` -> ``meta['lab']``, ``rec_dev_id`` -> ``meta['unit_id']``, first-sample
  date/time -> ``meta['recorded_at']`` (ISO 8601), revision and data type -> ``meta['comtrade_revision']``
  and ``meta['comtrade_data_type']``. If an INF part holds a ``[shotcheck record]`` section (written by
  :func:`write`), its ``key=value`` lines give the metadata instead, and its ``time_offset_s`` is added
  to the start time (COMTRADE time stamps cannot be negative; a record with pre-trigger samples keeps
  its time axis this way).

Writing
-------
* ``a`` and ``b`` are chosen per channel so the samples span the symmetric integer range
  (+/-99998 for ASCII, +/-32767 for BINARY, +/-2147483647 for BINARY32; the most negative code is
  the "missing" marker); FLOAT32 uses ``a = 1, b = 0``. Values are written in the channel's source
  unit (``kV``, ``A`` ...), flag ``P`` with ratios 1/1.
* ``timemult`` is chosen so that the integer time stamps resolve the sample interval (e.g. 0.001 at
  1 GS/s: 1 ns ticks) and the last stamp fits its field (10 digits ASCII, unsigned 32 bit binary);
  the sample rate line holds ``1 / sample_interval_s`` with all float digits.
* ``timestamps_only=True`` writes ``nrates = 0`` (time stamps critical) instead of a rate.

Clauses cited in comments are of IEEE C37.111-2013, recalled from memory (subclause titles are given
so a clause can be found if a number is off); the table of contents (clause 4.7 "Primary to
secondary ratios", clause 7 configuration file, 7.4.8 "date/time stamps") was seen in a secondary source.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
import os
import re
from pathlib import Path
from typing import Any

import numpy as np

from .._validation import FormatError, RecordError
from ..record import Channel, Record
from ._comtrade_spec import (
    _CFF_HEADER,
    _MISSING_INT,
    _TS_MISSING,
    CODE_RANGE,
    DATA_TYPES,
    REVISIONS,
    SUFFIXES,
    _Analog,
    _binary_dtype,
    _Cfg,
    _parse_inf,
)
from ._comtrade_write import choose_timemult, write
from .csv import check_finite_table, parse_table, unit_info

__all__ = ["is_format", "read", "write", "choose_timemult", "DATA_TYPES", "REVISIONS", "CODE_RANGE"]

def is_format(path: str | os.PathLike) -> bool:
    """Return True if ``path`` looks like a COMTRADE configuration or single file.

    Parameters
    ----------
    path : str or path-like
        ``.cfg`` or ``.cff`` file.

    Returns
    -------
    bool
        Suffix is ``.cfg``/``.cff`` and the first line has two or three comma-separated fields.
    """
    p = Path(path)
    if p.suffix.lower() not in SUFFIXES:
        return False
    try:
        with open(p, "rb") as f:
            head = f.read(512)
    except OSError:
        return False
    if p.suffix.lower() == ".cff":
        return bool(_CFF_HEADER.search(head))
    first = head.split(b"\n", 1)[0]
    return first.count(b",") in (1, 2) and b"\x00" not in first


# ---- CFG parsing -------------------------------------------------------------------------------


def _decode_text(data: bytes, path: str, what: str) -> str:
    if b"\x00" in data:
        raise FormatError(f"not a text file (it holds NUL bytes); expected the {what} text", path=path)
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        text = data.decode("latin-1")  # 1999 files are ASCII; some writers use Latin-1 in names
    return text.lstrip("\ufeff").replace("\x1a", "")


def _num(text: str, kind: type, path: str, field: str, what: str) -> Any:
    try:
        v = kind(text.strip())
    except ValueError:
        raise FormatError(f"{text.strip()!r} is not {what}", path=path, field=field) from None
    if kind is float and not math.isfinite(v):
        raise FormatError(f"{text.strip()!r} is not {what}", path=path, field=field)
    return v


def _parse_datetime(line: str) -> dt.datetime | None:
    m = re.match(
        r"\s*(\d{1,2})/(\d{1,2})/(\d{4})\s*,\s*(\d{1,2}):(\d{1,2}):(\d{1,2})(?:\.(\d{1,9}))?\s*$", line
    )
    if not m:
        return None
    d, mo, y, h, mi, s, frac = m.groups()
    us = int((frac or "0").ljust(9, "0")[:6])
    try:
        return dt.datetime(int(y), int(mo), int(d), int(h), int(mi), int(s), us)
    except ValueError:
        return None


def _parse_cfg(text: str, path: str) -> _Cfg:
    """Parse CFG text (clause 7 "Configuration file" of C37.111-2013, from memory)."""
    lines = text.splitlines()
    pos = 0

    def take(expect: str) -> tuple[str, str]:
        nonlocal pos
        if pos >= len(lines):
            raise FormatError(
                f"configuration ends after line {len(lines)}; expected {expect}",
                path=path, field=f"line {pos + 1}",
            )
        pos += 1
        return lines[pos - 1], f"line {pos}"

    # line 1: station_name,rec_dev_id,rev_year (7.4.2 "station name, identification and revision year", from memory)
    line, where = take("station_name,rec_dev_id,rev_year")
    f = line.split(",")
    if len(f) == 2 or (len(f) == 3 and not f[2].strip()):
        raise FormatError(
            "no revision year (1991 layout); supported revisions: 1999, 2013", path=path, field=where
        )
    if len(f) != 3:
        raise FormatError(
            f"has {len(f)} fields, expected 3: station_name,rec_dev_id,rev_year (is this a COMTRADE "
            "configuration file?)", path=path, field=where,
        )
    station, device, rev_text = f[0].strip(), f[1].strip(), f[2].strip()
    if rev_text not in ("1999", "2013"):
        raise FormatError(
            f"unsupported revision year {rev_text[:20]!r}; supported: 1999, 2013", path=path, field=where
        )
    revision = int(rev_text)
    # line 2: TT,##A,##D (7.4.3 "number and type of channels", from memory)
    line, where = take("the channel counts TT,##A,##D")
    f = [x.strip() for x in line.split(",")]
    if len(f) != 3 or not f[1][-1:].upper() == "A" or not f[2][-1:].upper() == "D":
        raise FormatError(
            f"{line.strip()[:60]!r} is not a channel count line; expected TT,##A,##D (e.g. 3,2A,1D)",
            path=path, field=where,
        )
    total = _num(f[0], int, path, where, "a channel count")
    n_a = _num(f[1][:-1], int, path, where, "an analog channel count")
    n_d = _num(f[2][:-1], int, path, where, "a digital channel count")
    if total != n_a + n_d or n_a < 0 or n_d < 0:
        raise FormatError(
            f"wrong channel count: total {total} but {n_a} analog + {n_d} digital = {n_a + n_d}",
            path=path, field=where,
        )
    # analog channel lines: An,ch_id,ph,ccbm,uu,a,b,skew,min,max,primary,secondary,PS (7.4.4 "analog channel information")
    analogs = []
    for k in range(n_a):
        line, where = take(f"analog channel line {k + 1} of {n_a}")
        f = line.split(",")
        if len(f) != 13:
            raise FormatError(
                f"analog channel line has {len(f)} fields, expected 13: "
                "An,ch_id,ph,ccbm,uu,a,b,skew,min,max,primary,secondary,PS", path=path, field=where,
            )
        name = f[1].strip()
        a = _num(f[5], float, path, f"{where}, field a", "a number (channel multiplier a)")
        b = _num(f[6] or "0", float, path, f"{where}, field b", "a number (channel offset b)")
        skew = _num(f[7] or "0", float, path, f"{where}, field skew", "a number (time skew in us)")
        prim = _num(f[10] or "1", float, path, f"{where}, field primary", "a number (primary ratio)")
        sec = _num(f[11] or "1", float, path, f"{where}, field secondary", "a number (secondary ratio)")
        ps = f[12].strip().upper()
        if ps not in ("P", "S"):
            raise FormatError(
                f"primary/secondary flag is {f[12].strip()!r}; expected P or S", path=path, field=where
            )
        if ps == "S" and (prim <= 0 or sec <= 0):
            raise FormatError(
                f"primary {prim:g} and secondary {sec:g} must be positive to convert secondary values",
                path=path, field=where,
            )
        if a == 0:
            raise FormatError("channel multiplier a is 0; expected a non-zero number", path=path, field=where)
        analogs.append(_Analog(k, name, f[4].strip(), a, b, skew, prim, sec, ps))
    # digital (status) channel lines: Dn,ch_id,ph,ccbm,y (7.4.5 "status channel information"); parsed for layout only
    for k in range(n_d):
        take(f"digital channel line {k + 1} of {n_d}")
    # line frequency (7.4.6)
    take("the line frequency")
    # sampling rate information (7.4.7)
    line, where = take("the number of sample rates nrates")
    nrates = _num(line, int, path, where, "a number of sample rates (nrates)")
    if nrates < 0:
        raise FormatError(f"nrates is {nrates}; expected 0 or more", path=path, field=where)
    rates = []
    for _ in range(max(nrates, 1)):
        line, where = take("a sample rate line samp,endsamp")
        f = line.split(",")
        if len(f) != 2:
            raise FormatError(
                f"bad sample-rate line {line.strip()[:60]!r}; expected samp,endsamp (e.g. 100000000,20000)",
                path=path, field=where,
            )
        samp = _num(f[0], float, path, where, "a sample rate in Hz (samp)")
        end = _num(f[1], int, path, where, "a last sample number (endsamp)")
        if nrates > 0 and samp > 0 and not math.isfinite(1.0 / samp):
            raise FormatError(f"bad sample-rate line: samp = {f[0].strip()!r} Hz gives no finite sample interval; "
                              "expected the rate in Hz (e.g. 100000000)", path=path, field=where)
        if nrates > 0 and samp <= 0:
            raise FormatError(
                f"bad sample-rate line: samp = {f[0].strip()!r}; expected a rate > 0 Hz (nrates = {nrates})",
                path=path, field=where,
            )
        if nrates == 0 and samp != 0:
            raise FormatError(
                f"bad sample-rate line: nrates is 0 but samp = {f[0].strip()!r}; expected 0",
                path=path, field=where,
            )
        if end < 1 or (rates and end <= rates[-1][1]):
            raise FormatError(
                f"bad sample-rate line: endsamp {end} must be positive and increasing", path=path, field=where
            )
        rates.append((samp, end))
    if len({r for r, _ in rates}) > 1:
        raise FormatError(
            f"{len(rates)} different sample rates ({', '.join(f'{r:g} Hz' for r, _ in rates)}); "
            "only records with one sample rate are supported (resample first)", path=path,
            field="sample rates",
        )
    # date/time of first data point and of trigger (7.4.8 "date/time stamps", seen)
    line, _ = take("the date/time of the first data point")
    first = _parse_datetime(line)
    take("the date/time of the trigger point")
    # data file type (7.4.9)
    line, where = take("the data file type (ASCII, BINARY, BINARY32 or FLOAT32)")
    data_type = line.strip().upper()
    if data_type not in DATA_TYPES:
        raise FormatError(
            f"unknown data file type {line.strip()[:30]!r}; expected ASCII, BINARY, BINARY32 or FLOAT32",
            path=path, field=where,
        )
    if revision not in DATA_TYPES[data_type]:
        raise FormatError(
            f"data file type {data_type} needs revision 2013, the file says {revision}", path=path, field=where
        )
    # time stamp multiplication factor (7.4.10)
    timemult = 1.0
    if pos < len(lines) and lines[pos].strip():
        line, where = take("timemult")
        timemult = _num(line, float, path, where, "a time multiplier (timemult)")
        if timemult <= 0:
            raise FormatError(f"timemult is {timemult:g}; expected a positive number", path=path, field=where)
    # 2013: time_code,local_code and tmq_code,leapsec (7.4.11-12) are not needed here
    return _Cfg(station, device, revision, n_a, n_d, analogs, nrates, rates, first, data_type, timemult, len(lines))


# ---- DAT parsing -------------------------------------------------------------------------------


def _parse_dat(data: bytes, cfg: _Cfg, path: str) -> tuple[np.ndarray, np.ndarray]:
    """Return (time stamps as float64 with NaN where missing, analog codes (n, n_analog) float64)."""
    n = cfg.n_samples
    names = [a.name for a in cfg.analogs]
    if cfg.data_type == "ASCII":
        if b"\x00" in data:
            raise FormatError("ASCII data file holds binary bytes (NUL); expected text lines", path=path)
        ncols = 2 + cfg.n_analog + cfg.n_digital
        # CR LF, LF, or CR alone (old recorders) all end a line
        body = data.replace(b"\r\n", b"\n").replace(b"\r", b"\n") if b"\r" in data else data
        body = body.rstrip(b"\n\x1a \t")
        if not body:
            raise FormatError(f"data file is empty; the configuration says {n} samples", path=path)
        if b",," in body or b",\n" in body or body.endswith(b","):
            # blank fields: time stamps are non-critical when a sample rate is given (clause 4.2 "critical/non-critical data", seen in the contents)
            body = body.replace(b",,", b",nan,").replace(b",,", b",nan,").replace(b",\n", b",nan\n")
            if body.endswith(b","):
                body += b"nan"
        cols = ["sample number", "time stamp", *names, *[f"digital {k + 1}" for k in range(cfg.n_digital)]]
        table = parse_table(
            body, sep=",", ncols=ncols, path=path, first_line=1, column_names=cols, integers=True
        )
        rows = table.shape[0]
        if rows != n:
            _count_error(rows, n, path, "lines")
        ts = table[:, 1]
        x = table[:, 2 : 2 + cfg.n_analog]
        if not np.isfinite(x).all():
            bad = ~np.isfinite(x)
            r, c = np.unravel_index(int(np.argmax(bad)), x.shape)
            if np.isnan(x[r, c]):  # a blank field (read as NaN above): a missing value, not a number 'nan'
                raise FormatError(f"empty field in column {c + 3} ({names[c]}): an analog value is missing; "
                                  "every analog field of a compared record needs a value",
                                  path=path, field=f"line {int(r) + 1}")
            check_finite_table(x, path=path, first_line=1, column_names=names)
        missing = x == _MISSING_INT["ASCII"]
        _check_missing(missing, names, path, "line")
        return ts, x
    dtype = _binary_dtype(cfg)
    rows = len(data) // dtype.itemsize
    if len(data) != n * dtype.itemsize:
        if not data:
            raise FormatError(f"the data file is empty; the configuration says {n} samples "
                              f"({n * dtype.itemsize} bytes)", path=path)
        if len(data) < n * dtype.itemsize:
            raise FormatError(
                f"truncated data: {len(data)} bytes hold {rows} samples of {dtype.itemsize} bytes, the "
                f"configuration says {n} samples ({n * dtype.itemsize} bytes)", path=path,
            )
        raise FormatError(
            f"data file has {len(data)} bytes, expected {n * dtype.itemsize} ({n} samples of "
            f"{dtype.itemsize} bytes); is the channel count or data file type wrong?", path=path,
        )
    rec = np.frombuffer(data, dtype=dtype, count=n)
    ts = rec["ts"].astype(np.float64)
    ts[rec["ts"] == _TS_MISSING] = np.nan
    if cfg.n_analog:
        raw = rec["x"]
        x = raw.astype(np.float64)
    else:
        raw = np.zeros((n, 0))
        x = np.zeros((n, 0))
    if cfg.data_type == "FLOAT32":
        if not np.isfinite(x).all():
            check_finite_table(x, path=path, first_line=1, column_names=names, what="sample")
    else:
        _check_missing(raw == _MISSING_INT[cfg.data_type], names, path, "sample")
    return ts, x


def _count_error(found: int, expected: int, path: str, what: str) -> None:
    if found < expected:
        raise FormatError(
            f"truncated data: {found} samples ({what}) found, the configuration says {expected} (endsamp)",
            path=path,
        )
    raise FormatError(
        f"data file has {found} samples ({what}), the configuration says {expected} (endsamp)", path=path
    )


def _check_missing(missing: np.ndarray, names: list[str], path: str, what: str) -> None:
    if missing.any():
        r, c = np.unravel_index(int(np.argmax(missing)), missing.shape)
        raise FormatError(
            f"channel {names[c]!r} has a missing-data code at sample {int(r) + 1}; a complete record is "
            "required", path=path, field=f"{what} {int(r) + 1}",
        )


# ---- reading -----------------------------------------------------------------------------------


def _read_bytes(path: Path, what: str, owner: str | None = None) -> bytes:
    try:
        return path.read_bytes()
    except FileNotFoundError:
        if owner:
            raise RecordError(f"{what} {path.name!r} not found next to {owner!r}", path=str(path)) from None
        raise RecordError("file not found", path=str(path)) from None
    except OSError as e:
        raise RecordError(f"cannot read the {what} ({e.strerror})", path=str(path)) from None


def _sibling(path: Path, ext: str) -> Path:
    """Sibling with the same stem; the suffix case follows the configuration file's suffix."""
    for cand in (ext.upper() if path.suffix.isupper() else ext.lower(), ext.lower(), ext.upper()):
        q = path.with_suffix("." + cand)
        if q.exists():
            return q
    return path.with_suffix("." + (ext.upper() if path.suffix.isupper() else ext.lower()))


def _next_cff_header(data: bytes, pos: int) -> re.Match[bytes] | None:
    """Next section line at or after ``pos`` (bytes.find skips data fast; the regex checks the line)."""
    while True:
        k = data.find(b"---", pos)
        if k < 0:
            return None
        if k == 0 or data[k - 1:k] == b"\n":
            m = _CFF_HEADER.match(data, k)
            if m:
                return m
        pos = k + 3


def _split_cff(data: bytes, path: str) -> tuple[str, bytes, str, str]:
    """Split a .cff into (cfg text, dat bytes, dat section word, inf text) (single-file format of 2013, from memory)."""
    if not data.strip():
        raise FormatError("file is empty; expected a '--- file type: CFG ---' section", path=path)
    parts: dict[str, Any] = {}
    pos = 0
    first = True
    while True:
        m = _next_cff_header(data, pos)
        if m is None:
            if first:
                raise FormatError(
                    "no '--- file type: CFG ---' section line; is this a COMTRADE .cff file?", path=path
                )
            break
        if first and data[:m.start()].strip():
            raise FormatError("text before the first '--- file type: ... ---' line", path=path, field="line 1")
        first = False
        kind = m.group(1).decode("ascii").upper()
        word = (m.group(2) or b"").decode("ascii").upper()
        start = m.end() + (2 if data[m.end():m.end() + 2] == b"\r\n" else 1)
        line_no = data[: m.start()].count(b"\n") + 1
        if kind not in ("CFG", "INF", "HDR", "DAT"):
            raise FormatError(
                f"unknown section type {kind!r}; expected CFG, INF, HDR or DAT", path=path, field=f"line {line_no}"
            )
        if kind == "DAT":
            if word not in DATA_TYPES:
                raise FormatError(
                    f"unknown data section type {word or '(none)'!r}; expected DAT ASCII or DAT BINARY: <bytes>",
                    path=path, field=f"line {line_no}",
                )
            if word != "ASCII":
                if m.group(3) is None:
                    raise FormatError(
                        "binary data section without a byte count; expected '--- file type: DAT BINARY: <n> ---'",
                        path=path, field=f"line {line_no}",
                    )
                nbytes = int(m.group(3))
                parts["DAT"] = (data[start : start + nbytes], word, line_no)
                pos = start + nbytes
                continue
        nxt = _next_cff_header(data, start)
        end = nxt.start() if nxt else len(data)
        parts[kind] = (data[start:end], word, line_no)
        pos = end
        if nxt is None:
            break
    if "CFG" not in parts:
        raise FormatError("no '--- file type: CFG ---' section", path=path)
    if "DAT" not in parts:
        raise FormatError("no '--- file type: DAT ... ---' section; the samples are missing", path=path)
    cfg_text = _decode_text(parts["CFG"][0], path, "CFG section")
    inf_text = _decode_text(parts["INF"][0], path, "INF section") if "INF" in parts else ""
    return cfg_text, parts["DAT"][0], parts["DAT"][1], inf_text


def read(
    path: str | os.PathLike,
    *,
    voltage_channel: str | int | None = None,
    current_channel: str | int | None = None,
) -> Record:
    """Read a COMTRADE record (``.cfg`` with its ``.dat``, or a ``.cff``).

    Parameters
    ----------
    path : str or path-like
        Configuration file ``.cfg`` (the ``.dat`` and optional ``.inf`` have the same stem) or
        single file ``.cff``.
    voltage_channel, current_channel : str or int, optional
        Channel id (``ch_id``) or 0-based index among the voltage/current channels, file order.

    Returns
    -------
    Record
        Voltage and current channels in V and A, primary values; ``meta['source_format']`` is
        ``'COMTRADE'``; see the module docstring for the time axis and metadata.

    Raises
    ------
    RecordError, FormatError
        Naming the file, the line or field, and what was expected.
    """
    with np.errstate(all="ignore"):  # overflow in a*x+b etc. is caught as non-finite samples
        return _read(path, voltage_channel=voltage_channel, current_channel=current_channel)


def _read(
    path: str | os.PathLike,
    *,
    voltage_channel: str | int | None,
    current_channel: str | int | None,
) -> Record:
    p = Path(path)
    sp = str(path)
    if p.suffix.lower() == ".cff":
        cfg_text, dat, word, inf_text = _split_cff(_read_bytes(p, "file"), sp)
        cfg = _parse_cfg(cfg_text, sp)
        if (word == "ASCII") != (cfg.data_type == "ASCII"):
            raise FormatError(
                f"data section is DAT {word} but the configuration's data file type is {cfg.data_type}",
                path=sp,
            )
        dat_path = sp
    else:
        raw = _read_bytes(p, "file")
        if not raw.strip():
            raise FormatError("file is empty; expected a COMTRADE configuration", path=sp)
        cfg = _parse_cfg(_decode_text(raw, sp, "configuration"), sp)
        dp = _sibling(p, "dat")
        dat = _read_bytes(dp, "data file", owner=p.name)
        dat_path = str(dp)
        ip = _sibling(p, "inf")
        inf_text = _decode_text(_read_bytes(ip, "INF file"), str(ip), "INF") if ip.exists() else ""
    ts, x = _parse_dat(dat, cfg, dat_path)
    unit_s = cfg.timemult * 1e-6
    private = _parse_inf(inf_text) if inf_text else None
    offset = 0.0
    if private and "time_offset_s" in private:
        offset = _num(str(private.pop("time_offset_s")), float, sp, "INF time_offset_s", "a time in seconds")

    chans: list[Channel] = []
    skipped: dict[str, str] = {}
    skews: dict[str, float] = {}
    for an in cfg.analogs:
        try:
            q, factor, canon = unit_info(an.unit)
        except RecordError:  # not a voltage or current: ignored (e.g. frequency, temperature)
            skipped[an.name] = an.unit
            continue
        vals = an.a * x[:, an.index] + an.b
        if an.ps == "S":
            vals = vals * (an.primary / an.secondary)
        try:
            chans.append(Channel(an.name or f"channel {an.index + 1}", q, vals * factor, source_unit=canon))
        except RecordError as e:  # e.g. a huge multiplier overflowing to inf: name the file too
            raise RecordError(e.detail, path=sp, field=e.field) from None
        if an.skew_us:
            skews[chans[-1].name] = an.skew_us * 1e-6
    for key in (voltage_channel, current_channel):
        if isinstance(key, str) and key in skipped and key not in [c.name for c in chans]:
            raise RecordError(
                f"channel {key!r} has unit {skipped[key]!r}, which is not a voltage or current unit "
                "(V, mV, kV, MV, A, mA, uA, kA)", path=sp, field="channel",
            )
    if not any(c.quantity == "voltage" for c in chans):
        listing = ", ".join(
            f"{a.name!r} [{a.unit}]" + (" (unknown unit, ignored)" if a.name in skipped else "")
            for a in cfg.analogs
        ) or "none"
        raise RecordError(
            f"no voltage channel: no analog channel has a voltage unit (V, mV, kV, MV); channels: {listing}",
            path=sp, field="channels",
        )

    if private is not None:
        meta: dict[str, Any] = dict(private)
    else:
        meta = {}
        if cfg.station:
            meta["lab"] = cfg.station
        if cfg.device:
            meta["unit_id"] = cfg.device
        if cfg.first_time is not None and cfg.first_time.year > 1:
            meta["recorded_at"] = cfg.first_time.isoformat()
    meta["source_format"] = "COMTRADE"
    meta["comtrade_revision"] = cfg.revision
    meta["comtrade_data_type"] = cfg.data_type
    if skews:
        meta["channel_skew_s"] = skews
    if skipped:  # channels left out for their units: an error about a missing channel lists them
        meta["comtrade_ignored_channels"] = dict(skipped)

    if cfg.nrates > 0:
        start = 0.0 if np.isnan(ts[0]) else ts[0] * unit_s
        interval = 1.0 / cfg.rates[0][0]
        if not abs(start + offset) * 2.0**-52 < 1e-3 * interval:  # also NaN and inf
            # a start so late that float times no longer resolve the sample interval: not a time in seconds
            raise FormatError(f"the first time stamp {ts[0]:.0f} times timemult {cfg.timemult:g} us gives a start "
                              f"time of {start + offset:.3g} s, too large to resolve the {interval:.3g} s sample "
                              "interval; expected timemult in microseconds (e.g. 1 or 0.001)", path=sp,
                              field="timemult")
        rec = Record(start + offset, 1.0 / cfg.rates[0][0], tuple(chans), meta=meta, source=sp)
    else:
        bad = np.isnan(ts)
        if bad.any():
            i = int(np.argmax(bad))
            raise FormatError(
                "time stamp missing although nrates = 0 makes time stamps critical", path=dat_path,
                field=f"sample {i + 1}",
            )
        d = np.diff(ts)
        if (d <= 0).any():
            i = int(np.argmax(d <= 0))
            raise FormatError(
                f"time stamps go backwards or repeat ({ts[i + 1]:.0f} after {ts[i]:.0f}); they must increase",
                path=dat_path, field=f"sample {i + 2}",
            )
        # whole ticks of timemult: a rate that is no whole number of ticks alternates by one tick
        rec = Record.from_times(ts * unit_s + offset, chans, meta=meta, source=sp, atol=1.01 * unit_s)
    if skews:
        # a channel's skew (7.4.4: the time from the start of the sample period to its sampling instant)
        # puts its samples that much later than the time stamps say: each skewed channel is moved back onto
        # the common time base (a Fourier phase shift), so the voltage and the current line up in time
        # (left as they were, a skew between them read as a phase of the winding's transfer function)
        from ..preprocess import shift_fourier

        interval_s = rec.sample_interval_s
        rec = rec.replace(channels=tuple(
            dataclasses.replace(c, samples=shift_fourier(c.samples, skews[c.name], interval_s)) if c.name in skews
            else c
            for c in rec.channels), step="channel skew applied: " + ", ".join(
                f"{k} {v * 1e6:g} us" for k, v in skews.items()))
    if voltage_channel is not None or current_channel is not None:
        rec = rec.select(voltage_channel, current_channel)
    return rec
