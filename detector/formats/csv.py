"""CSV impulse records: a time column and voltage/current columns whose headers name their units.

Layout
------
::

    # shot_kind: reduced
    # level_percent: 60
    # unit_id: T-0815
    time_us,voltage_kV,current_A
    0,0.012,0.0001
    0.01,0.013,0.0002
    ...

Rules
-----
* **Metadata**: lines before the header that start with ``#`` and hold ``key: value`` become
  ``Record.meta[key] = value`` (text, blanks around key and value removed). Known keys are
  ``shot_kind``, ``level_percent``, ``terminal``, ``unit_id``, ``shot_id``, ``lab`` and ``recorded_at``;
  other keys become numbers or booleans when the text is exactly how Python writes that value
  (``bits: 12``, ``noise_V: 0.25``), text otherwise. A ``#`` line without a colon is a free comment and is ignored. Comment
  lines are only allowed before the header.
* **Header**: the first non-comment line. Each cell is ``<name>_<unit>`` (unit after the *last*
  underscore, e.g. ``voltage_kV``, ``neutral_current_mA``) or ``<name> [<unit>]`` (e.g. ``U1 [kV]``).
  Blanks and double quotes around a cell are ignored.
* **Time column**: the first column, named ``time`` or ``t`` in any case, with unit ``s``, ``ms``, ``us``
  or ``ns``. Its values are the record's own time axis; they must increase uniformly.
* **Channel columns**: every other column; the unit decides the quantity (``V``, ``mV``, ``kV``, ``MV``
  -> voltage, ``A``, ``mA``, ``uA``, ``kA`` -> current) and the name part becomes the channel name.
  Any other unit is an error (a CSV is written for this tool, so an unknown unit is a mistake).
* **Separator**: comma, semicolon or tab, detected from the header (the first of ``;``, tab, ``,``
  found). Decimal point only: a decimal comma is reported as an error.
* **Values**: plain numbers; ``nan``, ``inf`` or an empty field is an error naming line and column.

The writer produces exactly this layout (comma separated, ``time_s``, each channel as
``<name>_<source unit>``, one ``# key: value`` line per metadata item) so a round trip keeps samples,
time base and metadata. Values are written with 17 significant digits (exact float64 round trip).

Parsing is vectorised: the numbers are converted by :func:`numpy.loadtxt` (C parser); only when that
fails is the field count of every line checked at once on the raw bytes, and then the text scanned to
name the offending line and field (error path only).
"""

from __future__ import annotations

import io
import os
import re
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .._validation import FormatError, RecordError, ShotcheckError
from ..record import Channel, Record
from ..units import QUANTITY_UNITS, TIME_UNITS, parse_unit

__all__ = ["is_format", "read", "write", "split_header_cell", "parse_table", "unit_info", "meta_value"]

SUFFIXES = (".csv",)
_HEADER_BRACKET = re.compile(r"^(?P<name>.*?)\s*[\[(]\s*(?P<unit>[^\])]*?)\s*[\])]$")
_TIME_NAMES = ("time", "t")
_NUMBER = re.compile(r"^\s*[+-]?(?:(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?|nan|inf|infinity)\s*$", re.IGNORECASE)
_META_LINE = re.compile(r"^#\s*(?P<key>[A-Za-z_][A-Za-z0-9_ .-]*?)\s*:\s?(?P<value>.*)$")


def is_format(path: str | os.PathLike) -> bool:
    """Return True if ``path`` has a ``.csv`` suffix (any case).

    Parameters
    ----------
    path : str or path-like
        File name.

    Returns
    -------
    bool
    """
    return Path(path).suffix.lower() in SUFFIXES


# ---- shared table parsing (also used by the COMTRADE ASCII reader) ----------------------------


def _line_numbers_of_bad_counts(buf: np.ndarray, sep: int, ncols: int) -> tuple[int, int] | None:
    """Return (0-based row, fields found) of the first row whose field count differs, or None."""
    nl = np.flatnonzero(buf == 10)
    if nl.size == 0 or nl[-1] != buf.size - 1:
        nl = np.append(nl, buf.size)
    seps = np.flatnonzero(buf == sep)
    per_row = np.diff(np.searchsorted(seps, nl), prepend=0) + 1
    bad = per_row != ncols
    if bad.any():
        i = int(np.argmax(bad))
        return i, int(per_row[i])
    return None


def _find_bad_field(text: str, sep: str) -> tuple[int, int, str]:
    """Error path only: return (0-based row, 0-based column, text) of the first unparsable field."""
    for r, line in enumerate(text.split("\n")):
        for c, cell in enumerate(line.split(sep)):
            if not _NUMBER.match(cell):
                return r, c, cell.strip()
    return -1, -1, ""


def parse_table(
    data: bytes,
    *,
    sep: str,
    ncols: int,
    path: str,
    first_line: int,
    column_names: Sequence[str],
    what: str = "line",
    integers: bool = False,
) -> np.ndarray:
    """Parse delimited numeric text into a 2-D float64 array, with errors naming line and column.

    Parameters
    ----------
    data : bytes
        The data rows only (no header), lines ending in LF or CR LF.
    sep : str
        Field separator (one character).
    ncols : int
        Number of fields every row must have.
    path : str
        File name for messages.
    first_line : int
        1-based line number in the file of the first row of ``data``.
    column_names : sequence of str
        Name of each column, for messages.
    what : str
        Word used for a row in messages (``'line'``).
    integers : bool
        Try an integer parse first (faster); floats are still accepted.

    Returns
    -------
    numpy.ndarray
        Shape (n_rows, ncols), float64; may hold NaN/inf if written so (the caller checks).

    Raises
    ------
    FormatError
        Wrong field count, empty or non-numeric field, decimal comma, or no rows.

    Notes
    -----
    :func:`numpy.loadtxt` has had a C parser since numpy 1.23; on this project's machine (numpy 2.4)
    it parsed a 20 000 x 4 integer table in about 2.8 ms, against 7.8 ms for
    ``np.fromstring(text, sep=',')`` and 6 ms for a float ``loadtxt``, so it is used here with an
    integer attempt first. The field count of every row is checked on the raw bytes (vectorised,
    ``searchsorted`` of separators against line ends) only when parsing fails or the width is wrong.
    """
    if b"\r" in data:  # CR LF, or CR alone: both end a line
        data = data.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
    data = data.rstrip(b"\n\x1a \t")
    if not data.strip():
        raise FormatError("no data rows", path=path, field=f"{what} {first_line}")
    if sep in (";", "\t") and b"," in data:
        row = data[: data.index(b",")].count(b"\n")
        raise FormatError(
            "decimal comma found; numbers must use a decimal point", path=path,
            field=f"{what} {first_line + row}",
        )
    table = None
    # integers (COMTRADE ASCII data) parse about twice as fast as floats; fall back on failure
    for dtype in ((np.int64, np.float64) if integers else (np.float64,)):
        try:
            table = np.loadtxt(io.BytesIO(data), delimiter=sep, dtype=dtype, ndmin=2, comments=None)
            break
        except (ValueError, OverflowError):
            continue
    if table is None or table.shape[1] != ncols:
        _diagnose(data, sep=sep, ncols=ncols, path=path, first_line=first_line,
                  column_names=column_names, what=what)
    return table.astype(np.float64, copy=False)  # type: ignore[union-attr]


def _diagnose(
    data: bytes, *, sep: str, ncols: int, path: str, first_line: int, column_names: Sequence[str], what: str
) -> None:
    """Error path: raise a FormatError naming the first bad line and field of ``data``."""
    buf = np.frombuffer(data, dtype=np.uint8)
    bad = _line_numbers_of_bad_counts(buf, ord(sep), ncols)
    if bad is not None:
        row, found = bad
        line_text = data.split(b"\n")[row].decode("utf-8", "replace")[:80]
        if not line_text.strip():
            raise FormatError(
                f"blank line inside the data; expected {ncols} fields", path=path,
                field=f"{what} {first_line + row}",
            )
        raise FormatError(
            f"has {found} fields, expected {ncols} ({', '.join(column_names)}): {line_text!r}",
            path=path,
            field=f"{what} {first_line + row}",
        )
    text = data.decode("utf-8", "replace")
    row, col, cell = _find_bad_field(text, sep)
    if row < 0:
        raise FormatError("numbers could not be parsed (unusual number syntax)", path=path,
                          field=f"{what}s {first_line}-{first_line + text.count(chr(10))}")
    name = column_names[col] if 0 <= col < len(column_names) else f"#{col + 1}"
    what_cell = "empty field" if cell == "" else f"non-numeric field {cell[:40]!r}"
    raise FormatError(
        f"{what_cell} in column {col + 1} ({name}); expected a number",
        path=path,
        field=f"{what} {first_line + row}",
    )


def check_finite_table(
    table: np.ndarray, *, path: str, first_line: int, column_names: Sequence[str], what: str = "line"
) -> None:
    """Raise a FormatError naming line and column of the first NaN or infinite value in ``table``.

    Parameters
    ----------
    table : numpy.ndarray
        Parsed rows, shape (n_rows, n_columns).
    path : str
        File name for the message.
    first_line : int
        1-based line (or sample) number of the first row.
    column_names : sequence of str
        Name of each column.
    what : str
        Word for a row in the message (``'line'`` or ``'sample'``).

    Raises
    ------
    FormatError
        If any value is not finite.
    """
    bad = ~np.isfinite(table)
    if bad.any():
        r, c = np.unravel_index(int(np.argmax(bad)), table.shape)
        raise FormatError(
            f"value {table[r, c]} in column {c + 1} ({column_names[c]}); values must be finite numbers",
            path=path,
            field=f"{what} {first_line + int(r)}",
        )


# ---- header ------------------------------------------------------------------------------------


def split_header_cell(cell: str) -> tuple[str, str | None]:
    """Split a header cell into (name, unit).

    ``'voltage_kV'`` -> ``('voltage', 'kV')``; ``'U1 [kV]'`` -> ``('U1', 'kV')``; ``'neutral_current_mA'``
    -> ``('neutral_current', 'mA')``; a cell without a unit gives ``(cell, None)``.

    Parameters
    ----------
    cell : str
        Header cell text.

    Returns
    -------
    name : str
    unit : str or None
    """
    c = cell.strip().strip('"').strip()
    m = _HEADER_BRACKET.match(c)
    if m:
        return m.group("name").strip(), m.group("unit").strip()
    if "_" in c:
        name, unit = c.rsplit("_", 1)
        return name.strip(), unit.strip()
    return c, None


def _detect_sep(header: str) -> str:
    for s in (";", "\t", ","):
        if s in header:
            return s
    return ","


def read(
    path: str | os.PathLike,
    *,
    voltage_channel: str | int | None = None,
    current_channel: str | int | None = None,
) -> Record:
    """Read a CSV impulse record (layout in the module docstring).

    Parameters
    ----------
    path : str or path-like
        ``.csv`` file.
    voltage_channel, current_channel : str or int, optional
        Channel name (the name part of the header cell) or 0-based index among the channel columns,
        to pick one when the file holds several; see :meth:`Record.select`.

    Returns
    -------
    Record
        Samples in V and A; ``meta['source_format'] = 'CSV'``; ``source = str(path)``.

    Raises
    ------
    RecordError, FormatError
        Missing or empty file, bad header, unknown unit, wrong field count, non-numeric/NaN values,
        non-uniform or decreasing time.
    """
    with np.errstate(all="ignore"):  # overflow in a*x+b etc. is caught as non-finite samples
        return _read(path, voltage_channel=voltage_channel, current_channel=current_channel)


def _read(
    path: str | os.PathLike,
    *,
    voltage_channel: str | int | None,
    current_channel: str | int | None,
) -> Record:
    p = str(path)
    try:
        raw = Path(path).read_bytes()
    except FileNotFoundError:
        raise RecordError("file not found", path=p) from None
    except OSError as e:
        raise RecordError(f"cannot read the file ({e.strerror})", path=p) from None
    if not raw.strip():
        raise FormatError("file is empty; expected a header such as 'time_s,voltage_kV,current_A'", path=p)
    if b"\x00" in raw[:4096]:
        raise FormatError("not a text file (it holds NUL bytes); expected a CSV text file", path=p)
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    if b"\r" in raw[:4096] and b"\n" not in raw[:4096]:  # lines ended by CR alone (old spreadsheet exports)
        raw = raw.replace(b"\r", b"\n")
    # metadata comments and header: scan the first lines only (bounded, not per sample)
    meta: dict[str, Any] = {}
    pos = 0
    line_no = 0
    header: str | None = None
    while pos < len(raw):
        end = raw.find(b"\n", pos)
        end = len(raw) if end < 0 else end
        line_b = raw[pos:end].rstrip(b"\r")
        line_no += 1
        pos = end + 1
        try:
            line = line_b.decode("utf-8")
        except UnicodeDecodeError:
            raise FormatError(
                "not valid UTF-8 text; expected a CSV text file", path=p, field=f"line {line_no}"
            ) from None
        s = line.strip()
        if not s:
            continue
        if s.startswith("#"):
            m = _META_LINE.match(s)
            if m:
                key = m.group("key").strip()
                meta[key] = meta_value(key, m.group("value").strip())
            continue
        header = s
        break
    if header is None:
        raise FormatError("no header line; expected e.g. 'time_s,voltage_kV,current_A'", path=p)
    header_line = line_no
    sep = _detect_sep(header)
    cells = header.split(sep)
    names_units = [split_header_cell(c) for c in cells]
    if len(cells) < 2:
        raise FormatError(
            f"header {header!r} has one column; expected time and at least a voltage column, "
            "separated by ',', ';' or a tab (a metadata line above it starts with '#')", path=p,
            field=f"line {header_line}",
        )
    tname, tunit = names_units[0]
    if tunit is not None:
        tunit = tunit.replace("\u03bc", "\u00b5")  # Greek mu for the micro sign, as the channel units take it
    if tname.lower() in _TIME_NAMES and tunit is None:
        raise FormatError(
            f"first column {cells[0].strip()!r} has no unit; expected time_s, time_ms, time_us or time_ns "
            "(or 'time [us]')", path=p, field=f"line {header_line}, column 1",
        )
    if tname.lower() not in _TIME_NAMES or tunit not in TIME_UNITS:
        raise FormatError(
            f"first column {cells[0].strip()!r} is not a time column; expected time_s, time_ms, time_us "
            "or time_ns (or 'time [us]')", path=p, field=f"line {header_line}, column 1",
        )
    time_factor = TIME_UNITS[tunit]
    quantities: list[tuple[str, float, str, str]] = []
    for k, (name, unit) in enumerate(names_units[1:], start=2):
        if unit is None or not name:
            raise FormatError(
                f"column header {cells[k - 1].strip()!r} has no unit; write it as name_unit "
                "(voltage_kV) or 'name [unit]' (U1 [kV])", path=p, field=f"line {header_line}, column {k}",
            )
        try:
            q, f, canon = unit_info(unit, path=p, field=f"line {header_line}, column {k} ({cells[k - 1].strip()})")
        except RecordError as exc:
            if _HEADER_BRACKET.match(cells[k - 1].strip().strip('"').strip()):
                raise
            # a name_unit cell: the text after the last underscore was taken as the unit ('I_N' read as the
            # channel 'I' in the unit 'N'); say so, and how to write a channel name with an underscore
            raise FormatError(
                f"{exc.detail}; the header cell {cells[k - 1].strip()!r} was read as the channel {name!r} in the "
                f"unit {unit!r} (the text after the last underscore); write the unit after it "
                f"({cells[k - 1].strip()}_A) or in brackets ('{cells[k - 1].strip()} [A]')",
                path=p, field=f"line {header_line}, column {k} ({cells[k - 1].strip()})") from None
        quantities.append((name, f, q, canon))
    col_names = [c.strip() for c in cells]
    table = parse_table(
        raw[pos:], sep=sep, ncols=len(cells), path=p, first_line=header_line + 1, column_names=col_names
    )
    check_finite_table(table, path=p, first_line=header_line + 1, column_names=col_names)
    t = table[:, 0] * time_factor
    d = np.diff(t)
    if (d <= 0).any():
        i = int(np.argmax(d <= 0))
        raise FormatError(
            f"time goes backwards or stands still ({table[i + 1, 0]:g} {tunit} after {table[i, 0]:g} {tunit}); "
            "time must increase", path=p, field=f"line {header_line + 2 + i}",
        )
    try:
        chans = tuple(
            Channel(name, q, table[:, k + 1] * f, source_unit=u)
            for k, (name, f, q, u) in enumerate(quantities)
        )
    except RecordError as e:  # e.g. 1e308 kV overflowing to inf: name the file too
        raise RecordError(e.detail, path=p, field=e.field) from None
    meta["source_format"] = "CSV"
    # a time column printed with few decimals (0.333 us steps written 0.000, 0.333, 0.667) alternates by
    # one unit of its last digit: that much is the resolution it was written with, not non-uniform sampling
    rec = Record.from_times(t, chans, meta=meta, source=p,
                            atol=1.01 * _printed_resolution(table[:, 0]) * time_factor)
    if voltage_channel is not None or current_channel is not None:
        rec = rec.select(voltage_channel, current_channel)
    return rec


def _printed_resolution(values: np.ndarray) -> float:
    """The step of the last decimal the values were printed with (``1e-3`` for 0.333, 0.667, ...), or 0
    when they hold more than 12 decimals (full float precision: no rounding to allow for)."""
    v = np.asarray(values, dtype=np.float64)
    scale = max(float(np.max(np.abs(v))), 1.0)
    for k in range(13):  # a few decimal places, not samples
        x = v * 10.0**k
        if np.all(np.abs(x - np.round(x)) <= 1e-6 * max(1.0, scale * 10.0**k * 1e-9)):
            return 10.0**-k
    return 0.0


def unit_info(text: str, *, path: str | None = None, field: str | None = None) -> tuple[str, float, str]:
    """Return (quantity, factor to SI, canonical spelling) of a channel unit, via :func:`parse_unit`.

    Parameters
    ----------
    text : str
        Unit as written in the file (``'kV'``, ``'KV'``, ``'mA'``, ``'µA'``).
    path, field : str or None
        Where the unit was read, for the error message.

    Returns
    -------
    quantity : {'voltage', 'current'}
    factor : float
        Multiply file values by this to get V or A.
    canonical : str
        The spelling used in :data:`detector.units.QUANTITY_UNITS` (``'kV'``, ``'uA'``).

    Raises
    ------
    RecordError
        If the unit is not a voltage or current unit.
    """
    q, f = parse_unit(text.replace("\u03bc", "u").replace("\u00b5", "u"), path=path, field=field)
    canonical = next(k for k, v in QUANTITY_UNITS.items() if v == (q, f) and k != "\u00b5A")
    return q, f, canonical


#: Metadata keys that are always text, even when they look like numbers (``unit_id: 0815``).
TEXT_META_KEYS = ("shot_kind", "terminal", "unit_id", "shot_id", "lab", "recorded_at", "source_format")


def meta_value(key: str, text: str) -> Any:
    """Turn a metadata value read as text back into a number or bool when that is loss-free.

    ``'12'`` -> 12, ``'2.5e-06'`` -> 2.5e-06, ``'True'`` -> True; text that would not be written back
    identically (``'0815'``) and the keys in :data:`TEXT_META_KEYS` stay text. ``level_percent`` is
    converted by :class:`~detector.record.Record` itself.

    Parameters
    ----------
    key : str
        Metadata key.
    text : str
        Value as written in the file.

    Returns
    -------
    str, int, float or bool
    """
    if key in TEXT_META_KEYS:
        return text
    if text in ("True", "False"):
        return text == "True"
    for kind in (int, float):
        try:
            value = kind(text)
        except ValueError:
            continue
        if (repr(value) if kind is float else str(value)) == text:
            return value
    return text


def _meta_lines(meta: Mapping[str, Any], path: str) -> list[str]:
    out = []
    for k, v in meta.items():
        if k == "source_format" or v is None:
            continue
        key = str(k)
        text = repr(v) if isinstance(v, float) else str(v)
        if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_.-]*", key) or "\n" in text or "\r" in text:
            raise RecordError(
                f"metadata {key!r}: {text!r} cannot be written as a '# key: value' line "
                "(key must be a plain word, value a single line)", path=path, field="meta",
            )
        out.append(f"# {key}: {text}")
    return out


def write(
    record: Record,
    path: str | os.PathLike,
    *,
    time_unit: str = "s",
    **options: Any,
) -> None:
    """Write a record as CSV (layout in the module docstring).

    Parameters
    ----------
    record : Record
        Record to write.
    path : str or path-like
        Target ``.csv`` file (overwritten).
    time_unit : {'s', 'ms', 'us', 'ns'}
        Unit of the time column.
    **options
        ``data_format='ASCII'`` and ``revision`` are accepted (and ignored) so that
        :func:`detector.formats.write` can pass its defaults; any other option is an error.

    Raises
    ------
    ShotcheckError
        Unknown option or time unit; RecordError for channel names or metadata that the layout
        cannot hold.
    """
    p = str(path)
    fmt = options.pop("data_format", "ASCII")
    options.pop("revision", None)
    if str(fmt).upper() != "ASCII":
        raise ShotcheckError(f"data_format {fmt!r} applies to COMTRADE only; CSV is always text")
    if options:
        raise ShotcheckError(f"unknown CSV writer option(s): {', '.join(sorted(options))}")
    if time_unit not in TIME_UNITS or time_unit == "µs":
        raise ShotcheckError(f"Invalid value for 'time_unit': {time_unit!r}. Allowed values are 's', 'ms', 'us' and 'ns'.")
    header = [f"time_{time_unit}"]
    cols = [record.times() / TIME_UNITS[time_unit]]
    for c in record.channels:
        if any(ch in c.name for ch in ",;\t\n\r\"#") or not c.name.strip():
            raise RecordError(
                f"channel name {c.name!r} cannot be a CSV header (no separators, quotes or '#')",
                path=p, field="channels",
            )
        unit = c.source_unit if c.source_unit in QUANTITY_UNITS else c.unit
        if unit == "µA":
            unit = "uA"
        q, f = QUANTITY_UNITS[unit]
        if q != c.quantity:
            unit, f = c.unit, 1.0
        header.append(f"{c.name}_{unit}")
        cols.append(c.samples / f)
    lines = _meta_lines(record.meta, p)
    table = np.column_stack(cols)
    row_fmt = ",".join(["%.17g"] * table.shape[1]) + "\n"
    body = (row_fmt * table.shape[0]) % tuple(table.ravel().tolist())
    text = "\n".join(lines + [",".join(header)]) + "\n" + body
    Path(path).write_text(text, encoding="utf-8", newline="")
