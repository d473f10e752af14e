"""The pair figure of synthetic.plot on a real simulated pair."""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.figure import Figure

from synthetic.dataset import make_case
from synthetic.plot import plot_pair
from synthetic.scenario import bundled_families


def test_plot_pair_writes_png_with_fault_marker(artifacts_dir):
    fams = [bundled_families()["distribution"]]
    ref, test, label = make_case(42, 1, fams)  # case 1 is a turn-to-turn fault (classes balanced by index)
    assert label["event"] == "turn_to_turn"
    path = artifacts_dir / "synthetic_pair_turn_to_turn.png"
    fig = plot_pair(ref, test, label, path=path)
    assert isinstance(fig, Figure)
    assert path.stat().st_size > 10_000
    axes = fig.get_axes()
    assert len(axes) == 4
    # the fault instant is drawn as a vertical line on every panel
    for ax in axes:
        xs = [ln.get_xdata() for ln in ax.get_lines() if len(ln.get_xdata()) == 2]
        assert any(np.allclose(x, label["fault_time_us"]) for x in xs)
    # reference scaled to the test level: the voltage traces overlay before the fault
    v_ref_scaled = axes[0].get_lines()[0].get_ydata()
    v_test = axes[0].get_lines()[1].get_ydata()
    # (peaks agree within the benign generator drift and recorder noise, a few per cent)
    assert np.nanmax(np.abs(v_ref_scaled)) == pytest.approx(np.nanmax(np.abs(v_test)), rel=0.1)
