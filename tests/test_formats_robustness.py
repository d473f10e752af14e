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
