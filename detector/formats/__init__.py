"""Read and write impulse records by file suffix.

=========  ==========================================================  ======================
Suffix     Format                                                      Module
=========  ==========================================================  ======================
``.cfg``   COMTRADE configuration + ``.dat`` (IEEE C37.111-1999/2013)  :mod:`.comtrade`
``.cff``   COMTRADE single file (IEEE C37.111-2013)                    :mod:`.comtrade`
``.csv``   CSV with units in the header (``time_s,voltage_kV,...``)   :mod:`.csv`
=========  ==========================================================  ======================

Each format module exposes ``is_format(path)``, ``read(path, *, voltage_channel, current_channel)``
and ``write(record, path, **options)``. Errors a user's file can cause are
:class:`~detector.RecordError` / :class:`~detector.FormatError` naming the file, the line or field and
what was expected; no other exception escapes :func:`read` for a bad file.

Examples
--------
>>> import tempfile, os, numpy as np
>>> from detector.record import Channel, Record
>>> from detector.formats import read, write
>>> t = np.arange(64) * 1e-8
>>> rec = Record(0.0, 1e-8, (Channel("U", "voltage", 1e5 * np.sin(t * 1e6), source_unit="kV"),
...                          Channel("I", "current", 2.0 * np.cos(t * 1e6))), meta={"shot_id": "S1"})
>>> with tempfile.TemporaryDirectory() as d:
...     write(rec, os.path.join(d, "shot.cfg"), data_format="BINARY32")
...     back = read(os.path.join(d, "shot.cfg"))
>>> back.meta["shot_id"], back.sampling_rate_Hz
('S1', 100000000.0)
"""

from __future__ import annotations

import os
import struct
from pathlib import Path
from types import ModuleType
from typing import Any

from .._validation import FormatError, RecordError, ShotcheckError
from ..record import Record
from . import comtrade, csv

__all__ = ["read", "write", "REGISTRY", "supported_suffixes", "comtrade", "csv"]

#: suffix (lower case) -> format module with is_format / read / write
REGISTRY: dict[str, ModuleType] = {".cfg": comtrade, ".cff": comtrade, ".csv": csv}

#: Exceptions a parser may hit on a malformed file that were not anticipated by a specific check;
#: :func:`read` turns them into a FormatError instead of letting a traceback reach the user.
_PARSE_FAILURES = (ValueError, TypeError, IndexError, KeyError, UnicodeError, OverflowError, struct.error)


def supported_suffixes() -> tuple[str, ...]:
    """Return the registered file suffixes, e.g. ``('.cfg', '.cff', '.csv')``."""
    return tuple(REGISTRY)


def _module_for(path: str | os.PathLike) -> ModuleType:
    p = Path(path)
    suffix = p.suffix.lower()
    if suffix not in REGISTRY:
        shown = p.suffix or "(none)"
        hint = ""
        if suffix in (".dat", ".inf", ".hdr"):  # another file of a COMTRADE record: name its .cfg
            hint = f"; a COMTRADE record is read from its configuration file: give {p.with_suffix('.cfg')}"
        raise RecordError(
            f"Unsupported file type '{shown}' for '{p.name}'. Supported: {', '.join(REGISTRY)}{hint}",
            path=None,
        )
    return REGISTRY[suffix]


def read(
    path: str | os.PathLike,
    *,
    voltage_channel: str | int | None = None,
    current_channel: str | int | None = None,
) -> Record:
    """Read an impulse record; the format is chosen by the file suffix.

    Parameters
    ----------
    path : str or path-like
        ``.cfg`` / ``.cff`` (COMTRADE) or ``.csv`` file.
    voltage_channel, current_channel : str or int, optional
        Pick a channel by name or by 0-based index among the voltage/current channels when the file
        has several (see :meth:`detector.record.Record.select`). Without them, all voltage and
        current channels are returned in file order.

    Returns
    -------
    Record
        Samples in V and A; ``meta['source_format']`` names the format; ``source`` is the path.

    Raises
    ------
    RecordError
        Unsupported suffix, missing file, or a file that does not hold a usable record
        (:class:`FormatError` when the file breaks its format).
    """
    if Path(path).is_dir():
        raise RecordError(f"is a folder; expected a record file ({', '.join(REGISTRY)})", path=str(path))
    mod = _module_for(path)
    try:
        return mod.read(path, voltage_channel=voltage_channel, current_channel=current_channel)
    except ShotcheckError:
        raise
    except MemoryError:
        raise FormatError("file too large to hold in memory", path=str(path)) from None
    except OSError as e:
        raise RecordError(f"cannot read the file ({e.strerror or e})", path=str(path)) from None
    except _PARSE_FAILURES as e:  # last line of defence; specific checks should fire first
        raise FormatError(f"unreadable file ({type(e).__name__}: {e})", path=str(path)) from None


def write(
    record: Record,
    path: str | os.PathLike,
    *,
    data_format: str = "ASCII",
    revision: int = 2013,
    **options: Any,
) -> None:
    """Write a record; the format is chosen by the file suffix.

    Parameters
    ----------
    record : Record
        Record to write.
    path : str or path-like
        Target file; ``.cfg`` also writes ``.dat`` (and ``.inf`` when there is metadata).
    data_format : {'ASCII', 'BINARY', 'BINARY32', 'FLOAT32'}
        COMTRADE data file type (CSV accepts only 'ASCII').
    revision : {1999, 2013}
        COMTRADE revision (ignored for CSV).
    **options
        Format-specific options: ``timemult``, ``timestamps_only`` (COMTRADE), ``time_unit`` (CSV).

    Raises
    ------
    RecordError, ShotcheckError
        Unsupported suffix, bad options, or a record the format cannot hold.
    """
    mod = _module_for(path)
    mod.write(record, path, data_format=data_format, revision=revision, **options)
