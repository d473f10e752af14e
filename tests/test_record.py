"""Record model: validation messages, derived fields, immutability, channel selection."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from detector import Channel, Record, RecordError
from detector._validation import ShotcheckError, check_option, check_range
from detector.units import parse_unit


def _rec(n: int = 100, **kw) -> Record:
    t = np.arange(n)
    chans = kw.pop("channels", (Channel("U", "voltage", np.sin(t / 10.0)), Channel("I", "current", np.cos(t))))
    return Record(kw.pop("start_time_s", 0.0), kw.pop("sample_interval_s", 1e-8), chans, **kw)


def test_derived_fields_follow_the_interval():
    r = _rec(200, start_time_s=-2e-6)
    assert r.n_samples == 200
    assert r.sampling_rate_Hz == pytest.approx(1e8)
    assert r.duration_s == pytest.approx(199e-8)
    assert r.times()[0] == -2e-6
    assert r.times()[-1] == pytest.approx(-2e-6 + 199e-8)


def test_record_is_immutable_and_samples_read_only():
    r = _rec()
    with pytest.raises(dataclasses.FrozenInstanceError):
        r.sample_interval_s = 2e-8  # type: ignore[misc]
    with pytest.raises(ValueError):
        r.voltage.samples[0] = 1.0


def test_channel_copies_caller_array():
    x = np.sin(np.arange(50.0))
    c = Channel("U", "voltage", x)
    x[0] = 99.0
    assert c.samples[0] != 99.0


@pytest.mark.parametrize(
    ("kwargs", "fragment"),
    [
        ({"sample_interval_s": 0.0}, "sample_interval_s: must be a positive number of seconds"),
        ({"sample_interval_s": -1e-8}, "must be a positive"),
        ({"sample_interval_s": float("nan")}, "must be a positive"),
        ({"channels": ()}, "a voltage channel is required"),
        ({"channels": (Channel("I", "current", np.ones(100)),)}, "no voltage channel among 'I' (A)"),
        ({"channels": (Channel("U", "voltage", np.ones(100)), Channel("I", "current", np.ones(99)))},
         "all channels must have the same length"),
        ({"meta": {"shot_kind": "impulse"}}, "shot_kind 'impulse' is not one of"),
        ({"meta": {"level_percent": -5}}, "must be a positive percentage"),
    ],
)
def test_invalid_records_name_the_field(kwargs, fragment):
    with pytest.raises(RecordError) as exc:
        _rec(**kwargs, source="shots/s3.cfg")
    assert fragment in str(exc.value)
    assert str(exc.value).startswith("shots/s3.cfg: ")


def test_too_few_samples():
    with pytest.raises(RecordError, match="too few samples: 5"):
        _rec(5)


def test_non_finite_sample_is_located():
    v = np.zeros(100)
    v[33] = np.nan
    with pytest.raises(RecordError, match=r"channel 'U': sample 33 is nan; samples must be finite"):
        Channel("U", "voltage", v)


def test_from_times_accepts_uniform_and_refuses_backwards_or_uneven():
    t = np.arange(100) * 1e-8 + 5e-6
    ch = (Channel("U", "voltage", np.ones(100)),)
    r = Record.from_times(t, ch)
    assert r.start_time_s == pytest.approx(5e-6)
    assert r.sample_interval_s == pytest.approx(1e-8)
    back = t.copy()
    back[40] = back[38]
    with pytest.raises(RecordError, match="time does not increase at sample 40"):
        Record.from_times(back, ch, source="x.csv")
    uneven = t.copy()
    uneven[50:] += 0.5e-8
    with pytest.raises(RecordError, match="non-uniform sampling"):
        Record.from_times(uneven, ch)


def test_select_by_name_and_index_and_wrong_quantity():
    t = np.arange(100.0)
    r = _rec(channels=(Channel("U1", "voltage", t), Channel("U2", "voltage", -t), Channel("IN", "current", t)))
    s = r.select(voltage="U2")
    assert [c.name for c in s.channels] == ["U2", "IN"]
    assert s.processing[-1].startswith("select(")
    assert r.select(voltage=1).voltage.name == "U2"
    with pytest.raises(RecordError, match="is a current"):
        r.select(voltage="IN")
    with pytest.raises(RecordError, match="no channel 'U9'; available: 0: 'U1'"):
        r.select(voltage="U9")


def test_missing_current_message():
    r = _rec(channels=(Channel("U", "voltage", np.ones(100)),))
    assert not r.has_current
    with pytest.raises(RecordError, match="comparison needs the neutral current"):
        r.current  # noqa: B018


@pytest.mark.parametrize(
    ("text", "quantity", "factor"),
    [("kV", "voltage", 1e3), ("V", "voltage", 1.0), ("mV", "voltage", 1e-3), ("MV", "voltage", 1e6),
     ("A", "current", 1.0), ("kA", "current", 1e3), ("mA", "current", 1e-3), (" kv ", "voltage", 1e3)],
)
def test_units(text, quantity, factor):
    assert parse_unit(text) == (quantity, factor)


def test_unknown_unit():
    with pytest.raises(RecordError, match="unknown unit 'Ohm'"):
        parse_unit("Ohm", path="a.cfg", field="channel 3")


def test_check_option_suggests():
    with pytest.raises(ShotcheckError, match="Did you mean 'hann'"):
        check_option("window", "hanning", ["exponential", "hann", "tukey"])


def test_check_range():
    assert check_range("x", 0.5, 0, 1) == 0.5
    with pytest.raises(ShotcheckError, match=r"must be in \(0, 1\]"):
        check_range("x", 0.0, 0, 1, low_inclusive=False)
