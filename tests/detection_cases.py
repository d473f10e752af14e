"""Controlled record pairs for the detection tests: one simulated winding, one change at a time.

Not collected by pytest (no ``test_`` prefix). The winding, generator and recorder are fixed and
invented; each builder changes exactly one thing between the reduced-level reference and the
full-level test shot, so a test can say which difference the detector must or must not call a fault.
"""

from __future__ import annotations

import dataclasses
import functools

import numpy as np

from detector.record import Record
from synthetic.circuit import ChoppingGap, design_generator
from synthetic.digitiser import Digitiser, digitise
from synthetic.faults import Breakdown, DischargeTrain
from synthetic.simulate import max_stress, simulate
from synthetic.winding import WindingDesign

REDUCED = 0.6
T_END_S = 105e-6
DT_SIM_S = 2.5e-9
N_SAMPLES = 10000  # 100 us at 100 MS/s
TEST_VOLTAGE_V = -650e3


@functools.lru_cache(maxsize=8)
def winding(split_section: int | None = None, split_turns: int = 0) -> tuple[WindingDesign, int | None]:
    """A 40-section, 1000-turn HV winding (invented), optionally with one section split for a turn fault."""
    w = WindingDesign.from_totals(
        40, total_inductance_H=80e-3, total_ground_capacitance_F=4e-9, alpha=9.0, turns_per_section=25,
        k0=0.55, damping=0.06, neutral="grounded", shunt_ohm=2.0, magnetising_H=40.0, name="test winding",
    )
    if split_section is None:
        return w, None
    return w.split_section(split_section, split_turns)


def recorder(i_peak_A: float, **changes) -> Digitiser:
    """12 bits at 100 MS/s over fixed ranges (the same at both levels unless changed)."""
    base = dict(sample_rate_Hz=100e6, bits=12, voltage_range_V=1.3 * abs(TEST_VOLTAGE_V),
                current_range_A=1.6 * i_peak_A, noise_lsb=0.6, pretrigger_s=8e-6)
    base.update(changes)
    base.setdefault("bandwidth_Hz", 0.3 * base["sample_rate_Hz"])
    return Digitiser(**base)


@dataclasses.dataclass
class Case:
    reference: Record
    test: Record
    fault_time_us: float | None = None
    location: float | None = None


def make_case(
    *,
    fault: str = "none",
    section: int = 20,
    turns: int = 5,
    fraction: float = 0.8,
    chop_test_s: float | None = None,
    chop_reference_s: float | None = None,
    front_drift: float = 0.0,
    tail_drift: float = 0.0,
    magnetising_ratio: float = 1.0,
    reference_recorder: dict | None = None,
    test_recorder: dict | None = None,
    discharge_charge_C: float = 3e-6,
    polarity: int = -1,
    seed: int = 0,
    n_samples: int | None = None,
) -> Case:
    """Simulate and record one reference/test pair.

    Parameters
    ----------
    fault : {'none', 'turn_to_turn', 'to_ground', 'discharge_only'}
        Change in the full-level shot.
    section, turns : int
        Section of the fault (0 at the line end) and turns shorted (turn_to_turn).
    fraction : float
        Breakdown voltage between the reduced-level (0) and the full-level (1) stress of the gap.
    chop_test_s, chop_reference_s : float, optional
        Chopping instants after the impulse start [s].
    front_drift, tail_drift : float
        Relative change of the generator's front/tail resistors for the reference shot (benign).
    magnetising_ratio : float
        Test-level over reference-level magnetising inductance (benign core effect on the tail).
    reference_recorder, test_recorder : dict, optional
        Changes to the recorder settings of either shot.
    discharge_charge_C : float
        Charge of each discharge pulse between the fault section's two end nodes (discharge_only) [C].
    polarity : {-1, 1}
        Polarity of both shots.
    seed : int
        Seed of the recorder noise and trigger.
    n_samples : int, optional
        Samples per record; default 100 us at each record's own sample rate.
    """
    split = fault == "turn_to_turn"
    w, new_node = winding(section, turns) if split else winding()
    gen = design_generator(w, front_time_s=1.2e-6, time_to_half_s=50e-6, test_voltage_V=polarity * abs(TEST_VOLTAGE_V))
    gen_ref = dataclasses.replace(gen, R_front_ohm=gen.R_front_ohm * (1 + front_drift),
                                  R_tail_ohm=gen.R_tail_ohm * (1 + tail_drift))
    w_test = dataclasses.replace(w, magnetising_H=w.magnetising_H * magnetising_ratio)
    chop_t = None if chop_test_s is None else ChoppingGap(chop_test_s)
    chop_r = None if chop_reference_s is None else ChoppingGap(chop_reference_s)
    faults: tuple = ()
    location = None
    if fault != "none":
        a, b = (section, new_node) if split else (section, None)
        if fault == "discharge_only":  # between two adjacent discs: no net charge to ground
            b = section + 1
        stress = max_stress(w_test, gen, t_end_s=T_END_S, node_a=a, node_b=b, chop=chop_t)
        bdv = stress * (REDUCED + fraction * (1 - REDUCED))
        if fault == "discharge_only":
            faults = (DischargeTrain(a, bdv, discharge_charge_C, 30e-9, 12, 0.5e-6, node_b=b),)
        else:
            faults = (Breakdown(a, b, bdv, arc_resistance_ohm=0.5),)
        pb = w.node_position(b) if b is not None else w.node_position(a)
        location = 0.5 * (w.node_position(a) + pb)
    sim_r = simulate(w, gen_ref, t_end_s=T_END_S, dt_s=DT_SIM_S, chop=chop_r, level=REDUCED)
    sim_t = simulate(w_test, gen, t_end_s=T_END_S, dt_s=DT_SIM_S, chop=chop_t, faults=faults)
    i_peak = float(np.max(np.abs(sim_r.neutral_current_A))) / REDUCED
    rng_r, rng_t = (np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(2))
    meta = {"unit_id": "TW-0001 (invented)", "terminal": "HV"}
    dig_r = recorder(i_peak, **(reference_recorder or {}))
    dig_t = recorder(i_peak, **(test_recorder or {}))
    ref = digitise(sim_r, dig_r, rng=rng_r, n_samples=n_samples or int(round(100e-6 * dig_r.sample_rate_Hz)),
                   meta={**meta, "shot_kind": "chopped" if chop_r else "reduced", "level_percent": 100 * REDUCED})
    test = digitise(sim_t, dig_t, rng=rng_t, n_samples=n_samples or int(round(100e-6 * dig_t.sample_rate_Hz)),
                    meta={**meta, "shot_kind": "chopped" if chop_t else "full", "level_percent": 100.0})
    ft = None
    if sim_t.fault_time_s is not None and fault != "none":
        ft = 1e6 * (sim_t.fault_time_s + float(test.meta.get("trigger_time_s", 0.0)))
    return Case(ref, test, ft, location)


def mirrored(record: Record) -> Record:
    """The same record with both channels negated (the polarity mirror)."""
    chans = tuple(c.with_samples(-c.samples) for c in record.channels)
    return record.replace(channels=chans, step="negate()")
