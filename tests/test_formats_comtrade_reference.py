"""COMTRADE against outside references: the PyPI ``comtrade`` package and hand-composed files.

Clauses are IEEE C37.111-2013 (= IEC 60255-24:2013), recalled from memory with their titles so they can
be found if a number is off (clause 7 "Configuration file" and 7.4.8 "date/time stamps" were seen in a
secondary source). The 1999 layout is the same except for the time-code lines and data types.
"""

from __future__ import annotations

import struct
from pathlib import Path

import comtrade as pypi_comtrade  # outside reference reader (PyPI package "comtrade")
import numpy as np
import pytest

from detector.formats import read, write
from detector.preprocess import shift_fourier
from detector.record import Channel, Record
from detector.units import QUANTITY_UNITS

# Every variant our writer produces. The PyPI package reads all of them: ASCII, BINARY, BINARY32,
# FLOAT32, .cfg/.dat and .cff (binary .cff included), with a sample rate or with nrates = 0.
# What it does not do, and why that does not weaken the comparison: it ignores the P/S ratios
# (we write flag P with ratios 1/1, so primary = file value) and it does not interpret INF sections
# (our metadata lives there, so metadata is checked by the round-trip test, not here).
VARIANTS = [
    (".cfg", "ASCII", 1999, False),
    (".cfg", "BINARY", 1999, False),
    (".cfg", "ASCII", 2013, False),
    (".cfg", "BINARY", 2013, False),
    (".cfg", "BINARY32", 2013, False),
    (".cfg", "FLOAT32", 2013, False),
    (".cfg", "BINARY", 2013, True),
    (".cfg", "ASCII", 1999, True),
    (".cff", "ASCII", 2013, False),
    (".cff", "BINARY", 2013, False),
    (".cff", "BINARY32", 2013, True),
    (".cff", "FLOAT32", 2013, False),
]


def _record(rate_Hz: float) -> Record:
    rng = np.random.default_rng(3)
    n = 1500
    k = np.arange(n)
    v = 250e3 * (np.exp(-k / 600) - np.exp(-k / 12)) + rng.normal(0, 80, n)
    i = 12.0 * np.exp(-k / 90) * np.sin(k / 9) + rng.normal(0, 0.005, n)
    return Record(0.0, 1.0 / rate_Hz, (
        Channel("U", "voltage", v, source_unit="kV"),
        Channel("I_n", "current", i, source_unit="mA"),
    ), meta={"unit_id": "T-0815", "lab": "Test Hall B"})


@pytest.mark.parametrize("rate_Hz", [1e4, 1e8, 1e9], ids=["10kS/s", "100MS/s", "1GS/s"])
@pytest.mark.parametrize("suffix,fmt,rev,stamps", VARIANTS,
                         ids=[f"{s[1:]}-{f}-{r}{'-stamps' if t else ''}" for s, f, r, t in VARIANTS])
def test_pypi_comtrade_reads_our_files_identically(
    tmp_path: Path, suffix: str, fmt: str, rev: int, stamps: bool, rate_Hz: float
) -> None:
    rec = _record(rate_Hz)
    path = tmp_path / f"shot{suffix}"
    write(rec, path, data_format=fmt, revision=rev, timestamps_only=stamps)
    ours = read(path)
    ref = pypi_comtrade.Comtrade(use_numpy_arrays=True, use_double_precision=True)
    ref.load(str(path))
    # configuration fields as the reference parses them (clause 7.4, from memory)
    assert ref.rev_year == str(rev)
    assert ref.station_name == "Test Hall B" and ref.rec_dev_id == "T-0815"
    assert ref.analog_channel_ids == ["U", "I_n"]
    assert [ch.uu for ch in ref.cfg.analog_channels] == ["kV", "mA"]
    assert ref.ft == fmt
    assert ref.total_samples == rec.n_samples
    # time, sample for sample (the reference uses the rate, or the stamps when nrates = 0)
    np.testing.assert_allclose(np.asarray(ref.time), ours.times(), rtol=1e-12, atol=1e-6 / rate_Hz)
    # analog values, sample for sample: reference value (file unit) times the unit factor
    for k, unit in enumerate(["kV", "mA"]):
        expected = np.asarray(ref.analog[k]) * QUANTITY_UNITS[unit][1]
        np.testing.assert_allclose(ours.channels[k].samples, expected, rtol=1e-12, atol=0)


# ---- a hand-composed C37.111-1999 file ----------------------------------------------------------

# Layout per C37.111-2013 clause 7.4 (numbers from memory; 1999: same lines, clause 6):
#   line 1  station_name,rec_dev_id,rev_year                       (7.4.2 station name ... revision year)
#   line 2  TT,##A,##D                                             (7.4.3 number and type of channels)
#   analog  An,ch_id,ph,ccbm,uu,a,b,skew,min,max,primary,secondary,PS   (7.4.4 analog channel info)
#   digital Dn,ch_id,ph,ccbm,y                                     (7.4.5 status channel info)
#   lf; nrates; samp,endsamp per rate                              (7.4.6 line frequency, 7.4.7 sampling)
#   first-sample and trigger date/time dd/mm/yyyy,hh:mm:ss.ssssss  (7.4.8 date/time stamps, seen)
#   ft; timemult                                                   (7.4.9 data file type, 7.4.10 timemult)
#   P/S flag and ratios: clause 4.7 "Primary to secondary ratios" (title seen in the contents)
HAND_CFG_1999 = """Invented Substation,Recorder 7,1999
4,2A,2D
1,Vdiv,A,,V,0.01,0,0,-99999,99998,1000,1,S
2,Ishunt,,N,mA,0.2,0.5,2.5,-99999,99998,1,1,P
1,Trigger,,,0
2,Gap fired,,,1
50
1
10000000,16
15/06/2026,10:20:30.000100
15/06/2026,10:20:30.000150
ASCII
0.1
"""
# ASCII data (clause 8 "Data file", ASCII, from memory): n, timestamp (timemult us ticks), analog, digital
X1 = [0, 12, 250, 1800, 5200, 9100, 9990, 9870, 9620, 9400, 9100, 8800, 8500, 8200, 7900, 7650]
X2 = [-3, 1, 40, 300, 810, 640, 120, -200, -330, -250, -90, 30, 75, 60, 20, -5]
HAND_DAT_1999 = "".join(
    f"{k + 1},{5 + k},{X1[k]},{X2[k]},{int(k >= 2)},{int(k >= 9)}\r\n" for k in range(16)
)


@pytest.fixture
def hand_1999(tmp_path: Path) -> Path:
    (tmp_path / "hand.cfg").write_text(HAND_CFG_1999.replace("\n", "\r\n"), newline="")
    (tmp_path / "hand.dat").write_text(HAND_DAT_1999, newline="")
    return tmp_path / "hand.cfg"


def test_hand_written_1999_field_by_field(hand_1999: Path) -> None:
    r = read(hand_1999)
    # line 1 -> metadata (station_name -> lab, rec_dev_id -> unit_id), revision
    assert r.meta["lab"] == "Invented Substation"
    assert r.meta["unit_id"] == "Recorder 7"
    assert r.meta["comtrade_revision"] == 1999 and r.meta["comtrade_data_type"] == "ASCII"
    # first-sample date/time (7.4.8) -> recorded_at
    assert r.meta["recorded_at"] == "2026-06-15T10:20:30.000100"
    # two analog channels kept, the two digital channels ignored
    assert [c.name for c in r.channels] == ["Vdiv", "Ishunt"]
    assert [c.quantity for c in r.channels] == ["voltage", "current"]
    assert [c.source_unit for c in r.channels] == ["V", "mA"]
    # Vdiv: secondary values (flag S) times primary/secondary = 1000/1: 0.01 * x V * 1000
    np.testing.assert_allclose(r.channels[0].samples, 0.01 * np.array(X1) * 1000.0, rtol=1e-15)
    # Ishunt: primary (flag P): (0.2 x + 0.5) mA, sampled 2.5 us after the time stamps (skew, 7.4.4): moved
    # back onto them (the shift itself is checked on a sinusoid in test_channel_skew_is_applied)
    np.testing.assert_allclose(r.channels[1].samples, shift_fourier((0.2 * np.array(X2) + 0.5) * 1e-3, 2.5e-6, 1e-7),
                               rtol=1e-12, atol=1e-15)
    assert r.meta["channel_skew_s"] == {"Ishunt": pytest.approx(2.5e-6)}
    assert any(step.startswith("channel skew applied: Ishunt 2.5 us") for step in r.processing)
    # 10 MS/s; first time stamp 5 ticks of timemult 0.1 us -> start at 0.5 us
    assert r.sample_interval_s == pytest.approx(1e-7, rel=1e-15)
    assert r.start_time_s == pytest.approx(0.5e-6, rel=1e-12)


def test_hand_written_1999_agrees_with_pypi_comtrade(hand_1999: Path) -> None:
    r = read(hand_1999)
    ref = pypi_comtrade.Comtrade(use_numpy_arrays=True, use_double_precision=True)
    ref.load(str(hand_1999))
    assert ref.analog_count == 2 and ref.status_count == 2
    assert ref.frequency == 50.0 and ref.cfg.timemult == 0.1
    assert ref.cfg.sample_rates == [[1e7, 16]]
    ch = ref.cfg.analog_channels
    assert (ch[0].pors, ch[0].primary, ch[0].secondary) == ("S", 1000.0, 1.0)
    assert (ch[1].a, ch[1].b, ch[1].skew, ch[1].ccbm) == (0.2, 0.5, 2.5, "N")
    # the reference leaves secondary values unconverted: apply primary/secondary = 1000 ourselves
    np.testing.assert_allclose(np.asarray(ref.analog[0]) * 1000.0, r.channels[0].samples, rtol=1e-15)
    # (the reference does not apply the skew: we do, with the same shift on its values)
    np.testing.assert_allclose(shift_fourier(np.asarray(ref.analog[1]) * 1e-3, 2.5e-6, 1e-7), r.channels[1].samples,
                               rtol=1e-12, atol=1e-15)
    # with a rate, the reference counts time from the first sample; we start at its time stamp
    np.testing.assert_allclose(np.asarray(ref.time), r.times() - r.start_time_s, atol=1e-15)
    assert np.asarray(ref.status[1]).tolist() == [int(k >= 9) for k in range(16)]


# ---- a hand-composed C37.111-2013 single file (.cff, single-file format, from memory) -------------------

HAND_CFF_2013 = """--- file type: CFG ---
Invented Lab,T-4711,2013
3,3A,0D
1,Freq,,,Hz,0.001,50,0,-99999,99998,1,1,P
2,U,,,kV,0.1,0,0,-99999,99998,1,1,P
3,I,,,A,0.01,0,0,-99999,99998,1,1,P
50
0
0,16
01/02/2026,03:04:05.000000
01/02/2026,03:04:05.000000
ASCII
0.001
+1h,+1h
F,0
--- file type: INF ---
[Public Record_Information]
Source=invented example
--- file type: HDR ---
Free text header: reduced full wave, invented unit.
--- file type: DAT ASCII ---
""" + "".join(f"{k + 1},{100 + 20 * k},{k},{10 * k - 3},{(-1) ** k * k}\n" for k in range(16))


def test_hand_written_2013_cff_with_critical_timestamps(tmp_path: Path) -> None:
    p = tmp_path / "hand.cff"
    p.write_text(HAND_CFF_2013.replace("\n", "\r\n"), newline="")
    r = read(p)
    # nrates = 0 (7.4.7): the time stamps are critical: 20 ticks of 1 ns -> 50 MS/s, starting at 100 ns
    assert r.sample_interval_s == pytest.approx(20e-9, rel=1e-12)
    assert r.start_time_s == pytest.approx(100e-9, rel=1e-12)
    # the 'Hz' channel is neither voltage nor current: ignored, not an error
    assert [c.name for c in r.channels] == ["U", "I"]
    np.testing.assert_allclose(r.voltage.samples, 0.1 * (10 * np.arange(16) - 3) * 1e3, rtol=1e-15)
    np.testing.assert_allclose(r.current.samples, 0.01 * (-1.0) ** np.arange(16) * np.arange(16), rtol=1e-15)
    # a public INF section only: metadata comes from the CFG fields
    assert r.meta["lab"] == "Invented Lab" and r.meta["unit_id"] == "T-4711"
    assert r.meta["comtrade_revision"] == 2013
    ref = pypi_comtrade.Comtrade(use_numpy_arrays=True, use_double_precision=True)
    ref.load(str(p))
    np.testing.assert_allclose(np.asarray(ref.time), r.times(), rtol=1e-12)
    np.testing.assert_allclose(np.asarray(ref.analog[1]) * 1e3, r.voltage.samples, rtol=1e-15)


def test_hand_written_binary_row_layout(tmp_path: Path) -> None:
    """BINARY (clause 8 "Data file", binary format, from memory): uint32 n, uint32 timestamp, int16 per analog, uint16 per 16 digital."""
    cfg = HAND_CFG_1999.replace("ASCII", "BINARY").replace("\n", "\r\n")
    (tmp_path / "b.cfg").write_text(cfg, newline="")
    rows = b"".join(
        struct.pack("<IIhhH", k + 1, 5 + k, X1[k], X2[k], (k >= 2) | ((k >= 9) << 1)) for k in range(16)
    )
    (tmp_path / "b.dat").write_bytes(rows)
    r = read(tmp_path / "b.cfg")
    np.testing.assert_allclose(r.channels[0].samples, 10.0 * np.array(X1), rtol=1e-15)
    np.testing.assert_allclose(r.channels[1].samples, shift_fourier((0.2 * np.array(X2) + 0.5) * 1e-3, 2.5e-6, 1e-7),
                               rtol=1e-12, atol=1e-15)


def test_channel_skew_is_applied(tmp_path: Path) -> None:
    """A channel with skew (C37.111-1999 7.4.4, from memory: the time from the start of the sample period
    to the channel's sampling instant) holds the signal that much later than the time stamps say. A
    current sampled 40 ns late (skew 0.04 us at 100 MS/s) must come back as the signal at the stamps;
    it used to be read as it was, a delay between voltage and current that the transfer function reads
    as the winding's phase."""
    n, fs, f0, skew = 400, 100e6, 1e6, 40e-9
    t = np.arange(n) / fs
    volts = np.round(1000.0 * np.sin(2 * np.pi * f0 * t))
    amps = np.round(1000.0 * np.sin(2 * np.pi * f0 * (t + skew)))  # sampled 40 ns after each stamp
    cfg = ("Invented Lab,Skew test,1999\n2,2A,0D\n1,U,,,V,1,0,0,-99999,99999,1,1,P\n"
           "2,I,,,A,0.001,0,0.04,-99999,99999,1,1,P\n50\n1\n100000000,400\n01/01/2026,00:00:00.000000\n"
           "01/01/2026,00:00:00.000000\nASCII\n1\n")
    (tmp_path / "s.cfg").write_text(cfg)
    (tmp_path / "s.dat").write_text("".join(f"{k + 1},{k * 10},{int(volts[k])},{int(amps[k])}\n" for k in range(n)))
    r = read(tmp_path / "s.cfg")
    inner = slice(40, n - 40)  # away from the ends, where the shift brings in the record's extension
    np.testing.assert_allclose(r.current.samples[inner], np.sin(2 * np.pi * f0 * t)[inner], atol=2e-3)
    np.testing.assert_allclose(r.voltage.samples, volts)  # a channel without skew is left as it is
