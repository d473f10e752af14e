"""``shotcheck demo``: the whole job on a simulated, invented transformer.

The unit is invented: serial ``KR-2291-07``, a 40 MVA, 132 kV class transformer whose HV winding has
BIL 550 kV, tested at the (invented) Kestrel Ridge high-voltage laboratory. Its HV winding is
simulated as a 40-section coupled ladder; the reduced full wave is applied at 60 % and the full wave
at 100 %, negative polarity, and in the full-level shot two turns of section 12 break down to each
other near the crest. Both shots are recorded at 100 MS/s with 12 bits over a fixed range, written as
COMTRADE files, read back and compared with the bundled model, and the report is written.

This module is the one place where the detector imports the synthetic package (besides training).
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["DEMO_UNIT", "make_demo_pair", "run_demo"]

DEMO_UNIT = {
    "unit_id": "KR-2291-07",
    "terminal": "1U",
    "lab": "Kestrel Ridge HV laboratory (invented)",
    "rating": "40 MVA, 132 kV class, HV winding BIL 550 kV (invented unit)",
}

#: Section whose turns break down, the turns shorted, and where in its range the breakdown voltage lies
#: (0 = the reduced-level stress, 1 = the full-level stress of that gap).
FAULT_SECTION = 12
FAULT_TURNS = 2
BREAKDOWN_FRACTION = 0.85
REDUCED_LEVEL = 0.60
TEST_VOLTAGE_V = -550e3


def make_demo_pair(seed: int = 2291) -> tuple[Any, Any, dict[str, Any]]:
    """Simulate and digitise the demo's reference and test shots.

    Parameters
    ----------
    seed : int
        Seed of the recorder noise and trigger.

    Returns
    -------
    reference, test : detector.record.Record
        Reduced-level (60 %) full wave and full-level full wave with the breakdown.
    truth : dict
        ``fault_time_us`` (test record's time axis), ``location`` (0 line end .. 1 neutral end),
        ``shorted_turns``, ``total_turns``.
    """
    from synthetic.circuit import design_generator
    from synthetic.digitiser import Digitiser, digitise
    from synthetic.faults import Breakdown
    from synthetic.simulate import max_stress, simulate
    from synthetic.winding import WindingDesign

    winding = WindingDesign.from_totals(
        40, total_inductance_H=60e-3, total_ground_capacitance_F=4e-9, alpha=10.0, turns_per_section=25,
        k0=0.55, damping=0.06, neutral="grounded", shunt_ohm=2.0, name="KR-2291-07 HV",
    )
    split, new_node = winding.split_section(FAULT_SECTION, FAULT_TURNS)
    gen = design_generator(split, front_time_s=1.2e-6, time_to_half_s=50e-6, test_voltage_V=TEST_VOLTAGE_V)
    t_end, dt = 105e-6, 2.5e-9
    stress = max_stress(split, gen, t_end_s=t_end, node_a=FAULT_SECTION, node_b=new_node)
    bdv = stress * (REDUCED_LEVEL + BREAKDOWN_FRACTION * (1.0 - REDUCED_LEVEL))
    fault = Breakdown(FAULT_SECTION, new_node, bdv, arc_resistance_ohm=0.5)
    sim_ref = simulate(split, gen, t_end_s=t_end, dt_s=dt, level=REDUCED_LEVEL)
    sim_test = simulate(split, gen, t_end_s=t_end, dt_s=dt, faults=(fault,))
    i_peak = float(np.max(np.abs(sim_ref.neutral_current_A))) / REDUCED_LEVEL
    dig = Digitiser(sample_rate_Hz=100e6, bits=12, voltage_range_V=1.3 * abs(TEST_VOLTAGE_V),
                    current_range_A=1.6 * i_peak, noise_lsb=0.6, pretrigger_s=8e-6, bandwidth_Hz=30e6)
    rng_r, rng_t = (np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(2))
    n = int(round(100e-6 * dig.sample_rate_Hz))
    common = {k: DEMO_UNIT[k] for k in ("unit_id", "terminal", "lab")}
    ref = digitise(sim_ref, dig, rng=rng_r, n_samples=n,
                   meta={**common, "shot_kind": "reduced", "level_percent": 100 * REDUCED_LEVEL, "shot_id": "S01"})
    test = digitise(sim_test, dig, rng=rng_t, n_samples=n,
                    meta={**common, "shot_kind": "full", "level_percent": 100.0, "shot_id": "S02"})
    truth = {
        "fault_time_us": None if sim_test.fault_time_s is None
        else 1e6 * (sim_test.fault_time_s + float(test.meta.get("trigger_time_s", 0.0))),
        "location": 0.5 * (split.node_position(FAULT_SECTION) + split.node_position(new_node)),
        "shorted_turns": FAULT_TURNS,
        "total_turns": float(split.total_turns),
    }
    return ref, test, truth


def truth_notes(truth: dict, verdict: dict) -> list[str]:
    """What the simulated pair really holds, and how far the verdict's instant and location lie from it.

    Parameters
    ----------
    truth : dict
        ``fault_time_us`` [us, test record's time axis] (None without a breakdown) and ``location``
        [fraction of the winding from the line end], as :func:`make_demo_pair` returns them.
    verdict : dict
        The verdict as :meth:`detector.compare.Verdict.to_dict` gives it.

    Returns
    -------
    list of str
        The simulated truth, then one line comparing the estimates with it (when there are any).
    """
    t_true, x_true = truth.get("fault_time_us"), truth.get("location")
    lines = [f"Simulated truth (an invented unit, not a measurement): {FAULT_TURNS} turns of section "
             f"{FAULT_SECTION + 1} break down" + (f" at {t_true:.2f} us" if t_true is not None else "")
             + (f", at {x_true:.2f} of the winding from the line end" if x_true is not None else "") + "."]
    parts = []
    t_est, x_est = verdict.get("fault_time_us"), verdict.get("location")
    if t_true is not None and t_est is not None:
        parts.append(f"the fault instant by {t_est - t_true:+.2f} us")
    if x_true is not None and x_est is not None:
        parts.append(f"the location by {x_est - x_true:+.2f} of the winding")
    if parts:
        lines.append("Against the simulation, the estimate is off: " + " and ".join(parts)
                     + " (typical errors: README, \"Measured quality of the bundled model\").")
    return lines


def run_demo(out_dir: str | Path = "shotcheck-demo", *, json_output: bool = False) -> int:
    """Simulate, write COMTRADE files, compare them and write the report; print the verdict.

    Parameters
    ----------
    out_dir : str or Path
        Folder for ``reference.cfg/.dat``, ``test.cfg/.dat``, ``verdict.json`` and ``report.html``.
    json_output : bool
        Print the verdict as JSON instead of text.

    Returns
    -------
    int
        0: the demo ran (the verdict itself is printed and written to ``verdict.json``).
    """
    from .cli import dumps, verdict_text
    from .compare import compare
    from .formats import read, write
    from .report import write_report

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    ref, test, truth = make_demo_pair()
    ref_path, test_path = out / "reference.cfg", out / "test.cfg"
    write(ref, ref_path, data_format="BINARY")
    write(test, test_path, data_format="BINARY")
    reference, tested = read(ref_path), read(test_path)
    verdict = compare(reference, tested)
    d = verdict.to_dict()
    d["demo_truth"] = truth
    (out / "verdict.json").write_text(dumps(d), encoding="utf-8")
    notes = truth_notes(truth, d)
    report = write_report(verdict, out / "report.html", reference_name=str(ref_path), test_name=str(test_path),
                          title=f"Demo: {DEMO_UNIT['unit_id']} terminal {DEMO_UNIT['terminal']} (invented unit)",
                          notes=notes)
    if json_output:
        print(dumps(d))
    else:
        print(f"Invented unit {DEMO_UNIT['unit_id']} ({DEMO_UNIT['rating']}), {DEMO_UNIT['lab']}")
        print(f"Simulated: reduced full wave at {100 * REDUCED_LEVEL:.0f} %, full wave at 100 % with "
              f"{FAULT_TURNS} turns of section {FAULT_SECTION + 1} breaking down"
              + (f" at {truth['fault_time_us']:.2f} us" if truth["fault_time_us"] is not None else "")
              + f", location {truth['location']:.2f}")
        print(verdict_text(d, str(ref_path), str(test_path)))
        for note in notes[1:]:
            print(note)
        print(f"report: {report}")
        print(f"verdict JSON: {out / 'verdict.json'}")
    sys.stdout.flush()
    return 0
