"""A self-contained HTML report of one comparison, to hand to a colleague.

:func:`write_report` writes one HTML file with everything inside it: the figures are PNG images
embedded as base64 ``data:`` URIs, the style sheet is inline, and there is no script, web font or link
to anything outside the file, so it opens the same way offline, in a mail attachment or in an archive
years later. The page holds, from the top:

1. the verdict: fault indicated or not, the event class and the probability of every class, the fault
   instant on the test record's own time axis, the estimated location along the winding (fraction of
   its length from the line end) with a winding sketch, the model used, and every warning;
2. the IEC 60060-1 wave-shape parameters of both records with their tolerance checks;
3. the basis of the comparison (levels, alignment, noise);
4. the figures of :mod:`detector.figures`: voltage and neutral-current overlays, difference traces with
   the noise band, transfer-function magnitudes and their difference, the wavelet difference map;
5. the table of metrics that exceeded their calibrated thresholds, and all measured features;
6. the safety caution.

Examples
--------
>>> from detector.report import write_report             # doctest: +SKIP
>>> write_report(verdict, "out/report.html",               # doctest: +SKIP
...              reference_name="1U_reduced.cfg", test_name="1U_full.cfg")
PosixPath('out/report.html')
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import io
import math
import os
import uuid
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ._validation import ShotcheckError
from .figures import COMPENSATED_K_SIGMA, EVENT_COLOURS, FIGURE_NAMES, K_SIGMA, figures
from .model import EVENT_LABELS

if TYPE_CHECKING:  # pragma: no cover - import for annotations only
    from matplotlib.figure import Figure

    from .compare import Verdict

__all__ = ["SAFETY_CAUTION", "FIGURE_CAPTIONS", "figure_png", "figure_data_uri", "render_html", "write_report",
           "figures"]

#: The caution every report ends with (plain text; the HTML adds emphasis).
SAFETY_CAUTION = (
    "High voltage. Impulse tests apply voltages and stored energies that kill. Only trained, authorised "
    "staff may set up, run or approach a test, and only with the test area cleared, earthed and secured "
    "under the laboratory's own safety rules. This report is advisory output of an automated comparison "
    "of two records; it is not a test certificate and it cannot see anything outside the two records "
    "(test circuit changes, earthing, recorder settings, other evidence such as noise, gas or smoke). "
    "The responsible licensed engineer decides whether the transformer passed the test, under the local "
    "codes and the applicable standards and specifications."
)

#: What each figure shows, printed under it.
FIGURE_CAPTIONS: Mapping[str, str] = {
    "verdict": "Probability of each event class (the verdict hatched) and the estimated fault location "
               "along the winding, from the line end (0) to the neutral end (1).",
    "voltage": "Applied voltage. The reference is scaled to the test level: its per-unit "
               "values times the test record's test-voltage value. Reference solid, test dashed; time on "
               "the test record's own axis; the dotted line marks the detected fault instant.",
    "current": "Neutral current, the reference scaled by the same factor as its voltage. A change of "
               "winding response shows here first.",
    "difference": "Test minus scaled reference. In the upper two panels the band is ±{k:g} noise standard "
                  "deviations of the difference (from the two pre-triggers), the onset threshold of the "
                  "time-domain metrics; dashed lines mark the front, crest and tail windows. After a "
                  "voltage collapse (chopping or breakdown) the plain records are not compared. The last "
                  "panel, when present, compares the test current with the current the reference winding "
                  "response predicts under the test voltage, with a band of its own (±{kc:g} σ(t), its "
                  "detector's threshold); it stays valid after a chop, its "
                  "noise band widens where the prediction grows uncertain, and it ends where the "
                  "prediction does (shaded after it: there the plain current difference is scored by "
                  "its wavelet levels).",
    "transfer": "Transfer function |I(f)/V(f)| of each record (same exponential window on both signals), "
                "drawn over the frequencies both records resolve (voltage and current spectra above their "
                "noise), the points the indices are computed over, and the difference test minus "
                "reference. Shaded: the comparison bands (DL/T 911-2016), each labelled with the part the records "
                "resolve and, where that is less, the whole band. It does not depend on the applied wave shape, "
                "so a chopped test shot can be compared with a full reference.",
    "wavelet": "Stationary wavelet difference of the neutral currents, each level in units of its own "
               "noise (median absolute deviation); the line on the colour bar is the significance "
               "threshold. Up to the end of the span the compensated prediction covers, the test current "
               "is compared with the current predicted from the reference under the test voltage; after "
               "it, with the reference current itself (levels D1–D6 only). Hatched cells are not "
               "scored (the front, clipped samples, an intended chop, the transforms' edges). Short "
               "discharges change only the finest levels; a breakdown changes many.",
}

_SECTION_TITLES = {
    "voltage": "Voltage overlay",
    "current": "Neutral-current overlay",
    "difference": "Difference traces",
    "transfer": "Transfer function",
    "wavelet": "Wavelet difference",
}

_EVENT_TEXT = EVENT_LABELS


def _level_text(verdict: Verdict) -> str:
    """``'at 60.0 % of the test level'`` from the two records' test voltage values (either polarity)."""
    p = verdict.analysis.pair
    ut_r, ut_t = abs(p.ref_test_voltage_V), abs(p.test_test_voltage_V)
    return f"at {100.0 * ut_r / ut_t:.1f} % of the test level" if ut_t > 0 else "level unknown"

_CSS = """
:root { --fault: #D55E00; --ok: #0072B2; --ink: #1a1a1a; --muted: #5a5a5a; --rule: #c8c8c8; }
* { box-sizing: border-box; }
body { font-family: system-ui, -apple-system, "Segoe UI", "Helvetica Neue", Arial, sans-serif;
       color: var(--ink); margin: 0 auto; max-width: 1060px; padding: 18px 24px 40px; font-size: 14px;
       line-height: 1.4; background: #ffffff; }
h1 { font-size: 22px; margin: 0 0 4px; }
h2 { font-size: 17px; margin: 26px 0 8px; padding-bottom: 3px; border-bottom: 1px solid var(--rule); }
p.meta { color: var(--muted); margin: 0 0 12px; }
nav { font-size: 13px; margin: 6px 0 0; color: var(--muted); }
nav a { color: var(--ok); margin-right: 12px; text-decoration: none; }
.verdict { border: 3px solid var(--ok); border-radius: 6px; padding: 12px 16px; margin-top: 14px; }
.verdict.fault { border-color: var(--fault); }
.badge { display: inline-block; font-size: 20px; font-weight: 700; padding: 4px 12px; border-radius: 4px;
         color: #ffffff; background: var(--ok); letter-spacing: 0.02em; }
.fault .badge { background: var(--fault); }
.cols { display: flex; flex-wrap: wrap; gap: 24px; margin-top: 10px; }
.cols > div { flex: 1 1 380px; }
table { border-collapse: collapse; margin: 6px 0; font-size: 13px; }
th, td { padding: 3px 10px 3px 6px; text-align: left; vertical-align: top; border-bottom: 1px solid #e4e4e4; }
th { background: #f3f3f3; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
table.kv th { background: none; font-weight: 600; white-space: nowrap; }
.bar { display: inline-block; height: 11px; border: 1px solid #555555; vertical-align: middle; }
.bar.chosen { border: 2px solid #000000; }
.pass { color: #005f96; font-weight: 600; }
.fail { color: #b34700; font-weight: 700; }
.na { color: var(--muted); }
ul.warnings { margin: 4px 0 0 0; padding-left: 20px; }
ul.warnings li { margin: 2px 0; }
figure { margin: 8px 0 18px; page-break-inside: avoid; break-inside: avoid; }
figure img { max-width: 100%; height: auto; display: block; border: 1px solid #eeeeee; }
figcaption { color: var(--muted); font-size: 12.5px; margin-top: 4px; max-width: 900px; }
.caution { border: 2px solid #1a1a1a; background: #fff7d6; padding: 10px 14px; border-radius: 4px;
           margin-top: 24px; }
.caution strong { font-size: 15px; }
.advisory { color: var(--muted); margin: 8px 0 0; font-size: 13px; }
.notes { border-left: 4px solid var(--rule); padding: 2px 12px; margin: 12px 0; }
details summary { cursor: pointer; color: var(--ok); }
footer { margin-top: 30px; color: var(--muted); font-size: 12px; }
@media print { body { max-width: none; padding: 0; } nav { display: none; } h2 { page-break-after: avoid; } }
"""


# --------------------------------------------------------------------------------------------------
# small formatting helpers
# --------------------------------------------------------------------------------------------------
def _esc(x: Any) -> str:
    return html.escape(str(x), quote=True)


def _num(x: Any, fmt: str = ".4g", unit: str = "") -> str:
    """Format a number as text, '—' when missing or not finite."""
    if x is None or isinstance(x, bool):
        return "—" if x is None else str(x)
    try:
        v = float(x)
    except (TypeError, ValueError):
        return _esc(x)
    if not math.isfinite(v):
        return "—"
    return f"{v:{fmt}}" + (f" {unit}" if unit else "")


def _table(header: Sequence[str], rows: Iterable[Sequence[str]], *, numeric: Sequence[int] = (),
           cls: str = "") -> str:
    """HTML table; cells are already-escaped HTML."""
    c = f' class="{cls}"' if cls else ""
    out = [f"<table{c}><thead><tr>" + "".join(f"<th>{_esc(h)}</th>" for h in header) + "</tr></thead><tbody>"]
    for r in rows:
        cells = []
        for k, cell in enumerate(r):
            cells.append(f'<td class="num">{cell}</td>' if k in numeric else f"<td>{cell}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _kv(rows: Iterable[tuple[str, str]]) -> str:
    return '<table class="kv"><tbody>' + "".join(f"<tr><th>{_esc(k)}</th><td>{v}</td></tr>" for k, v in rows) + \
        "</tbody></table>"


def figure_png(fig: Figure, *, dpi: float = 100.0) -> bytes:
    """Render a figure to PNG bytes (for a web response or a file).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        Figure with an Agg canvas (as :func:`detector.figures.figures` makes them).
    dpi : float
        Resolution [dots per inch]; a 10-inch-wide figure at 100 dpi is 1000 pixels wide.

    Returns
    -------
    bytes
        The PNG file; it carries no software metadata.

    Raises
    ------
    ShotcheckError
        If ``dpi`` is not a finite number between 10 and 600.
    """
    if not (isinstance(dpi, int | float) and math.isfinite(dpi) and 10 <= dpi <= 600):
        raise ShotcheckError(f"dpi must be a number of dots per inch between 10 and 600, got {dpi!r}")
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


def figure_data_uri(fig: Figure, *, dpi: float = 100.0) -> str:
    """Render a figure to a PNG ``data:`` URI for embedding in HTML.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        Figure with an Agg canvas (as :func:`detector.figures.figures` makes them).
    dpi : float
        Resolution [dots per inch].

    Returns
    -------
    str
        ``data:image/png;base64,...``.
    """
    return "data:image/png;base64," + base64.b64encode(figure_png(fig, dpi=dpi)).decode("ascii")


# --------------------------------------------------------------------------------------------------
# sections
# --------------------------------------------------------------------------------------------------
def _decision_text(probs: Mapping[str, float], model: Mapping[str, Any]) -> str:
    """P(none) against the threshold the model applied to this kind of comparison (HTML)."""
    thr = model.get("none_threshold")
    if thr is None or probs.get("none") is None:
        return '<span class="na">not recorded</span>'
    kind = model.get("none_threshold_kind", "all comparisons")
    return (f"probability of no fault {_num(probs['none'], '.4f')} against the threshold "
            f"{_num(thr, '.4f')} for {_esc(kind)}; a fault is indicated below it (or by a decisive metric alone)")


def _verdict_section(verdict: Verdict, fig_uri: str | None) -> str:
    d = verdict.to_dict()
    fault = bool(d["fault_indicated"])
    event = str(d["event"])
    probs: Mapping[str, float] = d["probabilities"]
    badge = "FAULT INDICATED" if fault else "NO FAULT INDICATED"
    t_us = d["fault_time_us"]
    loc = d["location"]
    model = d["model"] or {}
    if loc is None:
        loc_text = '<span class="na">not estimated' + (
            " (no fault indicated)" if not fault else " (the model has no location regressor)") + "</span>"
    else:
        loc_text = f"{_num(loc, '.2f')} of the winding length from the line end (0 = line end, 1 = neutral end)"
    rows = [
        ("Event", _esc(_EVENT_TEXT.get(event, event))),
        ("Probability of that event", _num(probs.get(event), ".2f")),
        ("Fault instant", '<span class="na">—</span>' if t_us is None
         else f"{_num(t_us, '.3f')} µs on the test record's own time axis"),
        ("Location along the winding", loc_text),
        ("Decision", _decision_text(probs, model)),
        ("Thresholds exceeded", f"{len(d['exceeded'])}"),
        ("Model", _esc(model.get("name", "unknown"))
         + (f" — {_esc(model['source'])}" if model.get("source") else "")
         + (f"; trained on {_esc(model['training_data'])}" if model.get("training_data") else "")
         + f' <span class="na">(feature schema {_esc(model.get("schema_version", "?"))}'
         + (f", created {_esc(model['created'])}" if model.get("created") else "") + ")</span>"),
    ]
    order = sorted(probs, key=lambda c: -float(probs[c]))
    prob_rows = []
    for c in order:
        p = float(probs[c])
        width = max(0.0, min(1.0, p)) * 160.0
        chosen = " chosen" if c == event else ""
        colour = EVENT_COLOURS.get(c, "#56B4E9")
        prob_rows.append((_esc(_EVENT_TEXT.get(c, c)) + (" ◀" if c == event else ""), _num(p, ".3f"),
                          f'<span class="bar{chosen}" style="width:{width:.0f}px;background:{colour}"></span>'))
    warn = d["warnings"]
    warn_html = ('<ul class="warnings">' + "".join(f"<li>{_esc(w)}</li>" for w in warn) + "</ul>") if warn else \
        '<p class="na">No warnings.</p>'
    img = "" if fig_uri is None else (
        f'<figure id="fig-verdict"><img src="{fig_uri}" alt="Event probabilities and winding sketch with the '
        f'estimated fault location"><figcaption>{_esc(FIGURE_CAPTIONS["verdict"])}</figcaption></figure>')
    return (
        f'<section class="verdict{" fault" if fault else ""}" id="verdict">'
        f'<div class="badge">{badge}</div>'
        f'<p class="advisory">Advisory second opinion from an automated comparison; the responsible engineer '
        f'decides (see the <a href="#caution">safety caution</a>).</p>'
        f'<div class="cols"><div>{_kv(rows)}</div>'
        f'<div><strong>Event probabilities</strong>'
        f'{_table(["event class", "probability", ""], prob_rows, numeric=(1,))}</div></div>'
        f"{img}"
        f"<strong>Warnings</strong>{warn_html}"
        f"</section>"
    )


#: Rows of the wave-shape table: (key, label, format, unit).
_SHAPE_ROWS: tuple[tuple[str, str, str, str], ...] = (
    ("test_voltage_kV", "Test voltage U_t", ".4g", "kV"),
    ("peak_kV", "Extreme value of the recorded curve", ".4g", "kV"),
    ("front_time_us", "Front time T1", ".3f", "µs"),
    ("time_to_half_us", "Time to half-value T2", ".2f", "µs"),
    ("overshoot_percent", "Relative overshoot β", ".1f", "%"),
    ("time_to_chopping_us", "Time to chopping Tc", ".3f", "µs"),
    ("chopping_time_us", "Instant of chopping (record time)", ".3f", "µs"),
    ("time_to_peak_us", "Time to peak Tp", ".1f", "µs"),
    ("virtual_origin_us", "Virtual origin O1 (record time)", ".3f", "µs"),
)

_KIND_TEXT = {
    "lightning_full": "full lightning impulse",
    "lightning_chopped": "chopped lightning impulse",
    "switching": "switching impulse",
}


def _shape_cell(ws: Mapping[str, Any], key: str, fmt: str, unit: str) -> str:
    tol = (ws.get("tolerance") or {}).get(key)
    value = ws.get(key)
    if value is None and tol is not None:
        value = tol.get("value")
    txt = _num(value, fmt, unit)
    if tol is None:
        return txt
    lo, hi = tol.get("low"), tol.get("high")
    if lo is not None and hi is not None:
        lim = f"{_num(lo, '.4g')}–{_num(hi, '.4g')}"
    elif hi is not None:
        lim = f"≤ {_num(hi, '.4g')}"
    elif lo is not None:
        lim = f"≥ {_num(lo, '.4g')}"
    else:
        lim = "any"
    verdict = '<span class="pass">pass</span>' if tol.get("pass") else '<span class="fail">FAIL</span>'
    return f"{txt} {verdict} <span class=\"na\">(limits {lim})</span>"


def _waveshape_section(verdict: Verdict, reference_name: str, test_name: str) -> str:
    a = verdict.analysis
    shapes = [None if ws is None else ws.to_dict() for ws in (a.reference_shape, a.test_shape)]
    na = '<span class="na">not evaluated</span>'

    def kind(ws: Mapping[str, Any] | None) -> str:
        return na if ws is None else _esc(_KIND_TEXT.get(ws["kind"], ws["kind"]))

    rows = [
        ("Wave kind", *(kind(ws) for ws in shapes)),
        ("Polarity", *(na if ws is None else _esc(ws["polarity"]) for ws in shapes)),
    ]
    for key, label, fmt, unit in _SHAPE_ROWS:
        present = [ws is not None and (ws.get(key) is not None or key in (ws.get("tolerance") or {}))
                   for ws in shapes]
        if not any(present):
            continue
        rows.append((_esc(label), *("—" if ws is None else _shape_cell(ws, key, fmt, unit) for ws in shapes)))

    def overall(ws: Mapping[str, Any] | None) -> str:
        if ws is None:
            return '<span class="fail">NOT EVALUATED</span>'
        return '<span class="pass">within tolerance</span>' if ws["within_tolerance"] else \
            '<span class="fail">OUTSIDE TOLERANCE</span>'

    rows.append(("All tolerance checks", *(overall(ws) for ws in shapes)))
    notes = []
    for who, ws in zip(("reference", "test"), shapes, strict=True):
        if ws is None:
            notes.append(f"{who}: the IEC 60060-1 evaluation failed; see the warnings above")
        else:
            notes += [f"{who}: {w}" for w in ws.get("warnings", [])]
    note_html = ""
    if notes:
        note_html = '<ul class="warnings">' + "".join(f"<li>{_esc(n)}</li>" for n in notes) + "</ul>"
    return (
        '<section id="waveshape"><h2>Wave shape (IEC 60060-1)</h2>'
        + _table(["parameter", f"reference: {reference_name}", f"test: {test_name}"], rows)
        + '<p class="na">Lightning impulse limits of IEC 60060-1:2010: T1 1.2 µs ± 30 %, T2 50 µs ± 20 %, '
          "relative overshoot at most 10 %; time to chopping as configured in "
          "<code>detector.waveshape</code>. Times marked (record time) are on each record's own time axis."
          "</p>"
        + note_html + "</section>"
    )


def _volts(x_V: float) -> str:
    """A voltage in V below 1 kV, else in kV."""
    return _num(x_V, ".3g", "V") if abs(x_V) < 1e3 else _num(x_V * 1e-3, ".4g", "kV")


def _basis_section(verdict: Verdict) -> str:
    a = verdict.analysis
    p = a.pair
    td = a.time_domain
    off = float(p.test_times_s[0] - p.times_s[0])
    ut_t = abs(p.test_test_voltage_V)

    def t_test_us(t_pair_s: float | None) -> str:
        return "—" if t_pair_s is None else _num((t_pair_s + off) * 1e6, ".3f", "µs")

    rows = [
        ("Test voltage values (reference / test)", f"{_num(p.ref_test_voltage_V * 1e-3, '.4g')} kV / "
                                                   f"{_num(p.test_test_voltage_V * 1e-3, '.4g')} kV "
                                                   f"(reference {_level_text(verdict)})"),
        ("Common sample interval", f"{_num(p.sample_interval_s * 1e9, '.4g', 'ns')} "
                                   f"({_num(1e-6 / p.sample_interval_s, '.4g', 'MS/s')}), {p.n_samples} samples"),
        ("Test front delay removed", _num(p.delay_s * 1e9 + 0.0, ".3f", "ns").replace("-0.000", "0.000")),
        ("Noise σ of the differences", f"voltage {_volts(td.voltage_sigma_pu * ut_t)}, "
                                       f"current {_num(td.current_sigma_pu * ut_t, '.3g', 'A')} (at the test level)"),
        ("Compared until", t_test_us(td.compared_until_s) + " (test record time)"),
        ("First crossing of the plain differences (voltage / current)",
         f"{t_test_us(td.voltage_onset_s)} / {t_test_us(td.current_onset_s)} (test record time, "
         f"{K_SIGMA:g} σ for 50 ns; one of the onsets the fault instant above is chosen from, not the instant)"),
        ("Transfer function, whole band", f"ρ = {_num(a.transfer.overall.rho, '.4f')}, "
                                          f"RMS difference {_num(a.transfer.overall.rms_dB, '.2f', 'dB')}, "
                                          f"largest resonance shift {_num(100 * a.transfer.max_peak_shift_rel, '.2f', '%')}"),
    ]
    return '<section id="basis"><h2>Basis of the comparison</h2>' + _kv(rows) + "</section>"


def _exceeded_section(verdict: Verdict) -> str:
    ex = list(verdict.exceeded)
    if not ex:
        body = ('<p>No metric exceeded its calibrated threshold (or the model carries no thresholds; see its '
                "model card).</p>")
    else:
        rows = [(f"<code>{_esc(e.get('metric', ''))}</code>", _esc(e.get("description", "")),
                 _num(e.get("value"), ".4g"), _num(e.get("threshold"), ".4g"), _num(e.get("ratio"), ".2f"))
                for e in ex]
        body = _table(["metric", "description", "value", "threshold", "ratio"], rows, numeric=(2, 3, 4))
        body += ('<p class="na">Thresholds are calibrated on benign synthetic pairs to a stated false-alarm '
                 "rate; ratio = value / threshold, largest first.</p>")
    return '<section id="exceeded"><h2>Exceeded thresholds</h2>' + body + "</section>"


def _metrics_section(verdict: Verdict) -> str:
    metrics: Mapping[str, Any] = verdict.to_dict()["metrics"]
    rows = [(f"<code>{_esc(k)}</code>", _num(v, ".5g")) for k, v in metrics.items()]
    return ('<section id="metrics"><h2>All measured features</h2><details><summary>'
            f"{len(rows)} features (names follow <code>detector.features.FEATURE_NAMES</code>; — = not "
            "measurable for this pair)</summary>"
            + _table(["feature", "value"], rows, numeric=(1,)) + "</details></section>")


def _figure_html(name: str, uri: str) -> str:
    cap = FIGURE_CAPTIONS.get(name, "").format(k=K_SIGMA, kc=COMPENSATED_K_SIGMA)
    title = _SECTION_TITLES.get(name, name)
    return (f'<figure id="fig-{_esc(name)}"><img src="{uri}" alt="{_esc(title)}">'
            f"<figcaption>{_esc(cap)}</figcaption></figure>")


def _check_name(field: str, value: Any) -> str:
    if not isinstance(value, str) or not value.strip():
        raise ShotcheckError(f"{field} must be a non-empty text naming the record (e.g. its file name), got {value!r}")
    return value.strip()


# --------------------------------------------------------------------------------------------------
# public entry points
# --------------------------------------------------------------------------------------------------
def render_html(
    verdict: Verdict,
    *,
    reference_name: str,
    test_name: str,
    title: str | None = None,
    figs: Mapping[str, Figure] | None = None,
    dpi: float = 100.0,
    notes: Sequence[str] = (),
) -> str:
    """Render the report of one comparison as a self-contained HTML document.

    Parameters
    ----------
    verdict : Verdict
        Result of :func:`detector.compare.compare`.
    reference_name, test_name : str
        How to name the two records (usually their file names).
    title : str, optional
        Heading; default ``"Impulse comparison: <test> against <reference>"``.
    figs : mapping of str to Figure, optional
        Figures to embed (default :func:`detector.figures.figures` of ``verdict``); the caller keeps
        ownership of figures passed in.
    dpi : float
        Resolution of the embedded PNG images [dots per inch].
    notes : sequence of str
        Paragraphs shown under the heading, before the verdict (e.g. what a simulated pair really holds).

    Returns
    -------
    str
        The HTML text (UTF-8 when written), with no reference to any outside resource.

    Raises
    ------
    ShotcheckError
        A name is empty or ``verdict`` is not a comparison result.
    """
    ref_name = _check_name("reference_name", reference_name)
    tst_name = _check_name("test_name", test_name)
    if title is not None and not isinstance(title, str):
        raise ShotcheckError(f"title must be a text, got {type(title).__name__}")
    if isinstance(notes, str) or not all(isinstance(n, str) for n in notes):
        raise ShotcheckError("notes must be a sequence of texts (paragraphs)")
    if not hasattr(verdict, "analysis") or not hasattr(verdict, "to_dict"):
        raise ShotcheckError(f"render_html() needs the Verdict returned by compare(), got {type(verdict).__name__}")
    own = figs is None
    fig_map = figures(verdict) if figs is None else dict(figs)
    try:
        uris = {name: figure_data_uri(fig, dpi=dpi) for name, fig in fig_map.items()}
    finally:
        if own:
            for fig in fig_map.values():
                fig.clear()
    heading = title.strip() if title and title.strip() else f"Impulse comparison: {tst_name} against {ref_name}"
    from . import __version__

    now = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    order = [n for n in FIGURE_NAMES if n in uris and n != "verdict"] + \
        [n for n in uris if n not in FIGURE_NAMES]
    fig_sections = []
    for name in order:
        fig_sections.append(f'<section id="sec-{_esc(name)}"><h2>{_esc(_SECTION_TITLES.get(name, name))}</h2>'
                            f"{_figure_html(name, uris[name])}</section>")
    if verdict.analysis.wavelet is None:
        fig_sections.append('<section id="sec-wavelet"><h2>Wavelet difference</h2><p class="na">Not available: '
                            "the span before the voltage collapse is too short for a decomposition.</p></section>")
    nav_items = [("verdict", "Verdict"), ("waveshape", "Wave shape"), ("basis", "Basis")] + \
        [(f"sec-{n}", _SECTION_TITLES.get(n, n)) for n in order] + \
        [("exceeded", "Exceeded thresholds"), ("metrics", "All features"), ("caution", "Safety caution")]
    nav = "<nav>" + "".join(f'<a href="#{i}">{_esc(t)}</a>' for i, t in nav_items) + "</nav>"
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_esc(heading)}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<header><h1>{_esc(heading)}</h1>",
        f'<p class="meta">Reference ({_esc(_level_text(verdict))}): <strong>{_esc(ref_name)}</strong> &nbsp;·&nbsp; '
        f"Test: <strong>{_esc(tst_name)}</strong> &nbsp;·&nbsp; report made {now} by shotcheck "
        f"{_esc(__version__)}</p>{nav}</header>",
        *([f'<section class="notes" id="notes">{"".join(f"<p>{_esc(n)}</p>" for n in notes)}</section>']
          if notes else []),
        _verdict_section(verdict, uris.get("verdict")),
        _waveshape_section(verdict, ref_name, tst_name),
        _basis_section(verdict),
        *fig_sections,
        _exceeded_section(verdict),
        _metrics_section(verdict),
        f'<section class="caution" id="caution"><strong>Safety caution.</strong> {_esc(SAFETY_CAUTION)}</section>',
        f"<footer>Made by shotcheck {_esc(__version__)} from the records named above. Numbers are computed "
        "from the records only; check them against the original oscillograms.</footer>",
        "</body></html>",
    ]
    return "\n".join(parts)


def write_report(
    verdict: Verdict,
    path: str | os.PathLike[str],
    *,
    reference_name: str,
    test_name: str,
    title: str | None = None,
    notes: Sequence[str] = (),
) -> Path:
    """Write the self-contained HTML report of one comparison.

    Parameters
    ----------
    verdict : Verdict
        Result of :func:`detector.compare.compare`.
    path : str or path-like
        Output file (conventionally ``.html``); its folder must exist. An existing file is replaced
        only once the new report is complete.
    reference_name, test_name : str
        How to name the two records in the report (usually their file names).
    title : str, optional
        Heading; default ``"Impulse comparison: <test> against <reference>"``.
    notes : sequence of str
        Paragraphs shown under the heading (see :func:`render_html`).

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    ShotcheckError
        The folder does not exist, the path is a folder, the file cannot be written, a name is empty,
        or ``verdict`` is not a comparison result.
    """
    out = Path(path)
    if out.is_dir():
        raise ShotcheckError(f"{out}: is a folder; give the report a file name such as {out / 'report.html'}")
    folder = out.parent
    if not folder.is_dir():
        raise ShotcheckError(f"{out}: folder {folder} does not exist; create it or choose another report path")
    text = render_html(verdict, reference_name=reference_name, test_name=test_name, title=title, notes=notes)
    # write beside the target and rename: a reader never sees half a report (mode "x": default permissions)
    tmp = folder / f".{out.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp"
    try:
        try:
            with open(tmp, "x", encoding="utf-8", newline="\n") as fh:
                fh.write(text)
            os.replace(tmp, out)
        except BaseException:
            tmp.unlink(missing_ok=True)
            raise
    except OSError as exc:
        raise ShotcheckError(f"{out}: cannot write the report ({exc.strerror or exc})") from exc
    return out
