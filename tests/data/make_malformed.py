"""Generate the corpus of malformed record files in tests/data/malformed/.

Run from the repository root: ``python tests/data/make_malformed.py``. The files are small and
committed; tests/test_formats_errors.py lists the message fragment each one must produce. Every file
is derived from one small valid record (invented test hall and unit serial) with a single defect.
The random bytes come from a fixed seed, so re-running the script gives identical files.
"""

from __future__ import annotations

import shutil
import struct
from pathlib import Path

import numpy as np

OUT = Path(__file__).parent / "malformed"
N = 20  # samples in the base record (>= 16, the minimum a Record accepts)


def cfg_text(
    *,
    first: str = "Test Hall B,T-0815,2013",
    counts: str = "3,2A,1D",
    analog: tuple[str, ...] = (
        "1,U1,,,kV,0.01,0,0,-99999,99998,1,1,P",
        "2,IN,,,A,0.001,0,0,-99999,99998,1,1,P",
    ),
    digital: tuple[str, ...] = ("1,TRIG,,,0",),
    nrates: str = "1",
    rates: tuple[str, ...] = (f"100000000,{N}",),
    data_type: str = "ASCII",
    timemult: str = "0.01",
    tail: tuple[str, ...] = ("0,0", "0,0"),
    cut_after: int | None = None,
) -> str:
    """Configuration text of the base record with any part replaced."""
    lines = [first, counts, *analog, *digital, "50", nrates, *rates,
             "01/01/2000,00:00:00.000000", "01/01/2000,00:00:00.000000", data_type, timemult, *tail]
    if cut_after is not None:
        lines = lines[:cut_after]
    return "\r\n".join(lines) + "\r\n"


def dat_rows(n: int = N, *, stamps: list[int] | None = None) -> list[list[str]]:
    """ASCII data rows: sample number, time stamp (10 ns ticks), U1, IN and one digital channel."""
    ts = stamps if stamps is not None else [i for i in range(n)]
    return [[str(i + 1), str(ts[i]), str(1000 * i - 5000), str(-300 + 25 * i), "0"] for i in range(n)]


def dat_text(rows: list[list[str]]) -> str:
    return "".join(",".join(r) + "\r\n" for r in rows)


def binary_dat(n: int = N, *, stamps: np.ndarray | None = None, code: str = "<i2") -> bytes:
    dtype = np.dtype([("n", "<u4"), ("ts", "<u4"), ("x", code, (2,)), ("d", "<u2", (1,))])
    a = np.zeros(n, dtype)
    a["n"] = np.arange(1, n + 1)
    a["ts"] = np.arange(n) if stamps is None else stamps
    a["x"][:, 0] = np.arange(n) * 100 - 500
    a["x"][:, 1] = np.arange(n) * 3 - 20
    return a.tobytes()


def csv_text(header: str = "time_us,voltage_kV,current_A", rows: list[str] | None = None,
             meta: tuple[str, ...] = ("# shot_kind: full", "# unit_id: T-0815")) -> str:
    if rows is None:
        rows = [f"{0.01 * i:.2f},{10.0 * i:.1f},{0.01 * i:.3f}" for i in range(N)]
    return "\n".join([*meta, header, *rows]) + "\n"


def write(name: str, data: str | bytes) -> None:
    path = OUT / name
    if isinstance(data, str):
        data = data.encode("utf-8")
    path.write_bytes(data)


def main() -> None:
    if OUT.exists():
        shutil.rmtree(OUT)
    OUT.mkdir(parents=True)
    rng = np.random.default_rng(20260101)
    rows = dat_rows()

    # ---- COMTRADE .cfg + .dat ----
    write("missing_dat.cfg", cfg_text())
    write("channel_count.cfg", cfg_text(counts="4,2A,1D"))
    write("channel_count.dat", dat_text(rows))
    write("truncated_ascii.cfg", cfg_text())
    write("truncated_ascii.dat", dat_text(rows[:15]))
    write("extra_samples.cfg", cfg_text())
    write("extra_samples.dat", dat_text(dat_rows(N + 3)))
    write("truncated_binary.cfg", cfg_text(data_type="BINARY"))
    write("truncated_binary.dat", binary_dat()[:-7])
    write("oversized_binary.cfg", cfg_text(data_type="BINARY"))
    write("oversized_binary.dat", binary_dat() + b"\x00" * 14)
    bad = [r.copy() for r in rows]
    bad[6][2] = "12x"
    write("non_numeric.cfg", cfg_text())
    write("non_numeric.dat", dat_text(bad))
    short = [r.copy() for r in rows]
    short[9] = short[9][:3]
    write("short_row.cfg", cfg_text())
    write("short_row.dat", dat_text(short))
    write("unknown_data_type.cfg", cfg_text(data_type="ASCIIX"))
    write("unknown_data_type.dat", dat_text(rows))
    write("no_voltage_unit.cfg", cfg_text(analog=(
        "1,U1,,,kX,0.01,0,0,-99999,99998,1,1,P", "2,IN,,,A,0.001,0,0,-99999,99998,1,1,P")))
    write("no_voltage_unit.dat", dat_text(rows))
    write("no_voltage.cfg", cfg_text(analog=(
        "1,I1,,,A,0.01,0,0,-99999,99998,1,1,P", "2,IN,,,A,0.001,0,0,-99999,99998,1,1,P")))
    write("no_voltage.dat", dat_text(rows))
    stamps = list(range(N))
    stamps[8] = 3
    write("time_backwards.cfg", cfg_text(nrates="0", rates=(f"0,{N}",)))
    write("time_backwards.dat", dat_text(dat_rows(stamps=stamps)))
    write("empty.cfg", b"")
    write("empty_dat.cfg", cfg_text())
    write("empty_dat.dat", b"")
    write("bad_rate_value.cfg", cfg_text(rates=(f"100MHz,{N}",)))
    write("bad_rate_value.dat", dat_text(rows))
    write("bad_rate_fields.cfg", cfg_text(rates=("100000000",)))
    write("bad_rate_fields.dat", dat_text(rows))
    write("zero_rate.cfg", cfg_text(rates=(f"0,{N}",)))
    write("zero_rate.dat", dat_text(rows))
    write("two_rates.cfg", cfg_text(nrates="2", rates=("100000000,10", f"50000000,{N}")))
    write("two_rates.dat", dat_text(rows))
    write("revision_2005.cfg", cfg_text(first="Test Hall B,T-0815,2005"))
    write("revision_1991.cfg", cfg_text(first="Test Hall B,T-0815"))
    write("line1_fields.cfg", cfg_text(first="Test Hall B"))
    write("garbage.cfg", rng.integers(0, 256, 300, dtype=np.uint8).tobytes())
    write("garbage_dat.cfg", cfg_text())
    write("garbage_dat.dat", rng.integers(0, 256, 200, dtype=np.uint8).tobytes())
    miss = [r.copy() for r in rows]
    miss[11][3] = "99999"
    write("missing_value.cfg", cfg_text())
    write("missing_value.dat", dat_text(miss))
    write("ps_flag.cfg", cfg_text(analog=(
        "1,U1,,,kV,0.01,0,0,-99999,99998,1,1,X", "2,IN,,,A,0.001,0,0,-99999,99998,1,1,P")))
    write("analog_fields.cfg", cfg_text(analog=(
        "1,U1,,,kV,0.01,0,0,-99999,99998", "2,IN,,,A,0.001,0,0,-99999,99998,1,1,P")))
    write("zero_multiplier.cfg", cfg_text(analog=(
        "1,U1,,,kV,0,0,0,-99999,99998,1,1,P", "2,IN,,,A,0.001,0,0,-99999,99998,1,1,P")))
    write("float32_1999.cfg", cfg_text(first="Test Hall B,T-0815,1999", data_type="FLOAT32"))
    write("cut_short.cfg", cfg_text(cut_after=6))
    bin_stamps = np.arange(N, dtype=np.uint32)
    bin_stamps[5] = 0xFFFFFFFF
    write("missing_stamp.cfg", cfg_text(nrates="0", rates=(f"0,{N}",), data_type="BINARY"))
    write("missing_stamp.dat", binary_dat(stamps=bin_stamps))
    f32 = np.frombuffer(binary_dat(code="<f4"), dtype=np.uint8).copy()
    f32[8 + 4 * 4 * 2 + 2 * 2: 8 + 4 * 4 * 2 + 2 * 2 + 4] = np.frombuffer(struct.pack("<f", float("nan")), np.uint8)
    write("float32_nan.cfg", cfg_text(data_type="FLOAT32"))
    write("float32_nan.dat", f32.tobytes())

    # ---- COMTRADE .cff ----
    write("cff_no_cfg.cff", "just some text\r\nwithout sections\r\n")
    write("cff_no_byte_count.cff", "--- file type: CFG ---\r\n" + cfg_text(data_type="BINARY")
          + "--- file type: DAT BINARY ---\r\n")
    body = binary_dat()
    write("cff_truncated.cff", ("--- file type: CFG ---\r\n" + cfg_text(data_type="BINARY")
                                + f"--- file type: DAT BINARY: {len(body)} ---\r\n").encode() + body[:-30])
    write("cff_no_dat.cff", "--- file type: CFG ---\r\n" + cfg_text())
    write("cff_type_mismatch.cff", "--- file type: CFG ---\r\n" + cfg_text(data_type="BINARY")
          + "--- file type: DAT ASCII ---\r\n" + dat_text(rows))
    write("cff_unknown_section.cff", "--- file type: CFG ---\r\n" + cfg_text()
          + "--- file type: XYZ ---\r\n" + "--- file type: DAT ASCII ---\r\n" + dat_text(rows))

    # ---- CSV ----
    write("empty.csv", b"")
    write("comments_only.csv", "# shot_kind: full\n# unit_id: T-0815\n")
    write("header_only.csv", csv_text(rows=[]))
    write("unknown_unit.csv", csv_text(header="time_us,voltage_kX,current_A"))
    write("no_unit.csv", csv_text(header="time_us,voltage,current_A"))
    write("no_time_column.csv", csv_text(header="voltage_kV,current_A,voltage2_kV"))
    nan_rows = [f"{0.01 * i:.2f},{10.0 * i:.1f},{0.01 * i:.3f}" for i in range(N)]
    nan_rows[3] = "0.03,nan,0.03"
    write("nan_value.csv", csv_text(rows=nan_rows))
    mism = nan_rows.copy()
    mism[3] = "0.03,30.0"
    write("column_mismatch.csv", csv_text(rows=mism))
    empty_field = nan_rows.copy()
    empty_field[3] = "0.03,,0.03"
    write("empty_field.csv", csv_text(rows=empty_field))
    text_field = nan_rows.copy()
    text_field[7] = "0.07,7O.0,0.07"
    write("non_numeric.csv", csv_text(rows=text_field))
    dec = [f"{0.01 * i:.2f};{10.0 * i:.1f};{0.01 * i:.3f}".replace(".", ",") for i in range(N)]
    write("decimal_comma.csv", csv_text(header="time_us;voltage_kV;current_A", rows=dec))
    back = [f"{0.01 * i:.2f},{10.0 * i:.1f},{0.01 * i:.3f}" for i in range(N)]
    back[10] = "0.05,100.0,0.1"
    write("time_backwards.csv", csv_text(rows=back))
    nonuni = [f"{0.01 * i + (0.004 if i == 12 else 0):.3f},{10.0 * i:.1f},{0.01 * i:.3f}" for i in range(N)]
    write("nonuniform_time.csv", csv_text(rows=nonuni))
    write("too_few_samples.csv", csv_text(rows=back[:5]))
    write("garbage.csv", rng.integers(0, 256, 300, dtype=np.uint8).tobytes())
    write("latin1.csv", "time_us,voltage_kV,current_A\n0,1,\xb5\n".encode("latin-1"))
    write("only_time.csv", csv_text(header="time_us", rows=[f"{0.01 * i:.2f}" for i in range(N)]))
    write("current_only.csv", csv_text(header="time_us,current_A,current2_mA"))
    write("shot7.xyz", "not a record\n")


if __name__ == "__main__":
    main()
