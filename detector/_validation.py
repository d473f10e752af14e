"""Exception family and small argument checks with uniform, actionable messages.

Every error a user can cause (a bad file, a bad option) is a :class:`ShotcheckError`; the CLI turns it
into exit status 2 and a one-line message, never a traceback.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable
from typing import Any

import numpy as np

__all__ = [
    "ShotcheckError",
    "RecordError",
    "FormatError",
    "NoImpulseError",
    "check_option",
    "check_range",
    "check_finite_1d",
]


class ShotcheckError(Exception):
    """Base class of every error caused by the user's input or options."""


class RecordError(ShotcheckError, ValueError):
    """A record or a file holding one is not usable.

    Parameters
    ----------
    message : str
        What is wrong and what was expected.
    path : str or None
        File the record came from, if any; prefixed to the message.
    field : str or None
        Field, channel or line concerned, if known.
    """

    def __init__(self, message: str, *, path: str | None = None, field: str | None = None):
        self.path = None if path is None else str(path)
        self.field = field
        self.detail = message
        prefix = f"{self.path}: " if self.path else ""
        where = f"{field}: " if field else ""
        super().__init__(f"{prefix}{where}{message}")


class FormatError(RecordError):
    """A file does not follow its format (COMTRADE, CSV)."""


class NoImpulseError(RecordError):
    """A record's voltage holds no impulse: it is constant, or nothing in it stands well above its noise."""


def _quote_list(items: Iterable[Any]) -> str:
    quoted = [repr(i) for i in items]
    if len(quoted) <= 1:
        return "".join(quoted)
    return ", ".join(quoted[:-1]) + " and " + quoted[-1]


def check_option(name: str, value: Any, allowed: Iterable[Any]) -> Any:
    """Check that ``value`` is one of ``allowed``.

    Parameters
    ----------
    name : str
        Parameter name used in the message.
    value : object
        Value to check.
    allowed : iterable
        Allowed values.

    Returns
    -------
    object
        ``value`` unchanged.

    Raises
    ------
    ShotcheckError
        With the allowed values and, for strings, the closest match.
    """
    allowed = list(allowed)
    if value in allowed:
        return value
    msg = (
        f"Invalid value for {name!r}: {value!r}. Allowed values are {_quote_list(allowed)}."
    )
    if isinstance(value, str):
        close = difflib.get_close_matches(value, [str(a) for a in allowed], n=1)
        if close:
            msg += f" Did you mean {close[0]!r}?"
    raise ShotcheckError(msg)


def check_range(
    name: str,
    value: float,
    low: float | None = None,
    high: float | None = None,
    *,
    low_inclusive: bool = True,
    high_inclusive: bool = True,
    unit: str = "",
) -> float:
    """Check that a finite scalar lies in an interval.

    Parameters
    ----------
    name : str
        Parameter name used in the message (include the unit, e.g. ``'front_time_s'``).
    value : float
        Value to check.
    low, high : float or None
        Bounds; None means unbounded.
    low_inclusive, high_inclusive : bool
        Whether the bounds are allowed.
    unit : str
        Unit printed after the numbers.

    Returns
    -------
    float
        ``value`` as float.
    """
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ShotcheckError(f"{name} must be a number, got {value!r}") from None
    ok = np.isfinite(v)
    if ok and low is not None:
        ok = v >= low if low_inclusive else v > low
    if ok and high is not None:
        ok = v <= high if high_inclusive else v < high
    if not ok:
        lo = "-inf" if low is None else f"{low:g}"
        hi = "inf" if high is None else f"{high:g}"
        lb = "[" if low_inclusive and low is not None else "("
        hb = "]" if high_inclusive and high is not None else ")"
        u = f" {unit}" if unit else ""
        raise ShotcheckError(f"{name} must be in {lb}{lo}, {hi}{hb}{u}, got {value!r}")
    return v


def check_finite_1d(
    name: str, values: Any, *, min_len: int = 1, path: str | None = None
) -> np.ndarray:
    """Return ``values`` as a 1-D float64 array after checking shape and finiteness.

    Parameters
    ----------
    name : str
        Name of the array (a channel name) used in the message.
    values : array_like
        Samples.
    min_len : int
        Minimum number of samples.
    path : str or None
        File the samples came from, for the message.

    Returns
    -------
    numpy.ndarray
        1-D float64 array.

    Raises
    ------
    RecordError
        Naming the first non-finite sample.
    """
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise RecordError("samples must be numbers", path=path, field=f"channel {name!r}") from None
    if arr.ndim != 1:
        raise RecordError(
            f"samples must be a 1-D array, got shape {arr.shape}", path=path, field=f"channel {name!r}"
        )
    if arr.size < min_len:
        raise RecordError(
            f"too few samples: {arr.size}, at least {min_len} are needed",
            path=path,
            field=f"channel {name!r}",
        )
    bad = ~np.isfinite(arr)
    if bad.any():
        i = int(np.argmax(bad))
        raise RecordError(
            f"sample {i} is {arr[i]}; samples must be finite", path=path, field=f"channel {name!r}"
        )
    return arr
