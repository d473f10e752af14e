"""compare(reference, test) -> Verdict: the one entry point everything else calls.

The verdict says whether a fault is indicated, which event the classifier sees (``none``,
``turn_to_turn``, ``to_ground``, ``discharge_only``) with calibrated probabilities, when it began on
the test record's own time axis, roughly where along the winding (0 line end .. 1 neutral end), which
metrics exceeded their calibrated thresholds and by how much, the wave shape of both records, and every
warning met on the way. It is an advisory second opinion; the responsible engineer decides.

Examples
--------
>>> from detector.compare import compare            # doctest: +SKIP
>>> v = compare(reduced_record, full_record)        # doctest: +SKIP
>>> v.to_dict()["fault_indicated"]                  # doctest: +SKIP
False
"""

from __future__ import annotations

import dataclasses
import functools
import math
from pathlib import Path
from typing import Any

import numpy as np

from . import _fastpredict
from ._validation import RecordError, ShotcheckError
from .features import (
    FEATURE_NAMES,
    SCHEMA_VERSION,
    VALIDATED_SAMPLE_RATES_HZ,
    PairAnalysis,
    describe,
    extract,
    instant_inputs,
    sharp_onset_after_front_us,
)
from .model import EVENT_CLASSES, ShotModel, chopped_test, load_model, missing_model_error
from .preprocess import AlignedPair
from .record import Record
from .scoring import DECISIVE, exceeded
from .sequence import REDUCED_KINDS
from .waveshape import WaveShape

__all__ = ["Verdict", "compare", "default_model", "DEFAULT_MODEL_PATH"]

#: The model that ships with the package (see DEVELOPERS.md, "The default model").
DEFAULT_MODEL_PATH = Path(__file__).parent / "resources" / "default_model.skops"


@functools.lru_cache(maxsize=4)
def _load_cached(path: str, mtime: float) -> ShotModel:
    return load_model(path, expected_schema=SCHEMA_VERSION)


def default_model(path: str | Path | None = None) -> ShotModel:
    """Load (once) the bundled model or the one at ``path``.

    Parameters
    ----------
    path : str or Path, optional
        Model file; default :data:`DEFAULT_MODEL_PATH`.

    Returns
    -------
    ShotModel
    """
    p = Path(path) if path is not None else DEFAULT_MODEL_PATH
    if not p.is_file():
        if path is None:
            raise ShotcheckError(
                f"the bundled model {p} is missing; build it with the command in DEVELOPERS.md "
                "('The default model') or pass --model"
            )
        raise missing_model_error(p)
    return _load_cached(str(p.resolve()), p.stat().st_mtime)


@dataclasses.dataclass(frozen=True)
class Verdict:
    """Result of comparing a test shot with its reference.

    Attributes
    ----------
    fault_indicated : bool
    event : str
        Most probable event class; ``none`` when no fault is indicated.
    probabilities : dict of str to float
        Calibrated probability of each event class.
    fault_time_s : float or None
        Onset of the difference on the test record's own time axis [s]; None without a fault.
    location : float or None
        Estimated fault position along the winding, 0 line end .. 1 neutral end; None without a fault
        or for a model without a locator.
    exceeded : list of dict
        Metrics above their thresholds (see :func:`detector.scoring.exceeded`).
    analysis : PairAnalysis
        All measurements (for reports).
    warnings : tuple of str
    model : dict
        Name, schema version and creation time of the model used, the decision threshold on P(none) it
        applied (``none_threshold`` [1]) and the kind of comparison that threshold is for
        (``none_threshold_kind``: ``"full test shots"``, :data:`COLLAPSED_TEST_KIND` or ``"all comparisons"``).
    """

    fault_indicated: bool
    event: str
    probabilities: dict[str, float]
    fault_time_s: float | None
    location: float | None
    exceeded: list[dict[str, Any]]
    analysis: PairAnalysis
    warnings: tuple[str, ...]
    model: dict[str, Any]

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary with the keys of DESIGN.md section 6."""
        a = self.analysis
        return {
            "fault_indicated": self.fault_indicated,
            "event": self.event,
            "probabilities": dict(self.probabilities),
            "fault_time_us": None if self.fault_time_s is None else 1e6 * self.fault_time_s,
            "location": self.location,
            "metrics": describe(a.features),
            "exceeded": list(self.exceeded),
            "waveshape": {
                "reference": None if a.reference_shape is None else a.reference_shape.to_dict(),
                "test": None if a.test_shape is None else a.test_shape.to_dict(),
            },
            "warnings": list(self.warnings),
            "model": dict(self.model),
        }


#: The kind of comparison a model's chopped-shot threshold is for, as a verdict names it: the test voltage
#: collapsed, which a chop does and a breakdown that collapses the voltage does too (the threshold, set on
#: benign chopped shots, is the stricter one; held-out, breakdowns to ground are still all detected).
COLLAPSED_TEST_KIND = "test shots whose voltage collapsed (chopped, or broken down)"

#: A chopped shot whose test voltage is at most this many times the full-wave reference's is taken for
#: a reduced-level chopped wave (the future reference of the chopped shots), not for a test shot [1].
REDUCED_CHOPPED_MAX_RATIO = 1.2
#: Warning of a chopped test shot compared with a full-wave reference: the reference barely excites the
#: frequencies of the collapse, so a fault near or after the chop changes less of what can be compared
#: (README, "By kind of comparison": on the held-out set, turn-to-turn 0.74-0.75 against 0.89-0.91 with a
#: chopped reference).
CHOPPED_AGAINST_FULL_WARNING = (
    "chopped test shot compared with a full-wave reference: faults near or after the chop are found less "
    "often than against a reduced-level chopped wave; compare with one where the test plan has it"
)

#: Ratios of the test record's test voltage to the reference's outside which a warning asks whether the
#: records are in order and in their units [1]. The reference is a reduced-level wave of 50-75 % of the
#: test level, or a full-level wave of the same level within the generator's scatter (common practice).
LEVEL_RATIO_LOW, LEVEL_RATIO_HIGH = 0.9, 5.0

#: Ratio of the two records' test voltage values beyond which they are refused as not comparable [1]:
#: no two shots of one impulse test differ twentyfold (the lowest reduced levels are about 20-50 % of
#: the test level: common practice); a factor of 1000 is a voltage channel in V read as kV or the
#: other way round, whose per-unit currents would then differ a thousandfold and read as a fault.
LEVEL_RATIO_REFUSED = 20.0


def level_warnings(ref_test_voltage_V: float, test_test_voltage_V: float) -> list[str]:
    """Warnings about the levels of the two records (order of the files, units of a channel).

    Parameters
    ----------
    ref_test_voltage_V, test_test_voltage_V : float
        Test voltage values of the reference and of the test record [V] (either polarity).

    Returns
    -------
    list of str
        Empty when the ratio lies within ``LEVEL_RATIO_LOW``..``LEVEL_RATIO_HIGH``.
    """
    r, t = abs(float(ref_test_voltage_V)), abs(float(test_test_voltage_V))
    if not (r > 0 and math.isfinite(r) and math.isfinite(t)):
        return []
    q = t / r
    if q > LEVEL_RATIO_HIGH or q < 1.0 / LEVEL_RATIO_HIGH:
        return [f"the test record's test voltage ({t / 1e3:.4g} kV) is {q:.3g} times the reference's "
                f"({r / 1e3:.4g} kV), where a reduced level is usually 50-75 % of the test level; check the "
                "units of both voltage channels"]
    if q < LEVEL_RATIO_LOW:
        return [f"the reference's test voltage ({r / 1e3:.4g} kV) is above the test record's ({t / 1e3:.4g} kV): "
                "the reference is the reduced-level wave, given first; are the files in the right order?"]
    return []


def check_levels(ref_test_voltage_V: float, test_test_voltage_V: float, *, reference: str | None = None,
                 test: str | None = None) -> None:
    """Refuse two records whose test voltage values differ beyond :data:`LEVEL_RATIO_REFUSED`.

    Parameters
    ----------
    ref_test_voltage_V, test_test_voltage_V : float
        Test voltage values of the reference and of the test record [V] (either polarity).
    reference, test : str, optional
        Their file names, for the message.

    Raises
    ------
    RecordError
        The ratio of the two values lies beyond ``LEVEL_RATIO_REFUSED`` either way (names the test
        record's file and its voltage channel).
    """
    r, t = abs(float(ref_test_voltage_V)), abs(float(test_test_voltage_V))
    if not (r > 0 and t > 0 and math.isfinite(r) and math.isfinite(t)):
        return
    q = t / r
    if 1.0 / LEVEL_RATIO_REFUSED <= q <= LEVEL_RATIO_REFUSED:
        return
    raise RecordError(
        f"the test voltage value is {t / 1e3:.4g} kV, {q:.3g} times the reference's ({r / 1e3:.4g} kV"
        f"{', ' + reference if reference else ''}); two shots of one impulse test do not differ "
        f"{LEVEL_RATIO_REFUSED:g}-fold (a reduced level is 50-75 % of the test level), so the records are not "
        "comparable as given: check the unit and scale factor of both voltage channels (values in kV under a "
        "V header, or the other way round?)",
        path=test or "test record", field="voltage")


#: Ratio of the test record's per-unit neutral current peak (current over its test voltage value) to
#: the reference's beyond which the pair is refused [1]. A healthy winding is linear, so the ratio is 1;
#: on the 12000 held-out synthetic pairs (peak current over peak voltage) it never exceeded 2.9, faults
#: and chopping included, while a current channel in mA read as A makes it 1000. Downwards a breakdown
#: to ground takes the neutral current away (ratios down to 0.005 there; benign chopped pairs down to
#: 0.07), so a small ratio is only warned about.
CURRENT_RATIO_REFUSED = 20.0


def check_currents(pair: AlignedPair, *, reference: str | None = None, test: str | None = None) -> list[str]:
    """Refuse (or warn about) neutral currents whose per-unit peaks differ beyond a fault's reach.

    Parameters
    ----------
    pair : AlignedPair
        The aligned pair (per-unit currents [A/V]).
    reference, test : str, optional
        The records' file names, for the message.

    Returns
    -------
    list of str
        A warning when the test record's per-unit current peak is under 1/``CURRENT_RATIO_REFUSED`` of
        the reference's (a breakdown to ground can do that; so can a current channel's unit).

    Raises
    ------
    RecordError
        The test record's per-unit current peak is over ``CURRENT_RATIO_REFUSED`` times the
        reference's: no fault does that, a unit or scale factor does (names the test record's current).
    """
    r = float(np.max(np.abs(pair.ref_current_pu)))
    t = float(np.max(np.abs(pair.test_current_pu)))
    if not (r > 0 and t > 0 and math.isfinite(r) and math.isfinite(t)):
        return []
    q = t / r
    if q > CURRENT_RATIO_REFUSED:
        raise RecordError(
            f"the test record's neutral current, scaled to the reference's level, peaks {q:.4g} times as high as "
            f"the reference's{' (' + reference + ')' if reference else ''}; a winding is linear and no fault raises "
            f"it {CURRENT_RATIO_REFUSED:g}-fold (the voltages are in proportion), so the records are not comparable "
            "as given: check the unit and scale factor (shunt ratio) of both current channels (mA under an A "
            "header, or the other way round?)",
            path=test or "test record", field="current")
    if q < 1.0 / CURRENT_RATIO_REFUSED:
        return [f"the test record's neutral current, scaled to the reference's level, peaks at only {q:.3g} of the "
                "reference's: a breakdown to ground can take the current away, but so can a "
                "unit or scale factor; check the unit and shunt ratio of both current channels"]
    return []


#: Declared shot kinds of a full-level shot (``meta['shot_kind']``; the reduced ones are
#: :data:`detector.sequence.REDUCED_KINDS`).
FULL_LEVEL_KINDS = ("full", "chopped")


def declared_level(record: Record) -> tuple[str | None, str]:
    """The level a record's metadata declares for it.

    Parameters
    ----------
    record : Record
        Its ``meta['shot_kind']`` (full or chopped against reduced or reduced_chopped) and
        ``meta['level_percent']`` (100 % of the test level and above against below 80 %) are read.

    Returns
    -------
    level : {'full', 'reduced'} or None
        None when neither is declared, or the two contradict each other.
    said : str
        The metadata that says so, for a message (``"meta.shot_kind 'full', meta.level_percent 100"``).
    """
    kind = record.meta.get("shot_kind")
    level = record.meta.get("level_percent")
    try:
        pct = float(level) if level is not None else None
    except (TypeError, ValueError):
        pct = None
    said = []
    if kind in FULL_LEVEL_KINDS or kind in REDUCED_KINDS:
        said.append(("full" if kind in FULL_LEVEL_KINDS else "reduced", f"meta.shot_kind {kind!r}"))
    if pct is not None and math.isfinite(pct) and (pct >= 100.0 or 0.0 < pct < 80.0):
        # between 80 and 100 % a shot may be either (the sequence's full-level shots start at 80 %)
        said.append(("full" if pct >= 100.0 else "reduced", f"meta.level_percent {pct:g}"))
    names = {w for w, _ in said}
    if len(names) != 1:
        return None, ""
    return names.pop(), ", ".join(m for _, m in said)


def check_roles(reference: Record, test: Record) -> None:
    """Refuse a reference whose metadata declares a full-level shot against a test record declared as a
    reduced-level one: the two files were given in the wrong order.

    A record's level is declared by ``meta['shot_kind']`` (full or chopped against reduced or
    reduced_chopped) and ``meta['level_percent']`` (100 and above against below 80); a record that
    declares neither, or the two in contradiction, is not judged here (the test voltage values are,
    with a warning, by :func:`level_warnings`). Two full-level shots, or two reduced ones, may be
    compared.

    Raises
    ------
    RecordError
        The reference is declared full-level and the test record reduced-level (names both files and
        the metadata fields that say so).
    """
    ref_level, ref_said = declared_level(reference)
    test_level, test_said = declared_level(test)
    if ref_level == "full" and test_level == "reduced":
        ref_name = f" ({reference.source})" if reference.source else ""
        test_name = f" ({test.source})" if test.source else ""
        raise RecordError(
            f"the reference{ref_name} is declared a full-level shot ({ref_said}) and the test record"
            f"{test_name} a reduced-level one ({test_said}): the files seem to be in the wrong order; give the "
            "reduced-level reference first and the full-level test shot second",
            path=reference.source or "reference record", field="meta.shot_kind" if "shot_kind" in ref_said
            else "meta.level_percent")


def check_distinct(reference: Record, test: Record) -> None:
    """Refuse a reference and a test record that hold the same samples (the same shot given twice).

    Two shots never record the same noise, so equal samples on both channels mean one file (or one
    record) was given for both; the comparison would say "no fault" without having compared anything.

    Raises
    ------
    RecordError
        The voltage and current samples of the two records are equal (names both files).
    """
    if reference is not test:
        if reference.n_samples != test.n_samples or reference.sampling_rate_Hz != test.sampling_rate_Hz:
            return
        try:
            pairs = [(reference.voltage.samples, test.voltage.samples),
                     (reference.current.samples, test.current.samples)]
        except ShotcheckError:
            return  # a missing channel is reported by the comparison itself
        if not all(a.shape == b.shape and bool(np.array_equal(a, b)) for a, b in pairs):
            return
    src = (reference.source, test.source)
    same = (" (the same file)" if src[0] == src[1] else f" ({src[0]} and {src[1]})") if all(src) else ""
    raise RecordError(
        f"the reference and the test record hold the same samples{same}: one shot was given twice; give "
        "the reduced-level reference first and a full-level test shot second", path=test.source or "test record",
        field="samples")


def rate_warnings(reference: Record, test: Record) -> list[str]:
    """Warnings for records sampled outside :data:`VALIDATED_SAMPLE_RATES_HZ`.

    Parameters
    ----------
    reference, test : Record

    Returns
    -------
    list of str
        One warning per record outside the validated rates, empty otherwise.
    """
    lo, hi = VALIDATED_SAMPLE_RATES_HZ
    out = []
    for label, rec in (("reference", reference), ("test", test)):
        fs = rec.sampling_rate_Hz
        if not lo <= fs <= hi:
            out.append(f"the {label} record is sampled at {fs / 1e6:.4g} MS/s, outside the {lo / 1e6:g}-{hi / 1e6:g} "
                       "MS/s the verdicts are validated for: the fault instant and location are less certain, "
                       "and faults may be missed or benign differences indicated")
    return out


def _fault_time_pair_s(a: PairAnalysis) -> float | None:
    """Onset of the fault's effect on the pair's time axis [s], or None.

    Preference: the first significant wave-shape-compensated difference (free of benign wave-shape
    effects) and the first significant wavelet difference at the finest level that has one, whichever
    is earlier; failing both, the raw time-domain onset; failing that, a voltage collapse of a test shot
    that was not chopped on purpose.
    """
    front = a.front_time_s
    cands = []
    if a.compensated_onset_s is not None:
        cands.append(float(a.compensated_onset_s))
    if a.wavelet is not None and a.wavelet.fault_time_s is not None and a.wavelet.fault_time_s > front + 0.3e-6:
        cands.append(float(a.wavelet.fault_time_s))
    if cands:
        return min(cands)
    if a.time_domain.onset_s is not None and a.time_domain.onset_s >= front - 0.5e-6:
        return float(a.time_domain.onset_s)
    tc = a.time_domain.test_collapse
    if tc is not None and (a.test_shape is None or a.test_shape.kind != "lightning_chopped"):
        return float(tc.time_s)
    return None


def compare(
    reference: Record,
    test: Record,
    *,
    model: ShotModel | str | Path | None = None,
    reference_shape: WaveShape | None = None,
) -> Verdict:
    """Compare a test shot with its reference shot.

    Parameters
    ----------
    reference : Record
        Reduced-level full wave of the same terminal (voltage and neutral current).
    test : Record
        Full-level full or chopped wave (voltage and neutral current).
    model : ShotModel or path, optional
        Model to use; default the bundled model.
    reference_shape : WaveShape, optional
        ``evaluate_waveshape(reference)`` if the caller has it already (a service comparing many shots
        with one reference keeps it); default: evaluated here. The verdict is the same either way.

    Returns
    -------
    Verdict

    Raises
    ------
    RecordError
        A record lacks a channel or the two do not overlap; the two hold the same samples
        (:func:`check_distinct`); their metadata declare the reference full-level and the test record
        reduced-level (:func:`check_roles`); their test voltage values differ beyond
        :data:`LEVEL_RATIO_REFUSED` (:func:`check_levels`); the test record's per-unit current peak is
        over :data:`CURRENT_RATIO_REFUSED` times the reference's (:func:`check_currents`).
    ShotcheckError
        No impulse in a record, or no usable model.
    """
    m = model if isinstance(model, ShotModel) else default_model(model)
    if tuple(m.feature_names) != FEATURE_NAMES:
        raise ShotcheckError("the model's feature names differ from this shotcheck's; retrain the model")
    check_distinct(reference, test)
    check_roles(reference, test)
    a = extract(reference, test, reference_shape=reference_shape)
    check_levels(a.pair.ref_test_voltage_V, a.pair.test_test_voltage_V, reference=reference.source,
                 test=test.source)
    current_notes = check_currents(a.pair, reference=reference.source, test=test.source)
    x = a.features.reshape(1, -1)
    # one sample: all trees walked at once, without per-tree calls (see detector._fastpredict)
    proba_all, loc_all, t_all = _fastpredict.score(m, x, lambda inst: instant_inputs(a, inst))
    proba = proba_all[0]
    # None also where the locator has no booster for the most likely fault class (a model retrained on
    # too few located faults of it)
    loc_pred = None if loc_all is None or not math.isfinite(float(loc_all[0])) else float(loc_all[0])
    t_pred = None if t_all is None else float(t_all[0])
    probs = {c: 0.0 for c in EVENT_CLASSES}
    for c, p in zip(m.classifier.classes_, proba, strict=True):
        probs[str(c)] = float(p)
    over = exceeded(a.features, m.thresholds)
    decisive = [e for e in over if e["metric"] in DECISIVE]
    none_threshold = float(m.none_thresholds(x)[0])  # the one of this kind of comparison (full or chopped)
    if m.none_threshold_chopped is None:
        threshold_kind = "all comparisons"
    else:
        threshold_kind = (COLLAPSED_TEST_KIND if bool(chopped_test(x, m.feature_names)[0]) else "full test shots")
    by_decisive_alone = bool(decisive) and probs["none"] >= none_threshold
    fault = probs["none"] < none_threshold or by_decisive_alone
    event = "none"
    if fault:
        event = max((c for c in EVENT_CLASSES if c != "none"), key=lambda c: probs[c])
    warnings = (list(a.warnings) + level_warnings(a.pair.ref_test_voltage_V, a.pair.test_test_voltage_V)
                + current_notes + rate_warnings(reference, test))
    if by_decisive_alone:
        e = decisive[0]
        warnings.append(
            f"fault indicated by the current difference after the span the compensated prediction covers "
            f"({e['metric']} {e['value']:.1f} against a threshold of {e['threshold']:.1f}, above every "
            f"benign pair it was set on); the classifier alone saw no fault (faults that late are too rare "
            f"in training): the instant is that difference's onset, the event class and location are less "
            f"certain"
        )
    if (a.test_shape is not None and a.test_shape.kind == "lightning_chopped" and a.reference_shape is not None
            and a.reference_shape.kind == "lightning_full" and test.meta.get("shot_kind") != "reduced_chopped"
            and a.pair.test_test_voltage_V > REDUCED_CHOPPED_MAX_RATIO * a.pair.ref_test_voltage_V):
        warnings.append(CHOPPED_AGAINST_FULL_WARNING)
    if over and not fault:
        warnings.append(
            f"{len(over)} metric(s) exceed their thresholds although the classifier sees no fault "
            f"(largest: {over[0]['metric']} at {over[0]['ratio']:.2f} x threshold); look at the records"
        )
    t_fault = None
    loc = None
    if fault:
        sharp = float(sharp_onset_after_front_us(a.features)[0])
        chooses = m.timer is not None and m.timer.chooses
        if by_decisive_alone and a.beyond_onset_s is not None:  # the timer never learnt faults that late
            t_fault = a.to_test_time_s(a.beyond_onset_s)
        elif t_pred is not None and math.isfinite(t_pred) and chooses:  # a detector's onset or the regression
            t_fault = a.front_test_time_s + 1e-6 * t_pred
        elif math.isfinite(sharp):
            t_fault = a.front_test_time_s + 1e-6 * sharp
        elif t_pred is not None and math.isfinite(t_pred):
            t_fault = a.front_test_time_s + 1e-6 * t_pred
        else:
            t_fault = a.to_test_time_s(_fault_time_pair_s(a))
        loc = loc_pred
    info = {
        "name": str(m.card.get("name", "custom")),
        # which model spoke: the bundled one, or the file --model named (a retrained model has the same name)
        "source": ("bundled default model" if model is None else str(model) if isinstance(model, str | Path)
                   else "model object"),
        "training_data": m.card.get("training_data"),
        "schema_version": m.schema_version,
        "none_threshold": none_threshold,
        "none_threshold_kind": threshold_kind,
        "created": m.card.get("created"),
    }
    return Verdict(fault, event, probs, t_fault, None if loc is None or not math.isfinite(loc) else loc,
                   over, a, tuple(warnings), info)
