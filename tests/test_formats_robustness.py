"""Damaged valid files, suffix handling and property-based round trips."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from detector._validation import ShotcheckError
from detector.formats import comtrade, csv, read, supported_suffixes, write
from detector.record import Channel, Record


def _record(n: int = 200, dt: float = 1e-8, start: float = 0.0) -> Record:
    k = np.arange(n)
    return Record(start, dt, (
        Channel("U", "voltage", 5e4 * np.sin(k / 11.0) + 1e3, source_unit="kV"),
        Channel("I", "current", 0.02 * np.cos(k / 7.0), source_unit="mA"),
    ), meta={"shot_kind": "full", "shot_id": "F1"})


@pytest.mark.parametrize("name,fmt", [("s.cfg", "ASCII"), ("s.cfg", "BINARY"), ("s.cff", "BINARY32"),
                                      ("s.cff", "ASCII"), ("s.csv", "ASCII")])
@pytest.mark.parametrize("seed", range(6))
def test_damaged_valid_files_read_or_fail_cleanly(tmp_path: Path, name: str, fmt: str, seed: int) -> None:
    """Flip, drop or insert bytes in a valid file: either a Record comes back or a ShotcheckError."""
    path = tmp_path / name
    write(_record(), path, data_format=fmt)
    target = path if path.suffix != ".cfg" else (path, path.with_suffix(".dat"))[seed % 2]
    data = bytearray(target.read_bytes())
    rng = np.random.default_rng(seed)
    for _ in range(int(rng.integers(1, 6))):
        i = int(rng.integers(0, len(data)))
        op = int(rng.integers(0, 3))
        if op == 0:
            data[i] = int(rng.integers(0, 256))
        elif op == 1:
            del data[i : i + int(rng.integers(1, 40))]
        else:
            data[i:i] = bytes(rng.integers(0, 256, int(rng.integers(1, 10)), dtype=np.uint8))
    target.write_bytes(bytes(data))
    try:
        rec = read(path)
    except ShotcheckError as e:
        assert str(e)
    else:
        assert isinstance(rec, Record)


def test_suffixes_and_is_format(tmp_path: Path) -> None:
    assert supported_suffixes() == (".cfg", ".cff", ".csv")
    rec = _record()
    write(rec, tmp_path / "UP.CFG", data_format="BINARY")
    assert (tmp_path / "UP.DAT").exists() and (tmp_path / "UP.INF").exists()
    assert read(tmp_path / "UP.CFG").n_samples == 200
    assert read(str(tmp_path / "UP.CFG")).meta["shot_id"] == "F1"
    assert comtrade.is_format(tmp_path / "UP.CFG")
    write(rec, tmp_path / "a.cff")
    assert comtrade.is_format(tmp_path / "a.cff") and not comtrade.is_format(tmp_path / "a.csv")
    assert csv.is_format("x.CSV") and not csv.is_format("x.cfg")


def test_rewrite_without_metadata_removes_stale_inf(tmp_path: Path) -> None:
    rec = _record()
    write(rec, tmp_path / "s.cfg")
    write(rec.replace(meta={}), tmp_path / "s.cfg")
    assert "shot_kind" not in read(tmp_path / "s.cfg").meta


def test_ascii_with_real_values_and_blank_timestamps(tmp_path: Path) -> None:
    """Data values with decimals and blank (non-critical) time stamps are accepted when a rate is given."""
    write(_record(n=20), tmp_path / "s.cfg")
    rows = [f"{k + 1},,{k + 0.5},{-k}" for k in range(20)]
    (tmp_path / "s.dat").write_text("\r\n".join(rows) + "\r\n")
    r = read(tmp_path / "s.cfg")
    assert r.start_time_s == 0.0 and r.n_samples == 20
    a = float((tmp_path / "s.cfg").read_text().splitlines()[2].split(",")[5])
    b = float((tmp_path / "s.cfg").read_text().splitlines()[2].split(",")[6])
    np.testing.assert_allclose(r.voltage.samples, (a * (np.arange(20) + 0.5) + b) * 1e3)


@given(
    rate_exp=st.floats(min_value=4.0, max_value=9.0),
    start_samples=st.integers(min_value=-500, max_value=500),
    fmt=st.sampled_from(["ASCII", "BINARY", "BINARY32", "FLOAT32"]),
    stamps=st.booleans(),
)
def test_property_time_base_survives_any_rate(
    tmp_path_factory: pytest.TempPathFactory, rate_exp: float, start_samples: int, fmt: str, stamps: bool
) -> None:
    """Any rate between 10 kS/s and 1 GS/s (not only round ones) and any start keep their time base."""
    dt = 10.0 ** -rate_exp
    rec = _record(n=64, dt=dt, start=start_samples * dt)
    path = tmp_path_factory.mktemp("p") / "s.cfg"
    write(rec, path, data_format=fmt, timestamps_only=stamps)
    back = read(path)
    assert back.sample_interval_s == pytest.approx(dt, rel=1e-9 if not stamps else 1e-4)
    assert back.start_time_s == pytest.approx(rec.start_time_s, abs=1e-6 * dt)


def _small_cfg(tmp_path: Path, *, date: str = "15/06/2026") -> Path:
    cfg = ("Invented Lab,Rec 3,1999\n2,2A,0D\n1,U,,,kV,1,0,0,-99999,99999,1,1,P\n"
           "2,I,,,A,1,0,0,-99999,99999,1,1,P\n50\n1\n10000000,20\n"
           f"{date},10:00:00.000000\n{date},10:00:00.000000\nASCII\n1\n")
    (tmp_path / "r.cfg").write_text(cfg)
    return tmp_path / "r.cfg"


def test_lines_ended_by_cr_alone_are_read(tmp_path: Path) -> None:
    """Old recorders and spreadsheet exports end lines with CR alone; the rows used to run together
    ('has 61 fields, expected 4', or a unit read as 'A\\r0')."""
    p = _small_cfg(tmp_path)
    (tmp_path / "r.dat").write_bytes("".join(f"{k + 1},{k * 100},{k},{-k}\r" for k in range(20)).encode())
    r = read(p)
    np.testing.assert_array_equal(r.voltage.samples, np.arange(20) * 1e3)
    c = tmp_path / "cr.csv"
    c.write_bytes(b"time_us,voltage_kV,current_A\r" + "".join(
        f"{k * 0.01:.2f},{k},{-k}\r" for k in range(20)).encode())
    r = read(c)
    np.testing.assert_array_equal(r.current.samples, -np.arange(20.0))


def test_a_two_digit_year_is_not_read_as_year_24(tmp_path: Path) -> None:
    """C37.111 dates are dd/mm/yyyy; '01/02/24' used to become the year 0024. It is not a date then."""
    p = _small_cfg(tmp_path, date="01/02/24")
    (tmp_path / "r.dat").write_text("".join(f"{k + 1},{k * 100},{k},{-k}\n" for k in range(20)))
    assert "recorded_at" not in read(p).meta
    assert read(_small_cfg(tmp_path)).meta["recorded_at"] == "2026-06-15T10:00:00"


def test_ambiguous_or_foreign_unit_spellings(tmp_path: Path) -> None:
    """'MA' is megaampere in SI: it used to be folded to milliampere. A tab-separated CSV with decimal
    commas is told so. Greek mu in a time header is the micro sign, as in channel units."""
    from detector.units import parse_unit

    with pytest.raises(ShotcheckError, match="ambiguous unit 'MA'"):
        parse_unit("MA")
    assert parse_unit("ma") == ("current", 1e-3) and parse_unit("KV") == ("voltage", 1e3)
    t = tmp_path / "tab.csv"
    t.write_text("time_ms\tvoltage_kV\tcurrent_A\n0,0\t1\t0,5\n0,1\t2\t0,5\n")
    with pytest.raises(ShotcheckError, match="decimal comma"):
        read(t)
    g = tmp_path / "mu.csv"
    g.write_text("time [\u03bcs],voltage_kV,current_A\n" + "".join(f"{k * 0.01:.2f},{k},{k}\n" for k in range(20)))
    assert read(g).sample_interval_s == pytest.approx(1e-8)


def test_a_channel_ignored_for_its_unit_is_named_when_the_current_is_missing(tmp_path: Path) -> None:
    """A current channel written with a unit the reader does not know ('AMP') was dropped, and the
    error said only 'no current channel among U'."""
    p = _small_cfg(tmp_path)
    p.write_text(p.read_text().replace("2,I,,,A,", "2,I_N,,,AMP,"))
    (tmp_path / "r.dat").write_text("".join(f"{k + 1},{k * 100},{k},{-k}\n" for k in range(20)))
    with pytest.raises(ShotcheckError, match=r"no current channel among 'U' \(V\); ignored for their units .*"
                                             r"'I_N' \[AMP\]"):
        _ = read(p).current


def test_critical_time_stamps_rounded_to_whole_ticks_are_uniform(tmp_path: Path) -> None:
    """nrates = 0: the time stamps are the time base, in whole ticks of timemult. 3 MS/s in 1 ns ticks
    alternates 333 and 334 ns (0.3 % apart) and was refused as non-uniform sampling; a real jump is still
    refused, and named at the sample where it happens (it used to name sample 1)."""
    cfg = ("Invented Lab,Rec 3,1999\n2,2A,0D\n1,U,,,kV,1,0,0,-99999,99999,1,1,P\n"
           "2,I,,,A,1,0,0,-99999,99999,1,1,P\n50\n0\n0,30\n01/01/2026,00:00:00.000000\n"
           "01/01/2026,00:00:00.000000\nASCII\n0.001\n")
    (tmp_path / "r.cfg").write_text(cfg)
    stamps = np.round(np.arange(30) * 1e9 / 3e6).astype(int)  # ns ticks
    (tmp_path / "r.dat").write_text("".join(f"{k + 1},{stamps[k]},{k},{-k}\n" for k in range(30)))
    r = read(tmp_path / "r.cfg")
    assert r.sample_interval_s == pytest.approx(1 / 3e6, rel=1e-3)
    stamps[12:] += 100  # a gap of 100 ns after sample 12 (counting from 1)
    (tmp_path / "r.dat").write_text("".join(f"{k + 1},{stamps[k]},{k},{-k}\n" for k in range(30)))
    with pytest.raises(ShotcheckError, match=r"non-uniform sampling: interval before sample 13 \(counting from 1\)"):
        read(tmp_path / "r.cfg")


def test_a_blank_analog_field_is_named_as_such(tmp_path: Path) -> None:
    """'4,3,,3' used to be reported as 'value nan in column 1 (U)': the file holds no 'nan', and the
    field is the line's third."""
    p = _small_cfg(tmp_path)
    rows = [f"{k + 1},{k * 100},{k},{-k}" for k in range(20)]
    rows[3] = "4,300,,-3"
    (tmp_path / "r.dat").write_text("\n".join(rows) + "\n")
    with pytest.raises(ShotcheckError, match=r"r.dat: line 4: empty field in column 3 \(U\)"):
        read(p)


def test_absurd_rate_or_timemult_names_the_cfg_field(tmp_path: Path) -> None:
    """A rate of 1e-320 Hz and a timemult of 1e308 used to be refused as 'sample_interval_s ... inf' and
    'start_time_s ... inf', names the .cfg does not have."""
    p = _small_cfg(tmp_path)
    (tmp_path / "r.dat").write_text("".join(f"{k + 1},{k * 100 + 5},{k},{-k}\n" for k in range(20)))
    good = p.read_text()
    p.write_text(good.replace("10000000,20", "1e-320,20"))
    with pytest.raises(ShotcheckError, match=r"r.cfg: line 7: bad sample-rate line: samp = '1e-320'"):
        read(p)
    p.write_text(good.replace("ASCII\n1\n", "ASCII\n1e308\n"))
    with pytest.raises(ShotcheckError, match=r"r.cfg: timemult: the first time stamp 5 times timemult"):
        read(p)


def test_a_csv_time_column_printed_with_few_decimals_is_uniform(tmp_path: Path) -> None:
    """3 MS/s written in us with three decimals (0.000, 0.333, 0.667, ...) alternates by one unit of the
    last digit and was refused as non-uniform sampling; a real jump still is."""
    times = np.round(np.arange(40) / 3.0, 3)
    c = tmp_path / "t.csv"
    c.write_text("time_us,voltage_kV,current_A\n" + "".join(f"{t:.3f},{k},{-k}\n" for k, t in enumerate(times)))
    assert read(c).sample_interval_s == pytest.approx(1e-6 / 3.0, rel=1e-4)
    times[20:] += 0.1
    c.write_text("time_us,voltage_kV,current_A\n" + "".join(f"{t:.3f},{k},{-k}\n" for k, t in enumerate(times)))
    with pytest.raises(ShotcheckError, match="non-uniform sampling"):
        read(c)
