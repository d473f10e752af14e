"""Figures of one comparison (matplotlib), for the HTML report and the web page.

:func:`figures` turns a :class:`~detector.compare.Verdict` into a dictionary of
:class:`matplotlib.figure.Figure` objects:

``verdict``
    Event probabilities as bars, and a sketch of the winding from the line end (0) to the neutral end
    (1) with the estimated fault location marked.
``voltage``, ``current``
    Overlays of the reference and the test record over the whole record and zoomed on the front. The
    reference is scaled to the test level (its per-unit values times the test's test-voltage value) and
    both keep the test record's polarity, in kV and A; the time axis is the test record's own.
``difference``
    Test minus scaled reference, voltage and current, with the +/- k sigma noise band of the
    time-domain onset detector and the span after a voltage collapse (not compared) shaded; below them
    the test current minus its prediction from the reference, on the whole record's time axis, the
    part after the prediction's span shaded.
``transfer``
    Transfer-function magnitudes |I(f)/V(f)| of both records (dB re 1 S against log frequency) and their
    difference, the comparison bands shaded.
``wavelet``
    Wavelet difference map of the neutral currents (time by level, |difference| in noise units), each
    level labelled with its approximate frequency band: the test current against its prediction from
    the reference over the span the prediction covers, then against the reference current itself to
    the record's end (the levels scored there); cells that are not scored left blank over hatching.

The figures are built on :class:`matplotlib.figure.Figure` directly with the Agg canvas: they are never
registered with :mod:`matplotlib.pyplot`, so they need no ``plt.close`` and leave no global state; drop
the references (or call ``fig.clear()``) when done.

Look: Okabe-Ito colours (distinguishable with the common colour-vision deficiencies), the reference
drawn solid and the test dashed so the two differ without colour, a unit on every numeric axis.
"""

from __future__ import annotations

import inspect
import math
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import LogNorm
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle
from matplotlib.ticker import LogLocator

from ._validation import ShotcheckError
from .metrics.compensated import compensated_difference
from .metrics.timedomain import time_domain_metrics
from .metrics.wavelet import wavelet_difference
from .model import EVENT_CLASSES, EVENT_LABELS

if TYPE_CHECKING:  # pragma: no cover - import for annotations only
    from .compare import Verdict
    from .features import PairAnalysis

__all__ = [
    "FIGURE_NAMES",
    "OKABE_ITO",
    "EVENT_COLOURS",
    "REFERENCE_STYLE",
    "TEST_STYLE",
    "K_SIGMA",
    "COMPENSATED_K_SIGMA",
    "WAVELET_K_SIGMA",
    "figures",
    "format_frequency",
]

#: Okabe & Ito, "Color Universal Design" (2008): eight colours told apart with the common deficiencies.
OKABE_ITO: Mapping[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "purple": "#CC79A7",
}

#: Line style of the reference record: solid, blue, a little wider so the dashed test shows on top.
REFERENCE_STYLE: Mapping[str, Any] = {"color": OKABE_ITO["blue"], "linestyle": "-", "linewidth": 1.7}
#: Line style of the test record: dashed, vermillion.
TEST_STYLE: Mapping[str, Any] = {"color": OKABE_ITO["vermillion"], "linestyle": (0, (5, 2)), "linewidth": 1.1}
_FAULT_STYLE: Mapping[str, Any] = {"color": OKABE_ITO["black"], "linestyle": ":", "linewidth": 1.4}

#: Noise band of the difference traces in standard deviations: the default threshold of the
#: time-domain onset detector (:func:`detector.metrics.timedomain.time_domain_metrics`), which
#: :func:`detector.features.extract` uses.
K_SIGMA: float = float(inspect.signature(time_domain_metrics).parameters["k_sigma"].default)

#: Significance threshold of the wavelet difference (default of
#: :func:`detector.metrics.wavelet.wavelet_difference`, as :func:`detector.features.extract` calls it),
#: marked on the colour bar of the wavelet map.
WAVELET_K_SIGMA: float = float(inspect.signature(wavelet_difference).parameters["k_sigma"].default)

#: Onset threshold of the wave-shape-compensated current difference (default of
#: :func:`detector.metrics.compensated.compensated_difference`, as :func:`detector.features.extract`
#: calls it).
COMPENSATED_K_SIGMA: float = float(inspect.signature(compensated_difference).parameters["k_sigma"].default)

#: Names of the figures in the order the report shows them (``wavelet`` is absent when the analysis has
#: no wavelet difference).
FIGURE_NAMES = ("verdict", "voltage", "current", "difference", "transfer", "wavelet")

_EVENT_TEXT = EVENT_LABELS
#: Colour of each event class in the figures and the report.
EVENT_COLOURS: Mapping[str, str] = {
    "none": OKABE_ITO["green"],
    "turn_to_turn": OKABE_ITO["vermillion"],
    "to_ground": OKABE_ITO["purple"],
    "discharge_only": OKABE_ITO["orange"],
}
_WIDTH_IN = 10.0
_FONT_PT = 9.0


# --------------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------------
def format_frequency(f_Hz: float) -> str:
    """Short text of a frequency with an SI prefix.

    Parameters
    ----------
    f_Hz : float
        Frequency [Hz].

    Returns
    -------
    str
        For example ``'390 kHz'``, ``'25 MHz'``, ``'0 Hz'``.

    Examples
    --------
    >>> format_frequency(390625.0)
    '391 kHz'
    >>> format_frequency(25e6)
    '25 MHz'
    """
    f = float(f_Hz)
    if not math.isfinite(f):
        return "n/a"
    for scale, unit in ((1e9, "GHz"), (1e6, "MHz"), (1e3, "kHz")):
        if abs(f) >= scale:
            return f"{f / scale:.3g} {unit}"
    return f"{f:.3g} Hz"


def _new_figure(height_in: float, *, left_in: float = 0.8, right_in: float = 0.2, top_in: float = 0.35,
                bottom_in: float = 0.5, wspace: float = 0.22, hspace: float = 0.45) -> Figure:
    """Make a figure with fixed margins [in] (a layout engine would triple the rendering time)."""
    fig = Figure(figsize=(_WIDTH_IN, height_in))
    FigureCanvasAgg(fig)
    fig.subplots_adjust(left=left_in / _WIDTH_IN, right=1.0 - right_in / _WIDTH_IN, top=1.0 - top_in / height_in,
                        bottom=bottom_in / height_in, wspace=wspace, hspace=hspace)
    return fig


def _style_axes(ax: Any) -> None:
    ax.grid(True, color="#d0d0d0", linewidth=0.6)
    ax.set_axisbelow(True)
    ax.tick_params(labelsize=_FONT_PT)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _pair_to_test_s(a: PairAnalysis) -> float:
    """Offset to add to a time on the pair's axis to get the test record's own time [s]."""
    p = a.pair
    return float(p.test_times_s[0] - p.times_s[0])


def _test_scale_V(a: PairAnalysis) -> float:
    """Factor from per unit to volts at the test level, with the test record's polarity [V]."""
    p = a.pair
    return float(p.test_test_voltage_V) * float(p.test_polarity)


def _mark_fault(ax: Any, t_us: float | None, *, label: bool) -> None:
    if t_us is None or not math.isfinite(t_us):
        return
    lo, hi = ax.get_xlim()
    if not lo <= t_us <= hi:
        return
    ax.axvline(t_us, **_FAULT_STYLE, label=f"fault instant {t_us:.3f} µs" if label else None)


def _front_zoom_us(a: PairAnalysis) -> tuple[float, float]:
    """Window of the zoomed front panel on the test record's time axis [µs]."""
    t30 = (a.front_time_s + _pair_to_test_s(a)) * 1e6
    t1 = next((ws.front_time_s for ws in (a.test_shape, a.reference_shape)
               if ws is not None and ws.front_time_s), 1.2e-6)
    t1_us = min(max(t1 * 1e6, 0.2), 20.0)
    return t30 - max(1.0, 0.8 * t1_us), t30 + max(5.0, 4.0 * t1_us)


def _envelope(t: np.ndarray, y: np.ndarray, n_bins: int = 1500) -> tuple[np.ndarray, np.ndarray]:
    """Keep the smallest and the largest sample of each of ``n_bins`` equal bins, in time order.

    A line of 20 000 samples across 700 pixels looks the same drawn from its per-bin extremes (every
    peak kept), and draws several times faster. Short arrays are returned unchanged.
    """
    n = t.size
    if n <= 4 * n_bins:
        return t, y
    m = n // n_bins
    k = n_bins * m
    blocks = y[:k].reshape(n_bins, m)
    base = np.arange(n_bins) * m
    lo = base + np.argmin(blocks, axis=1)
    hi = base + np.argmax(blocks, axis=1)
    idx = np.concatenate((np.sort(np.stack((lo, hi), axis=1), axis=1).ravel(), np.arange(k, n)))
    return t[idx], y[idx]


def _window(t: np.ndarray, lo: float, hi: float) -> slice:
    """Index range of ``t`` covering [lo, hi] with one sample to spare on each side."""
    i0 = max(int(np.searchsorted(t, lo)) - 1, 0)
    i1 = min(int(np.searchsorted(t, hi, side="right")) + 1, t.size)
    return slice(i0, i1)


def _ylim_of(ax: Any, t: np.ndarray, curves: tuple[np.ndarray, ...], lo: float, hi: float) -> None:
    sel = (t >= lo) & (t <= hi)
    if not sel.any():
        return
    vals = np.concatenate([c[sel] for c in curves])
    vals = vals[np.isfinite(vals)]
    if vals.size == 0:
        return
    vmin, vmax = float(vals.min()), float(vals.max())
    pad = 0.06 * (vmax - vmin) or 1.0
    ax.set_ylim(vmin - pad, vmax + pad)


# --------------------------------------------------------------------------------------------------
# the figures
# --------------------------------------------------------------------------------------------------
def verdict_figure(verdict: Verdict) -> Figure:
    """Event probabilities and the winding sketch with the fault location.

    Parameters
    ----------
    verdict : Verdict
        Result of :func:`detector.compare.compare`.

    Returns
    -------
    matplotlib.figure.Figure
        Left: probability of each event class [1]; right: the winding from the line end (0) to the
        neutral end (1) with the estimated location marked [fraction of the winding length].
    """
    fig = _new_figure(2.6, left_in=1.35, wspace=0.15)
    ax_p, ax_w = fig.subplots(1, 2, width_ratios=[2, 3])
    classes = [c for c in EVENT_CLASSES] + [c for c in verdict.probabilities if c not in EVENT_CLASSES]
    probs = np.array([float(verdict.probabilities.get(c, 0.0)) for c in classes])
    y = np.arange(len(classes))[::-1]
    chosen = verdict.event
    bars = ax_p.barh(y, probs, color=[EVENT_COLOURS.get(c, OKABE_ITO["sky_blue"]) for c in classes],
                     edgecolor="black", linewidth=[1.8 if c == chosen else 0.4 for c in classes],
                     hatch=None)
    for b, c in zip(bars, classes, strict=True):
        if c == chosen:
            b.set_hatch("//")
    for yi, p in zip(y, probs, strict=True):
        ax_p.text(min(p + 0.02, 0.86), yi, f"{p:.2f}", va="center", fontsize=_FONT_PT,
                  bbox={"facecolor": "white", "edgecolor": "none", "pad": 1.0})
    ax_p.set_yticks(y, [_EVENT_TEXT.get(c, c) for c in classes])
    ax_p.set_xlim(0.0, 1.0)
    ax_p.set_xlabel("probability [1]", fontsize=_FONT_PT)
    ax_p.set_ylabel("event class", fontsize=_FONT_PT)
    ax_p.set_title("Classifier (hatched: verdict)", fontsize=_FONT_PT + 1, loc="left")
    _style_axes(ax_p)
    ax_p.grid(False, axis="y")

    # winding sketch: a row of discs between the line terminal and the grounded neutral
    n_disc = 20
    edges = np.linspace(0.0, 1.0, n_disc + 1)
    for x0, x1 in zip(edges[:-1], edges[1:], strict=True):
        ax_w.add_patch(Rectangle((x0 + 0.004, -0.25), x1 - x0 - 0.008, 0.5, facecolor="#e8e8e8",
                                 edgecolor="#606060", linewidth=0.6))
    ax_w.plot([-0.06, 0.0], [0.0, 0.0], color="black", linewidth=1.5)
    ax_w.plot([-0.06], [0.0], marker="o", color="black", markersize=6)
    ax_w.plot([1.0, 1.05, 1.05], [0.0, 0.0, -0.35], color="black", linewidth=1.5)
    for k, half in enumerate((0.035, 0.022, 0.01)):  # ground symbol
        yy = -0.35 - 0.07 * k
        ax_w.plot([1.05 - half, 1.05 + half], [yy, yy], color="black", linewidth=1.2)
    ax_w.text(-0.06, 0.42, "line end", ha="center", fontsize=_FONT_PT)
    ax_w.text(1.05, 0.42, "neutral end", ha="center", fontsize=_FONT_PT)
    loc = verdict.location
    if loc is not None and math.isfinite(loc):
        x = float(np.clip(loc, 0.0, 1.0))
        ax_w.axvline(x, ymin=0.1, ymax=0.82, color=OKABE_ITO["vermillion"], linewidth=2.2)
        ax_w.plot([x], [0.55], marker="v", color=OKABE_ITO["vermillion"], markersize=11)
        ax_w.text(x, 0.72, f"estimated fault location {loc:.2f}", ha="center", fontsize=_FONT_PT,
                  color="black")
        title = "Winding, line end (0) to neutral end (1)"
    else:
        why = "no fault indicated" if not verdict.fault_indicated else "the model has no location regressor"
        ax_w.text(0.5, 0.6, f"no location estimated ({why})", ha="center", fontsize=_FONT_PT)
        title = "Winding, line end (0) to neutral end (1)"
    ax_w.set_xlim(-0.12, 1.12)
    ax_w.set_ylim(-0.62, 0.95)
    ax_w.set_xticks(np.linspace(0.0, 1.0, 6))
    ax_w.set_xlabel("position along the winding from the line end [fraction of length]", fontsize=_FONT_PT)
    ax_w.yaxis.set_visible(False)
    for side in ("top", "right", "left"):
        ax_w.spines[side].set_visible(False)
    ax_w.spines["bottom"].set_bounds(0.0, 1.0)
    ax_w.tick_params(labelsize=_FONT_PT)
    ax_w.set_title(title, fontsize=_FONT_PT + 1, loc="left")
    return fig


def _overlay_figure(verdict: Verdict, quantity: str) -> Figure:
    a = verdict.analysis
    p = a.pair
    scale = _test_scale_V(a)
    t_us = p.test_times_s * 1e6
    if quantity == "voltage":
        ref, test = p.ref_voltage_pu * scale * 1e-3, p.test_voltage_pu * scale * 1e-3
        ylabel, title = "voltage [kV]", "Applied voltage"
    else:
        ref, test = p.ref_current_pu * scale, p.test_current_pu * scale
        ylabel, title = "neutral current [A]", "Neutral current"
    fig = _new_figure(3.5, top_in=0.6)
    ax_full, ax_zoom = fig.subplots(1, 2, width_ratios=[3, 2])
    lvl = f"{p.test_test_voltage_V * 1e-3:.4g} kV"
    ut_r, ut_t = abs(p.ref_test_voltage_V), abs(p.test_test_voltage_V)
    ref_at = f" (at {100.0 * ut_r / ut_t:.0f} % of the test level)" if ut_t > 0 else ""
    lo, hi = _front_zoom_us(a)
    lo, hi = max(lo, float(t_us[0])), min(hi, float(t_us[-1]))
    win = _window(t_us, lo, hi)
    for ax, (tr, yr), (tt, yt) in (
        (ax_full, _envelope(t_us, ref), _envelope(t_us, test)),
        (ax_zoom, (t_us[win], ref[win]), (t_us[win], test[win])),
    ):
        ax.plot(tr, yr, **REFERENCE_STYLE, label=f"reference{ref_at}, scaled to the test's {lvl}")
        ax.plot(tt, yt, **TEST_STYLE, label="test")
        ax.set_xlabel("time on the test record [µs]", fontsize=_FONT_PT)
        ax.set_ylabel(ylabel, fontsize=_FONT_PT)
        _style_axes(ax)
    ax_full.set_xlim(float(t_us[0]), float(t_us[-1]))
    ax_zoom.set_xlim(lo, hi)
    _ylim_of(ax_zoom, t_us, (ref, test), lo, hi)
    t_f = None if verdict.fault_time_s is None else verdict.fault_time_s * 1e6
    _mark_fault(ax_full, t_f, label=True)
    _mark_fault(ax_zoom, t_f, label=False)
    ax_full.set_title(f"{title}: whole record", fontsize=_FONT_PT + 1, loc="left")
    ax_zoom.set_title(f"{title}: front", fontsize=_FONT_PT + 1, loc="left")
    _top_legend(fig, ax_full)
    return fig


def _top_legend(fig: Figure, ax: Any, extra: list[Any] | None = None) -> None:
    """One legend for the figure, in a row above the axes (never over the data)."""
    handles, labels = ax.get_legend_handles_labels()
    for h in extra or []:
        handles.append(h)
        labels.append(h.get_label())
    fig.legend(handles, labels, loc="upper center", ncols=min(len(handles), 4), frameon=False,
               fontsize=_FONT_PT, bbox_to_anchor=(0.5, 1.0), handlelength=2.6, columnspacing=1.5)


def voltage_figure(verdict: Verdict) -> Figure:
    """Overlay of the applied voltages, whole record and front.

    Parameters
    ----------
    verdict : Verdict
        Result of :func:`detector.compare.compare`.

    Returns
    -------
    matplotlib.figure.Figure
        Voltage [kV] against time on the test record [µs]; the reference is its per-unit voltage times
        the test's test-voltage value, with the test record's polarity.
    """
    return _overlay_figure(verdict, "voltage")


def current_figure(verdict: Verdict) -> Figure:
    """Overlay of the neutral currents, whole record and front.

    Parameters
    ----------
    verdict : Verdict
        Result of :func:`detector.compare.compare`.

    Returns
    -------
    matplotlib.figure.Figure
        Neutral current [A] against time on the test record [µs]; the reference current is scaled by
        the ratio of the test voltages (its per-unit value times the test's test-voltage value).
    """
    return _overlay_figure(verdict, "current")


def difference_figure(verdict: Verdict, *, k_sigma: float = K_SIGMA) -> Figure:
    """Difference traces test minus scaled reference with the noise band.

    Parameters
    ----------
    verdict : Verdict
        Result of :func:`detector.compare.compare`.
    k_sigma : float
        Half-width of the noise band of the plain differences in noise standard deviations [1].

    Returns
    -------
    matplotlib.figure.Figure
        Voltage difference [kV] and neutral-current difference [A] against time on the test record [µs],
        at the test level and with the test record's polarity; the span after the earlier voltage
        collapse, which is not compared, is shaded and the view ends shortly after it. When the analysis
        holds a wave-shape-compensated current difference, a third panel shows the test current minus
        the current predicted from the reference under the test voltage [A], with its own
        time-dependent +/- :data:`COMPENSATED_K_SIGMA` sigma band, over the span where it is valid
        (after a chop too). Samples a recorder clipped (not measured, not scored) are shaded
        (:data:`CLIPPED_LABEL`).

    Raises
    ------
    ShotcheckError
        If ``k_sigma`` is not a finite positive number.
    """
    if not (isinstance(k_sigma, int | float) and math.isfinite(k_sigma) and k_sigma > 0):
        raise ShotcheckError(f"k_sigma must be a finite positive number of standard deviations, got {k_sigma!r}")
    a = verdict.analysis
    td = a.time_domain
    p = a.pair
    cd = getattr(a, "compensated", None)
    scale = _test_scale_V(a)
    off = _pair_to_test_s(a)
    t_us = p.test_times_s * 1e6
    n_ax = 3 if cd is not None else 2
    fig = _new_figure(2.15 * n_ax + 0.5, top_in=0.6, hspace=0.5)
    axes = fig.subplots(n_ax, 1)
    ax_v, ax_i = axes[0], axes[1]
    t0, t_end = float(t_us[0]), float(t_us[-1])
    stop_us = (td.compared_until_s + off) * 1e6
    view_end = t_end if stop_us >= t_end else min(t_end, stop_us + max(2.0, 0.2 * (stop_us - t0)))
    traces = (
        (ax_v, td.dv_pu * scale * 1e-3, td.voltage_sigma_pu * abs(scale) * 1e-3, "voltage difference [kV]",
         "Voltage", "kV"),
        (ax_i, td.di_pu * scale, td.current_sigma_pu * abs(scale), "current difference [A]", "Neutral current",
         "A"),
    )
    t_f = None if verdict.fault_time_s is None else verdict.fault_time_s * 1e6
    for ax, d, sig, ylabel, what, unit in traces:
        band = k_sigma * sig
        ax.axhspan(-band, band, color=OKABE_ITO["sky_blue"], alpha=0.35, linewidth=0,
                   label=f"±{k_sigma:g} σ noise band")
        vis = _window(t_us, t0, view_end)
        ax.plot(*_envelope(t_us[vis], d[vis]), color=OKABE_ITO["black"], linewidth=0.9,
                label="test − scaled reference")
        ax.set_ylabel(ylabel, fontsize=_FONT_PT)
        ax.set_xlim(t0, view_end)
        if stop_us < t_end - 0.5e6 * p.sample_interval_s:
            ax.axvspan(stop_us, t_end, facecolor="#bbbbbb", alpha=0.35, hatch="xx", edgecolor="#888888",
                       linewidth=0, label="not compared (after a voltage collapse)")
        inside = t_us <= stop_us
        seg = d[inside] if inside.any() else d
        m = float(np.nanmax(np.abs(seg))) if seg.size else band
        lim = 1.15 * max(m, 2.0 * band, 1e-12)
        ax.set_ylim(-lim, lim)
        _style_axes(ax)
        ax.set_title(f"{what}: test − scaled reference (noise σ = {sig:.3g} {unit})", fontsize=_FONT_PT + 1,
                     loc="left")
        _mark_fault(ax, t_f, label=ax is ax_v)
    # samples a recorder clipped were not measured and are not scored
    _shade_runs(ax_v, t_us, p.voltage_clipped, label=True)
    _shade_runs(ax_i, t_us, p.clipped, label=not p.voltage_clipped.any())
    # window boundaries of the time-domain metrics, labelled inside the upper axes
    for k, name in enumerate(("front", "crest", "tail")):
        w0 = td.windows.get(name, (math.nan, math.nan))[0]
        if not math.isfinite(w0):
            continue
        x = (w0 + off) * 1e6
        for ax in (ax_v, ax_i):
            ax.axvline(x, color="#777777", linewidth=0.6, linestyle="--")
        # on a white ground: the next window's line (or the fault instant's) may cross a label
        ax_v.annotate(f"{name} →", (x, 1.0), xycoords=("data", "axes fraction"), xytext=(2, -9 - 9 * k),
                      textcoords="offset points", fontsize=_FONT_PT - 1, color="#444444", zorder=5,
                      bbox={"facecolor": "white", "edgecolor": "none", "pad": 0.3, "alpha": 0.85})
    if cd is not None:
        _compensated_panel(axes[2], cd, t_us, scale, t_f, beyond_scored=getattr(a, "wavelet_beyond", None) is not None)
        _shade_runs(axes[2], t_us, p.unmeasured, label=False)
    axes[-1].set_xlabel("time on the test record [µs]", fontsize=_FONT_PT)
    for ax in axes[:-1]:
        ax.set_xlabel("time on the test record [µs]", fontsize=_FONT_PT - 1, labelpad=1)
    _top_legend(fig, ax_v, extra=[h for h in ax_i.get_legend_handles_labels()[0] if h.get_label() == CLIPPED_LABEL])
    return fig


#: Label of the shading over samples a recorder clipped (not measured, not compared).
CLIPPED_LABEL = "not measured (recorder clipped)"


def _shade_runs(ax: Any, t_us: np.ndarray, mask: np.ndarray, *, label: bool, max_runs: int = 200) -> None:
    """Shade each run of flagged samples (the first ``max_runs``; runs closer than 0.1 % of the view merge)."""
    m = np.asarray(mask, dtype=bool)
    if not m.any():
        return
    edges = np.flatnonzero(np.diff(np.concatenate(([0], m.astype(np.int8), [0]))))
    starts, stops = edges[::2], edges[1::2] - 1
    gap = 1e-3 * float(t_us[-1] - t_us[0])
    new = np.concatenate(([True], t_us[starts[1:]] - t_us[stops[:-1]] > gap))  # a run that starts a group
    first = np.flatnonzero(new)
    s0, s1 = starts[first], stops[np.r_[first[1:] - 1, stops.size - 1]]
    half = 0.5 * float(t_us[1] - t_us[0]) if t_us.size > 1 else 0.0  # a run covers its samples' cells
    for k, (a, b) in enumerate(zip(s0[:max_runs], s1[:max_runs], strict=True)):  # loop over runs, not samples
        ax.axvspan(float(t_us[a]) - half, float(t_us[b]) + half, facecolor=OKABE_ITO["orange"], alpha=0.25,
                   linewidth=0,
                   label=CLIPPED_LABEL if (label and k == 0) else None)


#: Label of the shading after the span the compensated prediction covers.
BEYOND_SPAN_LABEL = "after the prediction's span"

#: Hatching (and its colour) of the cells of the wavelet map that are not scored.
UNSCORED_HATCH = "////"
UNSCORED_HATCH_COLOUR = "#9a9a9a"


def _compensated_panel(ax: Any, cd: Any, t_us: np.ndarray, scale: float, t_f: float | None, *,
                       beyond_scored: bool = False) -> None:
    """Test current minus its prediction from the reference, with the time-dependent noise band, on the
    whole record's time axis (the part after the span the prediction covers shaded and labelled with what
    scores it there: the plain difference's wavelet levels, when ``beyond_scored``)."""
    sig = np.asarray(cd.sigma, dtype=np.float64) * abs(scale)
    d = np.asarray(cd.difference, dtype=np.float64) * scale
    ok = np.flatnonzero(np.isfinite(sig) & np.isfinite(d))
    if ok.size < 2:
        ax.text(0.5, 0.5, "compensated difference not available", ha="center", va="center",
                transform=ax.transAxes, fontsize=_FONT_PT)
        ax.set_ylabel("current difference [A]", fontsize=_FONT_PT)
        _style_axes(ax)
        return
    sl = slice(int(ok[0]), int(ok[-1]) + 1)
    t, dd, ss = t_us[sl], d[sl], sig[sl]
    band = COMPENSATED_K_SIGMA * ss
    tb, bb = t, band
    if t.size > 4000:  # the band is smooth: draw the largest value of each of 1000 steps (never narrower)
        starts = np.linspace(0, t.size, 1001).astype(np.int64)[:-1]
        tb = np.append(t[starts], t[-1])
        bb = np.maximum.reduceat(band, starts)
        bb = np.append(bb, bb[-1])
    ax.fill_between(tb, -bb, bb, color=OKABE_ITO["sky_blue"], alpha=0.35, linewidth=0, step="post")
    ax.plot(*_envelope(t, dd), color=OKABE_ITO["black"], linewidth=0.9)
    # the same time axis as the panels above, to the record's end: the prediction stops where its
    # unwindowing gain reaches its limit, and what follows is scored another way (or not at all)
    ax.set_xlim(float(t_us[0]), float(t_us[-1]))
    if float(t[-1]) < float(t_us[-1]) - 0.5 * float(t_us[1] - t_us[0]):
        ax.axvspan(float(t[-1]), float(t_us[-1]), facecolor="#bbbbbb", alpha=0.35, hatch="//",
                   edgecolor="#888888", linewidth=0)
        what = ("the plain difference is scored there\n(wavelet levels D1–D6)" if beyond_scored
                else "not scored (too short)")
        ax.annotate(f"{BEYOND_SPAN_LABEL}:\n{what}", (float(t[-1]), 0.97), xycoords=("data", "axes fraction"),
                    xytext=(4, 0), textcoords="offset points", va="top", fontsize=_FONT_PT - 1, color="#333333")
    fin = dd[np.isfinite(dd)]
    m = float(np.max(np.abs(fin))) if fin.size else 1.0
    lim = 1.15 * max(m, 2.0 * float(np.nanmedian(band)), 1e-12)
    ax.set_ylim(-lim, lim)
    ax.set_ylabel("current difference [A]", fontsize=_FONT_PT)
    ax.set_title(f"Neutral current: test − prediction from the reference under the test voltage "
                 f"(band ±{COMPENSATED_K_SIGMA:g} σ(t))", fontsize=_FONT_PT + 1, loc="left")
    _style_axes(ax)
    _mark_fault(ax, t_f, label=False)


_BAND_SHADES = ("#E69F00", "#56B4E9", "#009E73", "#CC79A7", "#F0E442")


def transfer_figure(verdict: Verdict) -> Figure:
    """Transfer-function magnitudes of both records and their difference.

    Parameters
    ----------
    verdict : Verdict
        Result of :func:`detector.compare.compare`.

    Returns
    -------
    matplotlib.figure.Figure
        Top: |H(f)| = |I(f)/V(f)| [dB re 1 S] of the reference (solid) and the test (dashed); bottom: test
        minus reference [dB]; log frequency axis [Hz]; the comparison bands shaded. Drawn over the
        frequencies both records resolve (their voltage and current spectra above their noise), the
        points the indices are computed over.
    """
    tc = verdict.analysis.transfer
    f = np.asarray(tc.frequency_Hz, dtype=np.float64)
    r = np.asarray(tc.ref_dB, dtype=np.float64)
    t = np.asarray(tc.test_dB, dtype=np.float64)
    pos = f > 0
    f, r, t = f[pos], r[pos], t[pos]
    # drawn where both records resolve the frequency, the band the indices are computed over: one
    # record's curve beyond it (a pre-trigger quiet to the last code reads as no noise at all, and its
    # curve then runs on to the Nyquist frequency) would only show noise and squeeze the scale
    both = np.isfinite(r) & np.isfinite(t)
    if both.any():
        r, t = np.where(both, r, np.nan), np.where(both, t, np.nan)
    fig = _new_figure(4.8, hspace=0.35)
    ax_m, ax_d = fig.subplots(2, 1, sharex=True, height_ratios=[3, 2])
    ok = np.isfinite(r) | np.isfinite(t)
    if ok.any():
        lo, hi = float(f[ok].min()), float(f[ok].max())
    else:
        lo, hi = (float(f.min()), float(f.max())) if f.size else (1e3, 1e7)
    bands = list(tc.bands.items())
    for k, (name, b) in enumerate(bands):
        b0, b1 = max(b.f_low_Hz, lo), min(b.f_high_Hz, hi)
        if not b1 > b0:
            continue
        for ax in (ax_m, ax_d):
            ax.axvspan(b0, b1, color=_BAND_SHADES[k % len(_BAND_SHADES)], alpha=0.13, linewidth=0)
        # the label names what is drawn and computed (the part of the band both records resolve) and,
        # when that is less, the standard's whole band: an axis starting at 30 kHz under a label that
        # reads "1 kHz" would misstate it
        label = f"{name}\n{format_frequency(b0)}–{format_frequency(b1)}"
        if format_frequency(b0) != format_frequency(b.f_low_Hz) or format_frequency(b1) != format_frequency(b.f_high_Hz):
            label += f"\n(of {format_frequency(b.f_low_Hz)}–{format_frequency(b.f_high_Hz)})"
        ax_m.annotate(label,
                      (math.sqrt(b0 * b1), 1.0), xycoords=("data", "axes fraction"), xytext=(0, -4),
                      textcoords="offset points", ha="center", va="top", fontsize=_FONT_PT - 1.5,
                      color="#333333")
    ax_m.plot(f, r, **REFERENCE_STYLE, label="reference")
    ax_m.plot(f, t, **TEST_STYLE, label="test")
    matched = [pk for pk in tc.peaks if math.isfinite(pk.f_ref_Hz) and math.isfinite(pk.f_test_Hz)]
    if matched:
        ax_m.plot([pk.f_ref_Hz for pk in matched], [pk.ref_dB for pk in matched], linestyle="none", marker="^",
                  color=REFERENCE_STYLE["color"], markersize=5, label="matched resonances")
        ax_m.plot([pk.f_test_Hz for pk in matched], [pk.test_dB for pk in matched], linestyle="none",
                  marker="v", color=TEST_STYLE["color"], markersize=5)
    ax_m.set_xscale("log")
    ax_m.xaxis.set_minor_locator(LogLocator(subs=(2.0, 5.0)))  # fewer minor ticks: faster, still readable
    ax_m.set_xlim(lo, hi)
    _ylim_of(ax_m, f, (r, t), lo, hi)
    ymin, ymax = ax_m.get_ylim()
    ax_m.set_ylim(ymin, ymax + 0.25 * (ymax - ymin))  # room for the band labels
    ax_m.set_ylabel("|H| [dB re 1 S]", fontsize=_FONT_PT)
    ax_m.set_title("Transfer function I(f)/V(f), magnitude", fontsize=_FONT_PT + 1, loc="left")
    ax_m.legend(fontsize=_FONT_PT - 1, loc="lower left", framealpha=0.9)
    d = t - r
    ax_d.axhline(0.0, color="#777777", linewidth=0.7)
    ax_d.plot(f, d, color=OKABE_ITO["black"], linewidth=1.0, label="test − reference")
    dd = d[np.isfinite(d)]
    if dd.size:
        m = float(np.max(np.abs(dd)))
        ax_d.set_ylim(-1.15 * max(m, 0.5), 1.15 * max(m, 0.5))
    ax_d.set_ylabel("difference [dB]", fontsize=_FONT_PT)
    ax_d.set_xlabel("frequency [Hz]", fontsize=_FONT_PT)
    ov = tc.overall
    ax_d.set_title(f"Difference: RMS {ov.rms_dB:.2f} dB, max {ov.max_dB:.2f} dB, ρ = {ov.rho:.4f}",
                   fontsize=_FONT_PT + 1, loc="left")
    for ax in (ax_m, ax_d):
        _style_axes(ax)
    return fig


def wavelet_figure(verdict: Verdict) -> Figure:
    """Wavelet difference map of the neutral currents.

    Parameters
    ----------
    verdict : Verdict
        Result of :func:`detector.compare.compare`; its analysis must hold a wavelet difference.

    Returns
    -------
    matplotlib.figure.Figure
        |test - prediction| of the wavelet coefficients in noise standard deviations of each level [1]
        over the span the compensated prediction covers, then |test - reference| of the plain per-unit
        currents (levels D1-D6) to the record's end, time on the test record [µs] by level (finest D1 at
        the top, with its approximate band and its peak in each part). Cells that are drawn but not
        scored (before the end of the front window, around an intended chop, clipped samples, the
        transform's edges) are left blank over a hatched background (:data:`UNSCORED_HATCH`).

    Raises
    ------
    ShotcheckError
        If the analysis has no wavelet difference (span before a collapse too short).
    """
    a = verdict.analysis
    wd = a.wavelet
    if wd is None:
        raise ShotcheckError("this comparison has no wavelet difference (the span before a collapse is too short)")
    off = _pair_to_test_s(a)
    n_rows = wd.difference_map.shape[0]
    parts = [_map_part(wd, getattr(a, "wavelet_scored", None), off, n_rows)]
    beyond = getattr(a, "wavelet_beyond", None)
    if beyond is not None and beyond.difference_map.shape[1] > 1:
        parts.append(_map_part(beyond, getattr(a, "wavelet_beyond_scored", None), off, n_rows))
    fig = _new_figure(1.25 + 0.3 * n_rows, left_in=3.2, right_in=0.3, top_in=0.6)
    ax = fig.subplots()
    peaks = [float(np.nanmax(m)) for _, m in parts if np.isfinite(m).any()]
    vmax = max(max(peaks, default=10.0), 10.0 * WAVELET_K_SIGMA)
    # cells not scored are left out of the image and show the axes' hatched background: a colour of
    # their own would be confused with a value (cividis passes through grey at 6-10 sigma)
    cmap = colormaps["cividis"].with_extremes(bad=(0.0, 0.0, 0.0, 0.0))
    ax.set_facecolor("white")
    ax.patch.set_hatch(UNSCORED_HATCH)
    ax.patch.set_edgecolor(UNSCORED_HATCH_COLOUR)
    ax.patch.set_linewidth(0.0)
    norm = LogNorm(vmin=1.0, vmax=vmax)
    im = None
    for (x0, x1), dmap in parts:
        # below one noise sigma everything is dark; the significance threshold sits in the upper half
        im = ax.imshow(np.clip(dmap, 1.0, None), aspect="auto", interpolation="nearest", cmap=cmap, norm=norm,
                       origin="upper", extent=(x0, x1, n_rows - 0.5, -0.5))
    ax.set_xlim(parts[0][0][0], parts[-1][0][1])
    labels = []
    for k, lab in enumerate(wd.labels):
        f0, f1 = wd.band_Hz[k]
        band = f"< {format_frequency(f1)}" if f0 <= 0 else f"{format_frequency(f0)}–{format_frequency(f1)}"
        text = f"{lab}  {band}  (peak {wd.peak_sigma[k]:.3g} σ"
        if len(parts) > 1 and k < beyond.difference_map.shape[0] and np.isfinite(parts[1][1][k]).any():
            text += f"; after {np.nanmax(parts[1][1][k]):.3g} σ"
        labels.append(text + ")")
    ax.set_yticks(np.arange(n_rows), labels, fontsize=_FONT_PT - 1)
    ax.set_ylabel("wavelet level (band)", fontsize=_FONT_PT)
    ax.set_xlabel("time on the test record [µs]", fontsize=_FONT_PT)
    ax.tick_params(axis="x", labelsize=_FONT_PT)
    cb = fig.colorbar(im, ax=ax, pad=0.01, fraction=0.05)
    cb.set_label("|difference| / local σ of the level [1]", fontsize=_FONT_PT)
    cb.ax.tick_params(labelsize=_FONT_PT - 1)
    cb.ax.axhline(WAVELET_K_SIGMA, color=OKABE_ITO["vermillion"], linewidth=1.5)
    ticks = [1.0, WAVELET_K_SIGMA] + [10.0**e for e in range(1, int(math.log10(vmax)) + 1)]
    cb.set_ticks(ticks, labels=[f"{x:g}" for x in ticks])
    cb.ax.minorticks_off()
    handles = [Rectangle((0, 0), 1, 1, facecolor="white", edgecolor=UNSCORED_HATCH_COLOUR, hatch=UNSCORED_HATCH,
                         linewidth=0.5, label="not scored")]
    if len(parts) > 1:
        x_end = parts[1][0][0]
        handles.append(ax.axvline(x_end, color=OKABE_ITO["sky_blue"], linewidth=1.6,
                                  label=f"end of the prediction's span, {x_end:.1f} µs"))
    t_f = None if verdict.fault_time_s is None else verdict.fault_time_s * 1e6
    if t_f is not None and parts[0][0][0] <= t_f <= parts[-1][0][1]:
        handles.append(ax.axvline(t_f, color=OKABE_ITO["vermillion"], linewidth=1.6, linestyle="--",
                                  label=f"fault instant {t_f:.3f} µs"))
    ax.legend(handles=handles, fontsize=_FONT_PT - 1, loc="lower left", bbox_to_anchor=(0.0, 1.0), frameon=False,
              borderaxespad=0.1, ncols=len(handles))
    fig.suptitle(f"Wavelet difference of the neutral currents ({wd.method.upper()}, {wd.wavelet}): test − "
                 "prediction" + (", then test − reference" if len(parts) > 1 else ""),
                 x=ax.get_position().x0, y=1.0 - 0.08 / fig.get_figheight(), ha="left", va="top",
                 fontsize=_FONT_PT + 1)
    return fig


def _map_part(wd: Any, scored: np.ndarray | None, off_s: float, n_rows: int) -> tuple[tuple[float, float], np.ndarray]:
    """Extent [µs, test record: first cell's left edge, last cell's right edge] and map (``n_rows`` rows;
    NaN where not scored or not computed) of one wavelet transform, at most 2000 columns (the largest
    scored value of each group of samples: more columns than pixels only cost time)."""
    t_us = (np.asarray(wd.times_s, dtype=np.float64) + off_s) * 1e6
    half = 0.5 * float(t_us[1] - t_us[0]) if t_us.size > 1 else 0.005
    raw = np.asarray(wd.difference_map, dtype=np.float64)
    dmap = np.full((n_rows, raw.shape[1]), np.nan)
    mask = np.ones(raw.shape, dtype=bool) if scored is None else np.asarray(scored, dtype=bool)
    if mask.ndim == 1:
        mask = np.broadcast_to(mask, raw.shape)
    rows = min(mask.shape[0], n_rows)
    dmap[:rows] = np.where(mask[:rows], raw[:rows], np.nan)
    cols = 2000
    if dmap.shape[1] > 2 * cols:
        starts = np.linspace(0, dmap.shape[1], cols + 1).astype(np.int64)[:-1]
        with np.errstate(invalid="ignore"):
            dmap = np.fmax.reduceat(dmap, starts, axis=1)
    return (float(t_us[0]) - half, float(t_us[-1]) + half), dmap


def figures(verdict: Verdict, *, k_sigma: float = K_SIGMA) -> dict[str, Figure]:
    """All figures of one comparison.

    Parameters
    ----------
    verdict : Verdict
        Result of :func:`detector.compare.compare` (its ``analysis`` holds the measurements).
    k_sigma : float
        Half-width of the noise band of the difference traces in noise standard deviations [1]; default
        the onset threshold of the time-domain metrics.

    Returns
    -------
    dict of str to matplotlib.figure.Figure
        Keys in :data:`FIGURE_NAMES` order; ``'wavelet'`` only when the analysis has a wavelet difference.
        The figures use the Agg canvas and are not registered with pyplot.

    Raises
    ------
    ShotcheckError
        If ``verdict`` is not a comparison result.
    """
    a = getattr(verdict, "analysis", None)
    if a is None or not hasattr(a, "pair") or not hasattr(verdict, "probabilities"):
        raise ShotcheckError(
            f"figures() needs the Verdict returned by detector.compare.compare, got {type(verdict).__name__}"
        )
    out = {
        "verdict": verdict_figure(verdict),
        "voltage": voltage_figure(verdict),
        "current": current_figure(verdict),
        "difference": difference_figure(verdict, k_sigma=k_sigma),
        "transfer": transfer_figure(verdict),
    }
    if a.wavelet is not None:
        out["wavelet"] = wavelet_figure(verdict)
    return out
