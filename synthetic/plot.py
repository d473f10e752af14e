"""Figure of one synthetic record pair: voltages, currents, their differences and the fault instant."""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from detector.record import Record

__all__ = ["plot_pair"]


def _scaled_reference(reference: Record, test: Record) -> tuple[float, np.ndarray, np.ndarray]:
    lr = reference.meta.get("level_percent")
    lt = test.meta.get("level_percent")
    if lr and lt:
        k = float(lt) / float(lr)
    else:  # fall back on the voltage extremes
        k = float(np.abs(test.voltage.samples).max() / max(np.abs(reference.voltage.samples).max(), 1e-30))
    t = test.times()
    tr = reference.times()
    v = np.interp(t, tr, reference.voltage.samples * k, left=0.0, right=np.nan)
    i = np.interp(t, tr, reference.current.samples * k, left=0.0, right=np.nan)
    return k, v, i


def plot_pair(
    reference: Record,
    test: Record,
    label: Mapping[str, Any] | None = None,
    path: str | Path | None = None,
):
    """Plot a reference/test pair: voltage and current of both shots and their differences.

    The reference is scaled to the test level (ratio of ``level_percent``, else of the voltage
    extremes) and interpolated linearly onto the test's time axis; no alignment is applied, so
    trigger offsets between the shots show as they are recorded.

    Parameters
    ----------
    reference, test : detector.record.Record
        Records with a voltage [V] and a current [A] channel.
    label : mapping, optional
        Label dict (from :func:`synthetic.dataset.load_dataset`); ``event``, ``fault_time_us`` and
        ``position`` are shown, the fault instant [us, test record time] is marked.
    path : str or Path, optional
        Save the figure there (PNG, or any format matplotlib knows by suffix).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure  # Agg canvas, independent of the pyplot backend

    k, v_ref, i_ref = _scaled_reference(reference, test)
    t_us = test.times() * 1e6
    v, i = test.voltage.samples, test.current.samples
    fig = Figure(figsize=(10, 7), layout="constrained")
    ax = fig.subplots(2, 2, sharex=True)
    ax[0, 0].plot(t_us, v_ref / 1e3, lw=0.8, label=f"reference x {k:.3g}")
    ax[0, 0].plot(t_us, v / 1e3, lw=0.8, label="test")
    ax[0, 0].set_ylabel("voltage [kV]")
    ax[1, 0].plot(t_us, i_ref, lw=0.8, label=f"reference x {k:.3g}")
    ax[1, 0].plot(t_us, i, lw=0.8, label="test")
    ax[1, 0].set_ylabel("neutral current [A]")
    ax[0, 1].plot(t_us, (v - v_ref) / 1e3, lw=0.8, color="C3")
    ax[0, 1].set_ylabel("voltage difference [kV]")
    ax[1, 1].plot(t_us, i - i_ref, lw=0.8, color="C3")
    ax[1, 1].set_ylabel("current difference [A]")
    for a in ax[1]:
        a.set_xlabel("time [us]")
    for a in ax.flat:
        a.grid(True, alpha=0.3)
    ax[0, 0].legend(loc="best", fontsize="small")
    title = f"{test.meta.get('unit_id', '')}  test {test.meta.get('shot_kind', '?')} " \
            f"{test.meta.get('level_percent', '?')} %, reference {reference.meta.get('shot_kind', '?')} " \
            f"{reference.meta.get('level_percent', 0):.0f} %"
    if label is not None:
        ft = label.get("fault_time_us", math.nan)
        title += f"\nevent {label.get('event', '?')}"
        pos = label.get("position", math.nan)
        if isinstance(pos, float) and math.isfinite(pos):
            title += f" at {pos:.2f} of the winding from the line end"
        if isinstance(ft, float) and math.isfinite(ft):
            title += f", instant {ft:.2f} us ({label.get('fault_phase', '')})"
            for a in ax.flat:
                a.axvline(ft, color="k", ls="--", lw=0.8)
    fig.suptitle(title, fontsize="medium")
    if path is not None:
        fig.savefig(path, dpi=110)
    return fig
