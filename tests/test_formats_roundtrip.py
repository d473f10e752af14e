"""Write a Record with every writer variant, read it back, compare samples, time base and metadata."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from detector.formats import REGISTRY, read, write
from detector.formats.comtrade import CODE_RANGE, choose_timemult
from detector.record import Channel, Record
from detector.units import QUANTITY_UNITS

# (label, suffix, writer options)
VARIANTS = [
    ("cfg-ASCII-1999", ".cfg", {"data_format": "ASCII", "revision": 1999}),
    ("cfg-BINARY-1999", ".cfg", {"data_format": "BINARY", "revision": 1999}),
    ("cfg-ASCII-2013", ".cfg", {"data_format": "ASCII", "revision": 2013}),
    ("cfg-BINARY-2013", ".cfg", {"data_format": "BINARY", "revision": 2013}),
    ("cfg-BINARY32-2013", ".cfg", {"data_format": "BINARY32", "revision": 2013}),
    ("cfg-FLOAT32-2013", ".cfg", {"data_format": "FLOAT32", "revision": 2013}),
    ("cfg-ASCII-1999-stamps", ".cfg", {"data_format": "ASCII", "revision": 1999, "timestamps_only": True}),
    ("cfg-BINARY32-2013-stamps", ".cfg", {"data_format": "BINARY32", "timestamps_only": True}),
    ("cff-ASCII", ".cff", {"data_format": "ASCII"}),
    ("cff-BINARY", ".cff", {"data_format": "BINARY"}),
    ("cff-BINARY32", ".cff", {"data_format": "BINARY32"}),
    ("cff-FLOAT32", ".cff", {"data_format": "FLOAT32", "timestamps_only": True}),
    ("csv", ".csv", {}),
    ("csv-us", ".csv", {"time_unit": "us"}),
]
RATES_HZ = [1e4, 1e8, 1e9]
META = {
    "shot_kind": "reduced",
    "level_percent": 62.5,
    "terminal": "1U",
    "unit_id": "T-0815",
    "shot_id": "RFW-03",
    "lab": "Test Hall B",
    "recorded_at": "2026-03-04T05:06:07.000008",
}


def make_record(rate_Hz: float, n: int = 3000, pretrigger: int = 40) -> Record:
    """A 1.2/50-like voltage in kV, a neutral current in A and one in mA, with noise and a pre-trigger."""
    rng = np.random.default_rng(7)
    k = np.arange(n)
    tau1, tau2 = 0.3 * n, 0.006 * n
    shape = np.where(k >= pretrigger, np.exp(-(k - pretrigger) / tau1) - np.exp(-(k - pretrigger) / tau2), 0.0)
    v = -412e3 * shape + rng.normal(0, 150.0, n)
    i = 37.0 * np.gradient(shape) * n / 50 + rng.normal(0, 0.01, n)
    i2 = 0.4 * np.sin(k / 13.0)
    dt = 1.0 / rate_Hz
    return Record(
        start_time_s=-pretrigger * dt,
        sample_interval_s=dt,
        channels=(
            Channel("U1 divider", "voltage", v, source_unit="kV"),
            Channel("IN", "current", i, source_unit="A"),
            Channel("I_tank", "current", i2, source_unit="mA"),
        ),
        meta=META,
    )


def sample_tolerance(fmt: str, samples: np.ndarray) -> float:
    """One quantisation step of the writer's integer code for this channel [SI]."""
    return (samples.max() - samples.min()) / (2 * CODE_RANGE[fmt]) * (1 + 1e-9)


@pytest.mark.parametrize("rate_Hz", RATES_HZ, ids=["10kS/s", "100MS/s", "1GS/s"])
@pytest.mark.parametrize("label,suffix,options", VARIANTS, ids=[v[0] for v in VARIANTS])
def test_round_trip(tmp_path: Path, label: str, suffix: str, options: dict, rate_Hz: float) -> None:
    rec = make_record(rate_Hz)
    path = tmp_path / f"shot{suffix}"
    write(rec, path, **options)
    back = read(path)

    # time base: same interval and start, also with a negative pre-trigger start
    dt = rec.sample_interval_s
    assert back.n_samples == rec.n_samples
    assert back.sample_interval_s == pytest.approx(dt, rel=1e-12)
    assert back.start_time_s == pytest.approx(rec.start_time_s, abs=1e-9 * dt)
    np.testing.assert_allclose(back.times(), rec.times(), rtol=0, atol=1e-6 * dt)

    # samples: within one quantisation step (integer codes), float32 exactly, CSV to float64 precision
    fmt = options.get("data_format", "ASCII")
    assert [c.name for c in back.channels] == [c.name for c in rec.channels]
    for c_in, c_out in zip(rec.channels, back.channels, strict=True):
        assert c_out.quantity == c_in.quantity
        assert c_out.source_unit == c_in.source_unit
        if suffix == ".csv":
            np.testing.assert_allclose(c_out.samples, c_in.samples, rtol=1e-15, atol=0)
        elif fmt == "FLOAT32":
            factor = QUANTITY_UNITS[c_in.source_unit][1]
            expected = (c_in.samples / factor).astype(np.float32).astype(np.float64) * factor
            np.testing.assert_array_equal(c_out.samples, expected)
        else:
            tol = sample_tolerance(fmt, c_in.samples)
            err = np.abs(c_out.samples - c_in.samples).max()
            assert err <= tol, f"{c_in.name}: error {err} > step {tol}"
            assert err >= 0.2 * tol  # the codes really are quantised (test would catch a float path)

    # metadata
    for key, value in META.items():
        assert back.meta[key] == value, key
    assert back.meta["source_format"] == ("CSV" if suffix == ".csv" else "COMTRADE")


def test_round_trip_through_registry_covers_every_suffix() -> None:
    """Adding a format to the registry without adding a variant here fails this test."""
    assert {v[1] for v in VARIANTS} == set(REGISTRY)


def test_positive_start_that_is_not_a_whole_tick(tmp_path: Path) -> None:
    rec = make_record(1e8, pretrigger=0).replace(start_time_s=12.3456789e-6)
    write(rec, tmp_path / "s.cfg", data_format="BINARY")
    back = read(tmp_path / "s.cfg")
    assert back.start_time_s == pytest.approx(12.3456789e-6, abs=1e-18)


def test_no_metadata_writes_no_inf_and_reads_cfg_fields(tmp_path: Path) -> None:
    rec = make_record(1e8, pretrigger=0).replace(meta={})
    write(rec, tmp_path / "s.cfg")
    assert not (tmp_path / "s.inf").exists()
    back = read(tmp_path / "s.cfg")
    assert "shot_kind" not in back.meta and "lab" not in back.meta
    assert back.meta["comtrade_revision"] == 2013


def test_writer_uses_the_integer_range(tmp_path: Path) -> None:
    """BINARY codes reach +/-32767 (16 bit), BINARY32 codes +/-2147483647, read with numpy directly."""
    rec = make_record(1e8)
    for fmt, code, big in (("BINARY", "<i2", 32767), ("BINARY32", "<i4", 2147483647)):
        write(rec, tmp_path / "s.cfg", data_format=fmt)
        rows = np.frombuffer((tmp_path / "s.dat").read_bytes(),
                             dtype=[("n", "<u4"), ("t", "<u4"), ("x", code, (3,))])
        assert rows["x"].min(axis=0).tolist() == [-big] * 3
        assert rows["x"].max(axis=0).tolist() == [big] * 3
        assert rows["n"][0] == 1 and rows["n"][-1] == rec.n_samples


@pytest.mark.parametrize(
    "dt_s,fmt,expected",
    [
        (1e-9, "BINARY", 0.001),  # 1 GS/s: 1 ns ticks
        (1e-8, "ASCII", 0.01),
        (1e-4, "ASCII", 1.0),  # 10 kS/s: 1 us ticks (never coarser unless the stamps overflow)
        (1e-9, "ASCII", 0.001),
    ],
)
def test_choose_timemult(dt_s: float, fmt: str, expected: float) -> None:
    assert choose_timemult(dt_s, 1000 * dt_s, fmt) == expected


def test_choose_timemult_coarsens_when_stamps_would_overflow() -> None:
    # 10 s at 1 ns ticks is 1e10 ticks: does not fit unsigned 32 bit (4.29e9), so 10 ns ticks
    assert choose_timemult(1e-9, 10.0, "BINARY") == 0.01
    # a non-decimal interval gets at least 1000 ticks per sample
    assert choose_timemult(1 / 3 * 1e-6, 1e-3, "ASCII") <= 1 / 3 / 1000


def test_1gs_timestamps_keep_nanoseconds(tmp_path: Path) -> None:
    """With nrates = 0 the stamps alone carry the time base; at 1 GS/s the tick must be 1 ns or finer."""
    rec = make_record(1e9, n=2000)
    write(rec, tmp_path / "s.cfg", data_format="BINARY", timestamps_only=True)
    lines = (tmp_path / "s.cfg").read_text().splitlines()
    assert lines[-3] == "0.001"  # timemult line (2013 ends with timemult, time_code, tmq_code)
    stamps = np.frombuffer((tmp_path / "s.dat").read_bytes(),
                           dtype=[("n", "<u4"), ("t", "<u4"), ("x", "<i2", (3,))])["t"]
    assert np.all(np.diff(stamps.astype(np.int64)) == 1)
    assert read(tmp_path / "s.cfg").sample_interval_s == pytest.approx(1e-9, rel=1e-12)


def test_channel_selection(tmp_path: Path) -> None:
    rec = make_record(1e8)
    write(rec, tmp_path / "s.cff", data_format="BINARY")
    both = read(tmp_path / "s.cff", current_channel="I_tank")
    assert [c.name for c in both.channels] == ["U1 divider", "I_tank"]
    by_index = read(tmp_path / "s.cff", voltage_channel=0, current_channel=1)
    assert [c.name for c in by_index.channels] == ["U1 divider", "IN"]
    write(rec, tmp_path / "s.csv")
    assert read(tmp_path / "s.csv", current_channel="I_tank").current.name == "I_tank"


def test_csv_layout_and_header_forms(tmp_path: Path) -> None:
    """The documented header forms: name_unit, 'name [unit]', semicolon separator, comment metadata."""
    rows = "\n".join(f"{0.1 * k:.1f};{k * 1.5:.1f};{-k:.0f}" for k in range(20))
    text = "# shot_kind: chopped\n# a free comment line\n#terminal: 2W\ntime [us];U1 [kV];neutral_current_mA\n" + rows
    (tmp_path / "x.csv").write_text(text)
    r = read(tmp_path / "x.csv")
    assert r.meta["shot_kind"] == "chopped" and r.meta["terminal"] == "2W"
    assert [c.name for c in r.channels] == ["U1", "neutral_current"]
    assert r.sample_interval_s == pytest.approx(1e-7)
    assert r.channels[0].samples[2] == pytest.approx(3e3)  # 3.0 kV
    assert r.channels[1].samples[2] == pytest.approx(-2e-3)  # -2 mA
    write(make_record(1e8, n=20), tmp_path / "y.csv")
    head = (tmp_path / "y.csv").read_text().splitlines()
    assert head[0] == "# shot_kind: reduced"
    assert head[len(META)] == "time_s,U1 divider_kV,IN_A,I_tank_mA"


@pytest.mark.parametrize("name", ["m.cfg", "m.cff", "m.csv"])
def test_extra_metadata_keeps_its_type_when_loss_free(tmp_path: Path, name: str) -> None:
    """Numbers and booleans in meta come back as such; text that only looks numeric stays text."""
    extra = {"bits": 12, "noise_V": 0.25, "range_V": 1 / 3, "clipped": False, "unit_id": "0815",
             "serial": "007", "note": "second try, after re-grounding"}
    rec = make_record(1e8, n=50).replace(meta=extra)
    write(rec, tmp_path / name)
    meta = dict(read(tmp_path / name).meta)
    for key, value in extra.items():
        assert meta[key] == value and type(meta[key]) is type(value), key
