"""Export of a winding with its test circuit as an ngspice netlist, and a small runner for ``ngspice -b``.

API
---
``netlist(winding, generator, *, chop=None, faults=(), t_end_s, dt_s, switch_times_s=None, level=1.0) -> str``
    (also reachable as ``WindingDesign.to_spice``). Node names: ``n0`` line terminal .. ``n<N>`` neutral end,
    ``ng`` generator capacitor. Switches (chopping gap, breakdowns) are time-controlled: ngspice ``sw``
    switches driven by a PWL voltage stepping at the closing instant; a breakdown needs its closing instant in
    ``switch_times_s`` (take ``SimResult.events``), since the netlist does not reproduce the voltage trigger.
    Discharge pulses and arc extinction are not exported.
``run_ngspice(netlist_text, vectors, *, timeout_s=120) -> (times_s, {vector: values})``
    Runs ``ngspice -b`` in a temporary directory and reads the ``wrdata`` output of the vectors, linearised
    onto the netlist's TRAN step.
``NGSPICE`` path of the binary or None.
"""

from __future__ import annotations

import shutil
import subprocess
import tempfile
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from detector._validation import ShotcheckError, check_range

from .circuit import ChoppingGap, ImpulseGenerator
from .faults import Breakdown, DischargeTrain
from .winding import WindingDesign

__all__ = ["netlist", "run_ngspice", "NGSPICE"]

#: The ngspice binary, or None when it is not installed.
NGSPICE = shutil.which("ngspice")


def _num(x: float) -> str:
    return f"{float(x):.12g}"


def _switch(name: str, a: str, b: str, t_close: float, r_on: float, lines: list[str]) -> None:
    ctl = f"ctl_{name}"
    lines.append(f"V{ctl} {ctl} 0 PWL(0 0 {_num(t_close)} 0 {_num(t_close + 1e-12)} 1)")
    lines.append(f"S{name} {a} {b} {ctl} 0 sw_{name}")
    lines.append(f".model sw_{name} sw(vt=0.5 vh=0.2 ron={_num(r_on)} roff=1e12)")


def netlist(
    winding: WindingDesign,
    generator: ImpulseGenerator,
    *,
    chop: ChoppingGap | None = None,
    faults: Sequence[Breakdown | DischargeTrain] = (),
    t_end_s: float,
    dt_s: float,
    switch_times_s: Sequence[float] | None = None,
    level: float = 1.0,
) -> str:
    """Return an ngspice netlist of the winding, generator, chopping gap and (time-switched) breakdowns.

    Parameters
    ----------
    winding : WindingDesign
    generator : ImpulseGenerator
        C1 starts charged to ``charge_V * level`` (``.tran ... uic``).
    chop : ChoppingGap, optional
    faults : sequence of Breakdown
        Each needs a closing instant in ``switch_times_s`` (same order).
    t_end_s, dt_s : float
        TRAN stop time and step [s]; the step is also the largest internal step.
    switch_times_s : sequence of float, optional
        Closing instants of the breakdowns [s].
    level : float
        Scale of the charging voltage.

    Returns
    -------
    str
        Netlist text ending in ``.end`` (no ``.control`` block; :func:`run_ngspice` adds one).
    """
    t_end = check_range("t_end_s", t_end_s, 0.0, None, low_inclusive=False, unit="s")
    dt = check_range("dt_s", dt_s, 0.0, t_end, low_inclusive=False, unit="s")
    bks = [f for f in faults if isinstance(f, Breakdown)]
    if any(isinstance(f, DischargeTrain) for f in faults):
        raise ShotcheckError("discharge pulses are not exported to ngspice; leave DischargeTrain out of faults")
    if any(b.extinguish_at_current_zero for b in bks):
        raise ShotcheckError("arc extinction at current zero is not exported to ngspice")
    times = list(switch_times_s or ())
    if len(times) != len(bks):
        raise ShotcheckError(
            f"switch_times_s must give one closing instant per Breakdown ({len(bks)}), got {len(times)}"
        )
    w, g = winding, generator
    n = w.n_sections
    lines = [f"* shotcheck synthetic winding {w.name!r}: {n} sections, neutral {w.neutral}"]
    v0 = g.charge_V * level
    lines.append(f"C1 ng 0 {_num(g.C1_F)} IC={_num(v0)}")
    if np.isfinite(g.R_tail_ohm):
        lines.append(f"R2 ng 0 {_num(g.R_tail_ohm)}")
    if g.L_lead_H > 0:
        lines.append(f"R1 ng nlead {_num(g.R_front_ohm)}")
        lines.append(f"Llead nlead n0 {_num(g.L_lead_H)} IC=0")
    else:
        lines.append(f"R1 ng n0 {_num(g.R_front_ohm)}")
    lines.append(f"Cload n0 0 {_num(g.C_load_F)} IC=0")
    for j in range(n + 1):
        lines.append(f"Cg{j} n{j} 0 {_num(w.Cg_F[j])} IC=0")
    for k in range(n):
        a, b = f"n{k}", f"n{k + 1}"
        if w.R_ohm[k] > 0:
            lines.append(f"L{k} {a} m{k} {_num(w.L_H[k])} IC=0")
            lines.append(f"Rs{k} m{k} {b} {_num(w.R_ohm[k])}")
        else:
            lines.append(f"L{k} {a} {b} {_num(w.L_H[k])} IC=0")
        lines.append(f"Cs{k} {a} {b} {_num(w.Cs_F[k])} IC=0")
        if np.isfinite(w.Rp_ohm[k]):
            lines.append(f"Rp{k} {a} {b} {_num(w.Rp_ohm[k])}")
    if w.k0 > 0:
        p = w.positions
        for j in range(n):
            for k in range(j + 1, n):
                c = w.k0 ** abs(p[j] - p[k])
                if c > 1e-12:
                    lines.append(f"K{j}_{k} L{j} L{k} {_num(c)}")
    if w.neutral == "grounded":
        lines.append(f"Rshunt n{n} 0 {_num(w.shunt_ohm)}")
    if np.isfinite(w.magnetising_H):
        lines.append(f"Lmag n0 0 {_num(w.magnetising_H)} IC=0")
    if chop is not None:
        if chop.lead_inductance_H > 0:
            _switch("chop", "n0", "ngap", chop.time_s, chop.arc_resistance_ohm, lines)
            lines.append(f"Lgap ngap 0 {_num(chop.lead_inductance_H)} IC=0")
        else:
            _switch("chop", "n0", "0", chop.time_s, chop.arc_resistance_ohm, lines)
    for i, (b, t) in enumerate(zip(bks, times, strict=True)):
        other = "0" if b.node_b is None else f"n{b.node_b}"
        _switch(f"bd{i}", f"n{b.node_a}", other, float(t), b.arc_resistance_ohm, lines)
    lines.append(".options method=gear maxord=2 reltol=1e-6 abstol=1e-12 vntol=1e-6 chgtol=1e-18")
    lines.append(f".tran {_num(dt)} {_num(t_end)} 0 {_num(dt)} uic")
    lines.append(".end")
    return "\n".join(lines) + "\n"


def run_ngspice(netlist_text: str, vectors: Sequence[str], *, timeout_s: float = 120.0
                ) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Run ``ngspice -b`` on a netlist and return the requested vectors on the TRAN step grid.

    Parameters
    ----------
    netlist_text : str
        Netlist ending in ``.end`` with a ``.tran`` line.
    vectors : sequence of str
        ngspice vector expressions, e.g. ``'v(n0)'``.
    timeout_s : float
        Wall-clock limit.

    Returns
    -------
    times_s : numpy.ndarray
    values : dict of str -> numpy.ndarray
    """
    if NGSPICE is None:
        raise ShotcheckError("ngspice is not installed (Debian package 'ngspice')")
    body = netlist_text.rstrip()
    if not body.endswith(".end"):
        raise ShotcheckError("the netlist must end with '.end'")
    vec = " ".join(vectors)
    control = "\n".join([
        ".control", "set noaskquit", "set wr_singlescale", "set filetype=ascii", "run",
        f"linearize {vec}", f"wrdata out.txt {vec}", "quit", ".endc",
    ])
    text = body[: -len(".end")] + control + "\n.end\n"
    with tempfile.TemporaryDirectory(prefix="shotcheck_spice_") as tmp:
        (Path(tmp) / "circuit.cir").write_text(text)
        proc = subprocess.run([NGSPICE, "-b", "circuit.cir"], cwd=tmp, capture_output=True, text=True,
                              timeout=timeout_s, check=False)
        out = Path(tmp) / "out.txt"
        if not out.exists():
            raise ShotcheckError(f"ngspice failed (exit {proc.returncode}): {proc.stderr[-2000:]}")
        data = np.loadtxt(out, ndmin=2)
    if data.shape[1] != 1 + len(vectors):
        raise ShotcheckError(f"unexpected wrdata columns: {data.shape[1]} for {len(vectors)} vectors")
    return data[:, 0], {v: data[:, i + 1] for i, v in enumerate(vectors)}
