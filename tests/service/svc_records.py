"""Invented impulse records for the service tests (an invented unit, serial TX-0000-SVC, no real lab).

The voltage is a 1.2/50 us double exponential; the neutral current is a capacitive charging spike plus a
resistive part plus two damped winding oscillations. Plausible shapes for exercising the service, not a
winding simulation (the comparison physics is tested elsewhere).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from detector.formats import write
from detector.record import Channel, Record

# Double-exponential constants of the 1.2/50 us wave (Kuffel, Zaengl & Kuffel, High Voltage Engineering:
# Fundamentals, 2nd ed., table of impulse wave constants; recalled, as in REFERENCE.md).
TAU1_S = 68.22e-6
TAU2_S = 0.405e-6


def impulse_record(n_samples: int = 20_000, *, level_percent: float = 100.0, kind: str = "full",
                   seed: int = 0, dt_s: float = 1e-8, pre_s: float = 10e-6) -> Record:
    """One invented record with a voltage 'U' (kV in files) and a neutral current 'I_N' (A)."""
    rng = np.random.default_rng(seed)
    t = np.arange(n_samples) * dt_s - pre_s
    tt = np.clip(t, 0.0, None)
    shape = np.exp(-tt / TAU1_S) - np.exp(-tt / TAU2_S)
    v = -550e3 * (level_percent / 100.0) * shape / shape.max()
    if kind == "chopped":
        v = v * (1 - 0.5 * (1 + np.tanh((t - 4.0e-6) / 40e-9)))
    dv = np.gradient(v, dt_s)
    osc = (np.exp(-tt / 8e-6) * np.sin(2 * np.pi * 180e3 * tt) + 0.4 * np.exp(-tt / 3e-6)
           * np.sin(2 * np.pi * 1.1e6 * tt))
    i = 4e-11 * dv + v / 4.0e3 + 1e-5 * v.min() * osc
    lsb_v, lsb_i = 1.4e6 / 2**12, 400.0 / 2**12
    v = np.round((v + rng.normal(0, 0.5 * lsb_v, v.size)) / lsb_v) * lsb_v
    i = np.round((i + rng.normal(0, 0.5 * lsb_i, i.size)) / lsb_i) * lsb_i
    shot_kind = kind if kind == "chopped" else ("reduced" if level_percent < 100 else kind)
    meta = {"unit_id": "TX-0000-SVC", "terminal": "2V", "shot_kind": shot_kind,
            "level_percent": float(level_percent)}
    return Record(float(t[0]), dt_s, (Channel("U", "voltage", v, "kV"), Channel("I_N", "current", i, "A")),
                  meta=meta, source="svc-test")


def write_record(rec: Record, path: Path, **options) -> list[Path]:
    """Write a record and return its file(s) (a .cfg comes with its .dat and .inf)."""
    write(rec, path, **options)
    if path.suffix != ".cfg":
        return [path]
    return [path] + [q for q in (path.with_suffix(".dat"), path.with_suffix(".inf")) if q.is_file()]


def upload(field: str, paths: list[Path]) -> list[tuple[str, tuple[str, bytes]]]:
    """Multipart ``files=`` entries for one record field."""
    return [(field, (p.name, p.read_bytes())) for p in paths]


def as_json(rec: Record, *, unit_v: str = "kV") -> dict:
    """JSON form of a record for ``POST /v1/comparisons``."""
    scale = {"kV": 1e-3, "V": 1.0}[unit_v]
    return {"sample_interval_s": rec.sample_interval_s, "start_time_s": rec.start_time_s,
            "channels": [{"name": "U", "unit": unit_v, "samples": (rec.voltage.samples * scale).tolist()},
                         {"name": "I_N", "unit": "A", "samples": rec.current.samples.tolist()}],
            "meta": dict(rec.meta)}
