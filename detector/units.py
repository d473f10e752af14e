"""Units of the channels a record may hold, and their factors to SI.

Only voltage and current channels matter for impulse records; time units are used by the readers.
"""

from __future__ import annotations

from ._validation import RecordError

__all__ = ["QUANTITY_UNITS", "TIME_UNITS", "parse_unit", "parse_time_unit", "si_unit"]

#: unit text -> (quantity, factor to SI)
QUANTITY_UNITS: dict[str, tuple[str, float]] = {
    "V": ("voltage", 1.0),
    "mV": ("voltage", 1e-3),
    "kV": ("voltage", 1e3),
    "MV": ("voltage", 1e6),
    "A": ("current", 1.0),
    "uA": ("current", 1e-6),
    "µA": ("current", 1e-6),
    "mA": ("current", 1e-3),
    "kA": ("current", 1e3),
}

#: time unit text -> factor to seconds
TIME_UNITS: dict[str, float] = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6, "ns": 1e-9}


def si_unit(quantity: str) -> str:
    """Return the SI unit symbol of a quantity (``'voltage'`` -> ``'V'``, ``'current'`` -> ``'A'``)."""
    return {"voltage": "V", "current": "A"}[quantity]


def parse_unit(text: str, *, path: str | None = None, field: str | None = None) -> tuple[str, float]:
    """Return (quantity, factor to SI) of a unit string such as ``'kV'`` or ``'mA'``.

    Parameters
    ----------
    text : str
        Unit as written in a file; surrounding blanks are ignored; case matters (``mV`` vs ``MV``)
        except that an all-lowercase or all-uppercase spelling of an unambiguous unit is accepted.
    path, field : str or None
        Where the unit was read, for the error message.

    Returns
    -------
    quantity : {'voltage', 'current'}
    factor : float
        Multiply file values by this to get volts or amperes.

    Raises
    ------
    RecordError
        If the unit is not a voltage or current unit.
    """
    t = text.strip()
    if t in QUANTITY_UNITS:
        return QUANTITY_UNITS[t]
    # tolerate case slips where they are unambiguous (kv, KV, ka) but never mV/MV, and not 'MA' or 'Ma',
    # which SI reads as megaampere (folding them to mA would scale a current by 1e-9 of what was meant)
    if t in ("MA", "Ma"):
        raise RecordError(f"ambiguous unit {text!r}: MA is megaampere in SI; write mA for milliampere or kA",
                          path=path, field=field)
    folded = {k.lower(): k for k in QUANTITY_UNITS if k not in ("mV", "MV")}
    if t.lower() in folded:
        return QUANTITY_UNITS[folded[t.lower()]]
    allowed = ", ".join(k for k in QUANTITY_UNITS if k != "µA")
    raise RecordError(
        f"unknown unit {text!r}; expected a voltage or current unit ({allowed})",
        path=path,
        field=field,
    )


def parse_time_unit(text: str, *, path: str | None = None, field: str | None = None) -> float:
    """Return the factor from a time unit (``'s'``, ``'ms'``, ``'us'``, ``'ns'``) to seconds."""
    t = text.strip()
    if t in TIME_UNITS:
        return TIME_UNITS[t]
    raise RecordError(
        f"unknown time unit {text!r}; expected one of s, ms, us, ns", path=path, field=field
    )
