"""Layout facts of COMTRADE shared by the reader (:mod:`detector.formats.comtrade`) and the writer
(:mod:`detector.formats._comtrade_write`): data types and code ranges, the parsed configuration, the binary
row layout and shotcheck's private INF section. Clauses are of IEEE C37.111-2013, recalled from memory.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import re
from collections.abc import Mapping
from typing import Any

import numpy as np

from .._validation import RecordError
from .csv import meta_value

SUFFIXES = (".cfg", ".cff")
#: Data file types and the revisions that define them.
DATA_TYPES = {"ASCII": (1999, 2013), "BINARY": (1999, 2013), "BINARY32": (2013,), "FLOAT32": (2013,)}
#: Revision years this module reads and writes.
REVISIONS = (1999, 2013)
#: Integer code range used by the writer per data type (symmetric; the most negative code means
#: "missing" in 1999 and 2013).
CODE_RANGE = {"ASCII": 99998, "BINARY": 32767, "BINARY32": 2147483647}
_MISSING_INT = {"ASCII": 99999, "BINARY": -32768, "BINARY32": -2147483648}
_TS_MISSING = 0xFFFFFFFF
_TS_MAX = {"ASCII": 9_999_999_999, "BINARY": 0xFFFFFFFE}
_INF_SECTION = "shotcheck record"
_CFF_HEADER = re.compile(
    rb"^--- *file type: *([A-Za-z]+)(?: +([A-Za-z0-9]+))?(?: *: *([0-9]+))? *---[ \t]*\r?$",
    re.MULTILINE | re.IGNORECASE,
)


@dataclasses.dataclass
class _Analog:
    index: int
    name: str
    unit: str
    a: float
    b: float
    skew_us: float
    primary: float
    secondary: float
    ps: str


@dataclasses.dataclass
class _Cfg:
    station: str
    device: str
    revision: int
    n_analog: int
    n_digital: int
    analogs: list[_Analog]
    nrates: int
    rates: list[tuple[float, int]]
    first_time: dt.datetime | None
    data_type: str
    timemult: float
    line_count: int

    @property
    def n_samples(self) -> int:
        return self.rates[-1][1]


def _binary_dtype(cfg: _Cfg) -> np.dtype:
    """Row layout of a binary data file (clause 8 "Data file", binary format, from memory)."""
    code = {"BINARY": "<i2", "BINARY32": "<i4", "FLOAT32": "<f4"}[cfg.data_type]
    n_words = (cfg.n_digital + 15) // 16
    fields = [("n", "<u4"), ("ts", "<u4")]
    if cfg.n_analog:
        fields.append(("x", code, (cfg.n_analog,)))
    if n_words:
        fields.append(("d", "<u2", (n_words,)))
    return np.dtype(fields)


# ---- INF (private section) ---------------------------------------------------------------------


def _parse_inf(text: str) -> dict[str, Any] | None:
    """Return the key=value pairs of the [shotcheck record] section, or None if absent."""
    out: dict[str, Any] | None = None
    inside = False
    for line in text.splitlines():  # a few lines of metadata, not samples
        s = line.strip()
        if s.startswith("[") and s.endswith("]"):
            inside = s[1:-1].strip().lower() == _INF_SECTION
            if inside and out is None:
                out = {}
            continue
        if inside and "=" in s and not s.startswith(";"):
            k, v = s.split("=", 1)
            out[k.strip()] = meta_value(k.strip(), v.strip())  # type: ignore[index]
    return out


def _format_inf(meta: Mapping[str, Any], offset_s: float, path: str) -> str:
    lines = [f"[{_INF_SECTION}]"]
    for k, v in meta.items():
        if k == "source_format" or v is None:
            continue
        key, text = str(k), repr(v) if isinstance(v, float) else str(v)
        if "=" in key or any(c in key + text for c in "\r\n[]") or not key.strip():
            raise RecordError(
                f"metadata {key!r}: {text!r} cannot be written as an INF key=value line", path=path, field="meta"
            )
        lines.append(f"{key}={text}")
    if offset_s != 0.0:
        lines.append(f"time_offset_s={offset_s!r}")
    return "\r\n".join(lines) + "\r\n"
