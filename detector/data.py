"""Built-in example records of an invented unit, for the quick start, docstrings and tests.

The unit is invented: a 40 MVA, 132 kV class transformer, serial ``KR-2291-07``, tested at the
(invented) Kestrel Ridge high-voltage laboratory, terminal ``1U``, BIL 550 kV.

Examples
--------
>>> from detector.data import example_record
>>> r = example_record("full")
>>> r.meta["unit_id"]
'KR-2291-07'
"""

from __future__ import annotations

import numpy as np

from ._validation import check_option
from .record import Channel, Record

__all__ = ["example_record", "EXAMPLE_META"]

EXAMPLE_META = {
    "unit_id": "KR-2291-07",
    "terminal": "1U",
    "lab": "Kestrel Ridge HV laboratory (invented)",
}

# Double-exponential time constants of the 1.2/50 us wave (Kuffel, Zaengl & Kuffel, High Voltage
# Engineering: Fundamentals, 2nd ed., table of impulse wave constants; recalled).
_TAU1_S = 68.22e-6
_TAU2_S = 0.405e-6


def example_record(kind: str = "full", *, seed: int = 7) -> Record:
    """Return an invented, digitised lightning-impulse record.

    The voltage is a negative 1.2/50 us double exponential of about 550 kV extreme value, sampled at
    100 MS/s for 120 us with a 10 us pre-trigger, quantised to 12 bits over +/-700 kV with half an LSB
    of white noise. The neutral current is that of a simple RC branch driven by the voltage; it is a
    plausible shape, not a winding simulation.

    Parameters
    ----------
    kind : {'full', 'chopped'}
        ``'chopped'`` collapses the voltage at 4 us after the virtual origin over about 150 ns.
    seed : int
        Seed of the noise generator.

    Returns
    -------
    Record
        Channels ``'U'`` (voltage, source unit kV) and ``'I_N'`` (current, source unit A).
    """
    check_option("kind", kind, ("full", "chopped"))
    rng = np.random.default_rng(seed)
    dt = 1e-8
    pre = 10e-6
    t = np.arange(12000) * dt - pre
    tt = np.clip(t, 0.0, None)
    shape = np.exp(-tt / _TAU1_S) - np.exp(-tt / _TAU2_S)
    v = -550e3 * shape / shape.max()
    if kind == "chopped":
        t_chop = 4.0e-6
        collapse = 0.5 * (1 + np.tanh((t - t_chop) / 40e-9))
        v = v * (1 - collapse)
    # neutral current: capacitive charging spike plus a resistive part (RC branch, invented values)
    dv = np.gradient(v, dt)
    i = 2e-9 * dv * 0.02 + v / 4.0e3
    lsb_v = 1.4e6 / 2**12
    lsb_i = 400.0 / 2**12
    v_q = np.round((v + rng.normal(0, 0.5 * lsb_v, v.size)) / lsb_v) * lsb_v
    i_q = np.round((i + rng.normal(0, 0.5 * lsb_i, i.size)) / lsb_i) * lsb_i
    meta = dict(EXAMPLE_META, shot_kind="chopped" if kind == "chopped" else "full", level_percent=100.0,
                shot_id=f"example-{kind}")
    return Record(
        start_time_s=float(t[0]),
        sample_interval_s=dt,
        channels=(Channel("U", "voltage", v_q, "kV"), Channel("I_N", "current", i_q, "A")),
        meta=meta,
        source=f"example:{kind}",
    )
