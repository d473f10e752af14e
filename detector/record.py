"""The Record: one recorded impulse shot on a uniform time base, in SI units.

A :class:`Record` holds the start time and sample interval of its time base, named channels (each a
voltage or a current, samples as float64 in volts or amperes), metadata about the shot, and a
processing history. It is immutable: processing returns a new Record with one history entry added.

Examples
--------
>>> import numpy as np
>>> from detector.record import Channel, Record
>>> t = np.arange(2000) * 1e-8
>>> v = Channel("U", "voltage", 1e5 * (np.exp(-t / 68e-6) - np.exp(-t / 0.4e-6)))
>>> r = Record(start_time_s=0.0, sample_interval_s=1e-8, channels=(v,), meta={"shot_kind": "full"})
>>> r.sampling_rate_Hz
100000000.0
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from types import MappingProxyType
from typing import Any

import numpy as np

from ._validation import RecordError, check_finite_1d, check_option
from .units import si_unit

__all__ = ["Channel", "Record", "SHOT_KINDS", "QUANTITIES", "MIN_SAMPLES"]

#: Allowed values of ``meta['shot_kind']``.
SHOT_KINDS = ("full", "reduced", "chopped", "reduced_chopped", "switching")
#: Allowed channel quantities.
QUANTITIES = ("voltage", "current")
#: A record shorter than this cannot carry a front, a crest and a tail.
MIN_SAMPLES = 16
#: Metadata keys with a meaning; other keys are kept as they are.
KNOWN_META = {
    "shot_kind": "full | reduced | chopped | reduced_chopped | switching",
    "level_percent": "applied level in percent of the test level",
    "terminal": "terminal under test, e.g. '1U'",
    "unit_id": "identifier of the transformer under test",
    "shot_id": "identifier of the shot",
    "lab": "laboratory",
    "recorded_at": "ISO 8601 time stamp of the recording",
    "source_format": "format the record was read from",
}


@dataclasses.dataclass(frozen=True)
class Channel:
    """One sampled channel in SI units.

    Parameters
    ----------
    name : str
        Channel name as in the source (e.g. ``'U1'``, ``'neutral current'``).
    quantity : {'voltage', 'current'}
        Physical quantity.
    samples : array_like
        Samples in volts (voltage) or amperes (current); stored as a read-only float64 array.
    source_unit : str, optional
        Unit the source file used (``'kV'``, ``'mA'``), kept for display and round trips.
    """

    name: str
    quantity: str
    samples: np.ndarray
    source_unit: str | None = None

    def __post_init__(self) -> None:
        check_option("quantity", self.quantity, QUANTITIES)
        arr = check_finite_1d(self.name, self.samples)
        if arr is self.samples and arr.flags.writeable:
            arr = arr.copy()
        arr.flags.writeable = False
        object.__setattr__(self, "samples", arr)
        if self.source_unit is None:
            object.__setattr__(self, "source_unit", si_unit(self.quantity))

    @property
    def unit(self) -> str:
        """SI unit of ``samples`` (``'V'`` or ``'A'``)."""
        return si_unit(self.quantity)

    def with_samples(self, samples: np.ndarray) -> Channel:
        """Return a copy of this channel with new samples (same name, quantity and unit)."""
        return dataclasses.replace(self, samples=samples)


@dataclasses.dataclass(frozen=True)
class Record:
    """An impulse record on a uniform time base.

    Parameters
    ----------
    start_time_s : float
        Time of the first sample on the record's own time axis [s].
    sample_interval_s : float
        Interval between samples [s], > 0.
    channels : sequence of Channel
        At least one voltage channel; all channels of equal length.
    meta : mapping, optional
        Shot metadata, see ``KNOWN_META``; ``shot_kind`` must be one of ``SHOT_KINDS``.
    processing : sequence of str, optional
        History of processing steps, oldest first.
    source : str, optional
        File the record was read from (used in error messages).

    Raises
    ------
    RecordError
        Too few samples, non-finite values, interval not positive, channels of unequal length, or no
        voltage channel.
    """

    start_time_s: float
    sample_interval_s: float
    channels: tuple[Channel, ...]
    meta: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    processing: tuple[str, ...] = ()
    source: str | None = None

    def __post_init__(self) -> None:
        src = self.source
        dt = self.sample_interval_s
        try:
            dt = float(dt)
        except (TypeError, ValueError):
            raise RecordError(f"must be a number, got {dt!r}", path=src, field="sample_interval_s") from None
        if not np.isfinite(dt) or dt <= 0:
            raise RecordError(
                f"must be a positive number of seconds, got {dt!r}", path=src, field="sample_interval_s"
            )
        t0 = float(self.start_time_s)
        if not np.isfinite(t0):
            raise RecordError(f"must be finite, got {t0!r}", path=src, field="start_time_s")
        object.__setattr__(self, "sample_interval_s", dt)
        object.__setattr__(self, "start_time_s", t0)
        chans = tuple(self.channels)
        if not chans:
            raise RecordError("record has no channels; a voltage channel is required", path=src, field="channels")
        for c in chans:
            if not isinstance(c, Channel):
                raise RecordError(f"expected Channel objects, got {type(c).__name__}", path=src, field="channels")
        n = chans[0].samples.size
        for c in chans:
            if c.samples.size != n:
                raise RecordError(
                    f"channel {c.name!r} has {c.samples.size} samples, channel {chans[0].name!r} has {n}; "
                    "all channels must have the same length",
                    path=src,
                    field="channels",
                )
        if n < MIN_SAMPLES:
            raise RecordError(
                f"too few samples: {n}, at least {MIN_SAMPLES} are needed", path=src, field="channels"
            )
        if not any(c.quantity == "voltage" for c in chans):
            names = ", ".join(f"{c.name!r} ({c.unit})" for c in chans)
            raise RecordError(
                f"no voltage channel among {names}; a record needs the applied voltage", path=src, field="channels"
            )
        object.__setattr__(self, "channels", chans)
        meta = dict(self.meta)
        kind = meta.get("shot_kind")
        if kind is not None and kind not in SHOT_KINDS:
            raise RecordError(
                f"shot_kind {kind!r} is not one of {', '.join(SHOT_KINDS)}", path=src, field="meta.shot_kind"
            )
        lvl = meta.get("level_percent")
        if lvl is not None:
            try:
                lvl = float(lvl)
            except (TypeError, ValueError):
                raise RecordError(f"must be a number, got {lvl!r}", path=src, field="meta.level_percent") from None
            if not np.isfinite(lvl) or lvl <= 0:
                raise RecordError(f"must be a positive percentage, got {lvl!r}", path=src, field="meta.level_percent")
            meta["level_percent"] = lvl
        object.__setattr__(self, "meta", MappingProxyType(meta))
        object.__setattr__(self, "processing", tuple(self.processing))

    # ---- constructors -------------------------------------------------------------------------
    @classmethod
    def from_times(
        cls,
        times_s: Sequence[float] | np.ndarray,
        channels: Sequence[Channel],
        *,
        meta: Mapping[str, Any] | None = None,
        source: str | None = None,
        rtol: float = 1e-3,
        atol: float = 0.0,
    ) -> Record:
        """Build a record from explicit sample times, checking that they are uniform.

        Parameters
        ----------
        times_s : array_like
            Time of each sample [s]; strictly increasing and uniform within ``rtol`` of the mean interval.
        channels : sequence of Channel
            Channels with one sample per time.
        meta : mapping, optional
            Shot metadata.
        source : str, optional
            File name for messages.
        rtol : float
            Allowed deviation of any interval from the typical (median) interval, relative.
        atol : float
            Further allowed deviation [s]: the resolution the times were written with (a COMTRADE time
            stamp counts whole ticks of ``timemult``, so 3 MS/s in 1 ns ticks alternates 333 and 334).

        Returns
        -------
        Record

        Raises
        ------
        RecordError
            If time goes backwards, stands still or is not uniform.
        """
        t = check_finite_1d("time", times_s, min_len=MIN_SAMPLES, path=source)
        d = np.diff(t)
        if (d <= 0).any():
            i = int(np.argmax(d <= 0))
            raise RecordError(
                f"time does not increase at sample {i + 1} ({t[i + 1]!r} s after {t[i]!r} s); "
                "time stamps must be strictly increasing",
                path=source,
                field="time",
            )
        dt = (t[-1] - t[0]) / (t.size - 1)
        typical = float(np.median(d))  # a single jump must not shift the yardstick onto the first interval
        dev = np.abs(d - typical) > rtol * typical + atol
        if dev.any():
            i = int(np.argmax(dev))
            raise RecordError(
                f"non-uniform sampling: interval before sample {i + 2} (counting from 1) is {d[i]:.6g} s, the "
                f"typical interval is {typical:.6g} s; a uniform time base is required (resample first)",
                path=source,
                field="time",
            )
        return cls(float(t[0]), float(dt), tuple(channels), meta=meta or {}, source=source)

    # ---- derived, read-only -----------------------------------------------------------------
    @property
    def n_samples(self) -> int:
        """Number of samples per channel."""
        return int(self.channels[0].samples.size)

    @property
    def sampling_rate_Hz(self) -> float:
        """Sampling rate [Hz]."""
        return 1.0 / self.sample_interval_s

    @property
    def duration_s(self) -> float:
        """Time from the first to the last sample [s]."""
        return (self.n_samples - 1) * self.sample_interval_s

    def times(self) -> np.ndarray:
        """Sample times on the record's own time axis [s]."""
        return self.start_time_s + np.arange(self.n_samples) * self.sample_interval_s

    def channel(self, key: str | int) -> Channel:
        """Return a channel by name or by index.

        Raises
        ------
        RecordError
            Listing the channels available.
        """
        if isinstance(key, int) or (isinstance(key, str) and key.lstrip("-").isdigit() and
                                    key not in [c.name for c in self.channels]):
            i = int(key)
            if -len(self.channels) <= i < len(self.channels):
                return self.channels[i]
        else:
            for c in self.channels:
                if c.name == key:
                    return c
        avail = ", ".join(f"{i}: {c.name!r} ({c.unit})" for i, c in enumerate(self.channels))
        raise RecordError(f"no channel {key!r}; available: {avail}", path=self.source, field="channel")

    @property
    def voltage(self) -> Channel:
        """The first voltage channel."""
        return next(c for c in self.channels if c.quantity == "voltage")

    @property
    def current(self) -> Channel:
        """The first current channel.

        Raises
        ------
        RecordError
            If the record has no current channel.
        """
        for c in self.channels:
            if c.quantity == "current":
                return c
        names = ", ".join(f"{c.name!r} ({c.unit})" for c in self.channels)
        ignored = self.meta.get("comtrade_ignored_channels") or {}
        why = ("; ignored for their units (not a voltage or current unit: V, kV, A, mA, kA...): "
               + ", ".join(f"{k!r} [{u}]" for k, u in ignored.items())) if ignored else ""
        raise RecordError(
            f"no current channel among {names}{why}; the comparison needs the neutral current",
            path=self.source,
            field="channels",
        )

    @property
    def has_current(self) -> bool:
        """Whether the record has a current channel."""
        return any(c.quantity == "current" for c in self.channels)

    def select(self, voltage: str | int | None = None, current: str | int | None = None) -> Record:
        """Return a record with the chosen voltage channel first and the chosen current channel second.

        Parameters
        ----------
        voltage, current : str or int, optional
            Channel name or index; by default the first channel of that quantity. A named channel must
            have the right quantity.

        Returns
        -------
        Record
            Holding only the selected channels (current only if there is one).
        """
        v = self.voltage if voltage is None else self.channel(voltage)
        if v.quantity != "voltage":
            raise RecordError(
                f"channel {v.name!r} is a {v.quantity} ({v.unit}), not a voltage",
                path=self.source,
                field="voltage channel",
            )
        chans = [v]
        if current is not None:
            c = self.channel(current)
            if c.quantity != "current":
                raise RecordError(
                    f"channel {c.name!r} is a {c.quantity} ({c.unit}), not a current",
                    path=self.source,
                    field="current channel",
                )
            chans.append(c)
        elif self.has_current:
            chans.append(self.current)
        return self.replace(channels=tuple(chans), step=f"select(voltage={v.name!r}, "
                            f"current={chans[1].name if len(chans) > 1 else None!r})")

    def replace(self, *, step: str | None = None, **changes: Any) -> Record:
        """Return a new record with fields changed and, if given, ``step`` appended to the history."""
        if step is not None:
            changes["processing"] = self.processing + (step,)
        return dataclasses.replace(self, **changes)

    def __repr__(self) -> str:
        chans = ", ".join(f"{c.name}[{c.unit}]" for c in self.channels)
        return (
            f"Record({self.n_samples} samples at {self.sampling_rate_Hz / 1e6:g} MS/s from "
            f"{self.start_time_s * 1e6:g} us; {chans}; {dict(self.meta)})"
        )
