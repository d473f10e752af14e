"""Winding families (TOML), random test scenarios and the labelled record pair of one scenario.

A *family* describes a population of windings and test conditions as ranges, in a TOML file with the
tables ``[family]``, ``[winding]``, ``[test]``, ``[recorder]`` and ``[faults]`` (see the bundled
``synthetic/designs/distribution.toml`` and ``power.toml``, and :data:`SCHEMA` for every key, its
bounds and how it is drawn). A value is either fixed (a number, or a string) or drawn per case:

* range keys: ``[low, high]``, drawn uniformly, log-uniformly (keys marked ``log``) or as an integer;
* choice keys: a list, one entry drawn with equal probability;
* fraction keys: a probability in [0, 1].

:func:`sample_scenario` draws one :class:`Scenario` (all parameters resolved, nothing random left)
from a family and a random generator; :func:`make_pair` simulates and records it: a reduced-level
reference shot (healthy) and a full-level test shot (healthy or with one fault), plus a label dict.

Event classes
-------------
``none``
    Only benign level-dependent differences: generator front/tail resistor drift, core magnetising
    inductance change, chopping-time scatter, recorder noise, range, offset and trigger differences.
``turn_to_turn``
    A breakdown bridging ``shorted_turns`` turns inside one section (the section is split so that a
    single turn is representable) or, with ``section_short_fraction``, one or two whole sections.
``to_ground``
    A breakdown from an internal node to ground.
``discharge_only``
    A train of short current pulses at a node, topology unchanged.

Faults occur in the test shot only. Their breakdown (or inception) voltage lies between the stress
of the gap at the reduced level and at full level: the network is linear before the event, so the
reduced-level stress is the level times the full-level stress computed by
:func:`synthetic.simulate.max_stress`. Within that band the voltage is chosen so that the gap strikes
in a target phase of the applied wave (``phases``: front, crest, tail; drawn per case) where the
gap's stress allows it (see ``_breakdown_voltage``).
"""

from __future__ import annotations

import dataclasses
import math
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from detector._validation import ShotcheckError

__all__ = [
    "EVENT_CLASSES",
    "SCHEMA",
    "Family",
    "Scenario",
    "load_family",
    "bundled_families",
    "sample_scenario",
    "make_pair",
]

#: The four event classes, in the order used to balance a data set.
EVENT_CLASSES = ("none", "turn_to_turn", "to_ground", "discharge_only")

DESIGN_DIR = Path(__file__).with_name("designs")


@dataclasses.dataclass(frozen=True)
class _Key:
    kind: str  # "range" | "choice" | "fraction" | "text"
    low: float | None = None  # physical bounds every drawn value must respect
    high: float | None = None
    scale: str = "lin"  # "lin" | "log" | "int"
    dtype: type = float
    required: bool = True
    default: Any = None
    doc: str = ""


#: Every key a family file may hold: table -> key -> specification (bounds are hard limits).
SCHEMA: dict[str, dict[str, _Key]] = {
    "family": {
        "name": _Key("text", dtype=str, doc="family name, used in labels"),
        "description": _Key("text", dtype=str, required=False, default=""),
    },
    "winding": {
        "sections": _Key("range", 2, 400, "int", int, doc="ladder sections"),
        "turns_per_section": _Key("range", 2, 1000, "int", int),
        "total_inductance_H": _Key("range", 1e-5, 10.0, "log"),
        "total_ground_capacitance_F": _Key("range", 1e-12, 1e-6, "log"),
        "alpha": _Key("range", 0.3, 60.0),
        "k0": _Key("range", 0.0, 0.95),
        "series_resistance_ohm": _Key("range", 0.0, 1e6, "log", required=False, default=None),
        "resistive_time_constant_s": _Key("range", 1e-6, 1e-3, "log", required=False, default=25e-6),
        "damping": _Key("range", 0.0, 2.0, required=False, default=0.05),
        "neutral": _Key("choice", dtype=str, required=False, default=["grounded"]),
        "shunt_ohm": _Key("range", 1e-3, 1e3, "log", required=False, default=1.0),
        "magnetising_H": _Key("range", 1e-4, 1e4, "log", required=False, default=math.inf),
        "magnetising_full_ratio": _Key("range", 0.3, 3.0, required=False, default=1.0),
    },
    "test": {
        "bil_V": _Key("range", 10e3, 3e6, "log"),
        "polarity": _Key("choice", dtype=str, required=False, default=["negative"]),
        "reduced_level": _Key("range", 0.2, 0.95),
        "chopped_fraction": _Key("fraction", 0.0, 1.0, required=False, default=0.5),
        "reference_chopped_fraction": _Key("fraction", 0.0, 1.0, required=False, default=0.5),
        "chop_time_s": _Key("range", 0.5e-6, 20e-6, required=False, default=[2e-6, 6e-6]),
        "chop_scatter_s": _Key("range", 0.0, 2e-6, required=False, default=[0.0, 0.2e-6]),
        "front_time_s": _Key("range", 0.3e-6, 5e-6, required=False, default=1.2e-6),
        "time_to_half_s": _Key("range", 10e-6, 200e-6, required=False, default=50e-6),
        "generator_capacitance_F": _Key("range", 1e-9, 10e-6, "log", required=False, default=100e-9),
        "load_capacitance_F": _Key("range", 50e-12, 50e-9, "log", required=False, default=1e-9),
        "lead_inductance_H": _Key("range", 0.0, 100e-6, required=False, default=5e-6),
        "generator_drift": _Key("range", 0.0, 0.2, required=False, default=[0.0, 0.04]),
        "record_length_s": _Key("range", 10e-6, 1e-3, required=False, default=100e-6),
    },
    "recorder": {
        "sample_rate_Hz": _Key("choice", 20e6, 250e6, required=False, default=[100e6]),
        "bits": _Key("choice", 8, 14, dtype=int, required=False, default=[12]),
        "noise_lsb": _Key("range", 0.0, 50.0, "log", required=False, default=0.5),
        "interference_amplitude_lsb": _Key("range", 0.0, 200.0, required=False, default=0.0),
        "interference_frequency_Hz": _Key("range", 1e3, 100e6, "log", required=False, default=1e6),
        "voltage_range_factor": _Key("range", 1.0, 5.0, required=False, default=1.3),
        "current_range_factor": _Key("range", 1.0, 20.0, required=False, default=1.5),
        "range_change_fraction": _Key("fraction", 0.0, 1.0, required=False, default=0.0),
        "pretrigger_s": _Key("range", 0.5e-6, 50e-6, required=False, default=5e-6),
        "baseline_offset_lsb": _Key("range", -100.0, 100.0, required=False, default=0.0),
        "bandwidth_fraction": _Key("range", 0.05, 0.45, required=False, default=0.35),
    },
    "faults": {
        "classes": _Key("choice", dtype=str, required=False, default=list(EVENT_CLASSES)),
        "arc_resistance_ohm": _Key("range", 1e-4, 1e4, "log", required=False, default=[0.01, 50.0]),
        "shorted_turns": _Key("range", 1, 1000, "int", int, required=False, default=[1, 10]),
        "section_short_fraction": _Key("fraction", 0.0, 1.0, required=False, default=0.3),
        "breakdown_fraction": _Key("range", 0.0, 1.0, required=False, default=[0.05, 0.95]),
        "phases": _Key("choice", dtype=str, required=False, default=["front", "crest", "tail"]),
        "front_region": _Key("fraction", 0.0, 1.0, required=False, default=0.15),
        # the bundled families' ranges: below ~20 nC a discharge moves the neutral current by less than one
        # code, and a family that left these out used to train on a few dozen visible discharges
        "discharge_charge_C": _Key("range", 1e-14, 1e-5, "log", required=False, default=[2e-8, 2e-6]),
        "discharge_width_s": _Key("range", 1e-9, 1e-6, required=False, default=[10e-9, 60e-9]),
        "discharge_pulses": _Key("range", 1, 1000, "int", int, required=False, default=[3, 30]),
        "discharge_repetition_s": _Key("range", 10e-9, 100e-6, "log", required=False, default=[0.2e-6, 5e-6]),
    },
}

_CHOICES = {
    ("winding", "neutral"): ("grounded", "isolated"),
    ("test", "polarity"): ("negative", "positive"),
    ("faults", "classes"): EVENT_CLASSES,
    ("faults", "phases"): ("front", "crest", "tail"),
}


def _suggest(word: str, options: Any) -> str:
    import difflib

    close = difflib.get_close_matches(word, list(options), n=1)
    return f" Did you mean {close[0]!r}?" if close else ""


@dataclasses.dataclass(frozen=True)
class Family:
    """A validated winding family: a name and, per ``table.key``, a fixed value, range or choice list.

    Use :func:`load_family` to build one from a TOML file or :func:`bundled_families` for the
    bundled ones; :meth:`draw` draws one value of a key.
    """

    name: str
    description: str
    values: Mapping[str, Any]
    source: str = ""

    def draw(self, rng: np.random.Generator, table: str, key: str) -> Any:
        """Draw one value of ``table.key`` (fixed values are returned as they are).

        Parameters
        ----------
        rng : numpy.random.Generator
            Random source.
        table, key : str
            Table and key of :data:`SCHEMA`.

        Returns
        -------
        float, int or str
            The drawn value, in the key's SI unit.
        """
        spec = SCHEMA[table][key]
        v = self.values[f"{table}.{key}"]
        if spec.kind == "fraction" or spec.kind == "text":
            return v
        if spec.kind == "choice":
            return v[int(rng.integers(len(v)))]
        if not isinstance(v, list):
            return v
        lo, hi = v
        if spec.scale == "int":
            return int(rng.integers(lo, hi + 1))
        if spec.scale == "log" and lo > 0:
            return float(np.exp(rng.uniform(np.log(lo), np.log(hi))))
        return float(rng.uniform(lo, hi))


def _expected(spec: _Key) -> str:
    """What a key takes, for a message: ``'a number or [low, high] within 2..400 (ladder sections)'``."""
    if spec.kind == "range":
        what = "a whole number" if spec.dtype is int else "a number"
        text = f"{what} or [low, high] within {spec.low:g}..{spec.high:g}" + (" (drawn log-uniform)"
                                                                            if spec.scale == "log" else "")
    elif spec.kind == "fraction":
        text = f"a fraction within {spec.low:g}..{spec.high:g}"
    elif spec.kind == "choice":
        text = "a list of choices"
    else:
        text = "a text"
    return text + (f" ({spec.doc})" if spec.doc else "")


def _check_value(path: str, table: str, key: str, spec: _Key, raw: Any) -> Any:
    where = f"{path}: [{table}] {key}"

    def number(x: Any) -> float:
        if isinstance(x, bool) or not isinstance(x, int | float):
            raise ShotcheckError(f"{where}: expected a number, got {x!r}")
        if spec.dtype is int and not float(x).is_integer():
            raise ShotcheckError(f"{where}: expected a whole number, got {x!r}")
        if spec.low is not None and not (spec.low <= x) or spec.high is not None and not (x <= spec.high):
            if not (isinstance(x, float) and math.isinf(x) and key == "magnetising_H"):
                raise ShotcheckError(f"{where}: {x!r} is outside the allowed [{spec.low:g}, {spec.high:g}]")
        return int(x) if spec.dtype is int else float(x)

    if spec.kind == "text":
        if not isinstance(raw, str) or not raw.strip():
            raise ShotcheckError(f"{where}: expected a non-empty text, got {raw!r}")
        return raw
    if spec.kind == "fraction":
        return number(raw)
    if spec.kind == "choice":
        items = raw if isinstance(raw, list) else [raw]
        if not items:
            raise ShotcheckError(f"{where}: expected at least one choice, got an empty list")
        out = []
        for it in items:
            if spec.dtype is str:
                allowed = _CHOICES.get((table, key))
                if not isinstance(it, str) or (allowed and it not in allowed):
                    raise ShotcheckError(
                        f"{where}: invalid choice {it!r}; allowed: {', '.join(allowed or ())}."
                        + (_suggest(it, allowed) if isinstance(it, str) and allowed else "")
                    )
                out.append(it)
            else:
                out.append(number(it))
        if len(set(out)) != len(out):
            raise ShotcheckError(f"{where}: choices repeat in {raw!r}")
        return out
    # range
    if isinstance(raw, list):
        if len(raw) != 2:
            raise ShotcheckError(f"{where}: expected a number or [low, high], got a list of {len(raw)} items")
        lo, hi = number(raw[0]), number(raw[1])
        if lo > hi:
            raise ShotcheckError(f"{where}: low {lo!r} is above high {hi!r}")
        return [lo, hi]
    return number(raw)


def load_family(path: str | Path) -> Family:
    """Read and validate a winding-family TOML file.

    Parameters
    ----------
    path : str or Path
        TOML file with the tables of :data:`SCHEMA`.

    Returns
    -------
    Family

    Raises
    ------
    ShotcheckError
        Naming the file and the key: unreadable file, TOML syntax error, unknown table or key (with
        the closest known one), missing required key, wrong type, value outside its bounds, a
        ``[low, high]`` with low above high.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise ShotcheckError(f"{p}: cannot read the design file ({exc.strerror or exc})") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ShotcheckError(f"{p}: not valid TOML: {exc}") from None
    return family_from_dict(doc, source=str(p))


def family_from_dict(doc: Mapping[str, Any], *, source: str = "<dict>") -> Family:
    """Validate a family given as nested dicts (the parsed TOML); see :func:`load_family`."""
    values: dict[str, Any] = {}
    for table in doc:
        if table not in SCHEMA:
            raise ShotcheckError(
                f"{source}: unknown table [{table}]; known tables: {', '.join(SCHEMA)}." + _suggest(table, SCHEMA)
            )
        if not isinstance(doc[table], Mapping):
            raise ShotcheckError(f"{source}: {table} must be a table ([{table}]), got {doc[table]!r}")
        for key in doc[table]:
            if key not in SCHEMA[table]:
                raise ShotcheckError(
                    f"{source}: [{table}] {key}: unknown key; known keys: {', '.join(SCHEMA[table])}."
                    + _suggest(key, SCHEMA[table])
                )
    for table, keys in SCHEMA.items():
        given = doc.get(table, {})
        for key, spec in keys.items():
            if key in given:
                values[f"{table}.{key}"] = _check_value(source, table, key, spec, given[key])
            elif spec.required:
                if table not in doc:
                    need = ", ".join(k for k, sp in keys.items() if sp.required)
                    raise ShotcheckError(f"{source}: the table [{table}] is missing; it needs {need} "
                                         f"(first: {key}, {_expected(spec)})")
                raise ShotcheckError(f"{source}: [{table}] {key}: required key is missing; expected {_expected(spec)}")
            else:
                values[f"{table}.{key}"] = spec.default
    w = values

    def span(v: Any) -> tuple[float, float]:  # a fixed number or a [low, high] range
        return (float(v[0]), float(v[-1])) if isinstance(v, list) else (float(v), float(v))

    short_lo, turns_lo = span(w["faults.shorted_turns"])[0], span(w["winding.turns_per_section"])[0]
    if short_lo >= turns_lo:
        # a short of k turns inside one section needs k + 1 turns there; a section that cannot hold the
        # smallest short drawn used to get a one-turn short instead, without a word
        raise ShotcheckError(
            f"{source}: [faults] shorted_turns: at least {short_lo:g} turns cannot be bridged inside sections of "
            f"{turns_lo:g} turns ([winding] turns_per_section); the smallest short must be below the fewest turns "
            "per section"
        )
    rec_lo, pre_hi = span(w["test.record_length_s"])[0], span(w["recorder.pretrigger_s"])[1]
    if rec_lo < pre_hi + MIN_RECORD_AFTER_PRETRIGGER_S:
        # a record of the pre-trigger (or less) holds no impulse: such a family gave data sets in which
        # every pair failed to compare, or faults listed after the records' end, without a word
        raise ShotcheckError(
            f"{source}: [test] record_length_s: the shortest record ({1e6 * rec_lo:g} us) must last at least "
            f"{1e6 * MIN_RECORD_AFTER_PRETRIGGER_S:g} us beyond the longest pre-trigger ({1e6 * pre_hi:g} us, "
            "[recorder] pretrigger_s) to hold the impulse's front, crest and a part of its tail (records of "
            "impulse tests usually last 100-200 us)"
        )
    return Family(name=values["family.name"], description=values["family.description"], values=values, source=source)


#: Shortest part of a record after its pre-trigger [s]: the impulse's front and crest and some of its tail
#: (common practice: records last two to four times the time to half-value).
MIN_RECORD_AFTER_PRETRIGGER_S = 20e-6


def bundled_families() -> dict[str, Family]:
    """The winding families shipped in ``synthetic/designs/`` by name (``distribution``, ``power``)."""
    fams = [load_family(p) for p in sorted(DESIGN_DIR.glob("*.toml"))]
    return {f.name: f for f in fams}


@dataclasses.dataclass(frozen=True)
class Scenario:
    """One fully resolved test case: winding, test conditions, recorder settings and fault.

    All quantities in SI units. ``fault`` holds the fault parameters (empty for ``none``); the
    recorder dicts hold :class:`synthetic.digitiser.Digitiser` arguments except the current range,
    which is set from the simulated healthy peak current times ``current_range_factor``.
    """

    case_index: int
    seed: int
    family: str
    event: str
    winding: Mapping[str, Any]
    magnetising_reference_H: float
    magnetising_test_H: float
    bil_V: float
    polarity: str
    reduced_level: float
    test_kind: str  # "full" | "chopped"
    reference_chopped: bool
    chop_time_test_s: float | None
    chop_time_reference_s: float | None
    front_time_s: float
    time_to_half_s: float
    generator_capacitance_F: float
    load_capacitance_F: float
    lead_inductance_H: float
    front_resistor_drift: float
    tail_resistor_drift: float
    record_length_s: float
    recorder_reference: Mapping[str, Any]
    recorder_test: Mapping[str, Any]
    current_range_factor: float
    fault: Mapping[str, Any]

    def to_dict(self) -> dict[str, Any]:
        """Plain dict of all fields (for JSON)."""
        return dataclasses.asdict(self)


def _resolve_family(family: Family | str | Path) -> Family:
    if isinstance(family, Family):
        return family
    fams = bundled_families()
    if isinstance(family, str) and family in fams:
        return fams[family]
    p = Path(family)
    if p.suffix == ".toml" or p.exists():
        return load_family(p)
    raise ShotcheckError(
        f"unknown winding family {str(family)!r}; use one of {', '.join(fams)} or a .toml file." + _suggest(str(family), fams)
    )


def sample_scenario(
    rng: np.random.Generator,
    family: Family | str | Path = "distribution",
    *,
    event: str | None = None,
    case_index: int = 0,
    seed: int = 0,
) -> Scenario:
    """Draw one random scenario from a winding family.

    Parameters
    ----------
    rng : numpy.random.Generator
        Random source; the same generator state gives the same scenario.
    family : Family, str or Path
        A :class:`Family`, a bundled family name or a TOML file.
    event : str, optional
        Event class (one of :data:`EVENT_CLASSES`); by default drawn from the family's ``classes``.
    case_index, seed : int
        Stored in the scenario for traceability only.

    Returns
    -------
    Scenario
    """
    fam = _resolve_family(family)
    d = fam.draw
    if event is None:
        event = d(rng, "faults", "classes")
    elif event not in EVENT_CLASSES:
        raise ShotcheckError(f"Invalid value for 'event': {event!r}. Allowed values are {', '.join(EVENT_CLASSES)}.")
    n = d(rng, "winding", "sections")
    turns = d(rng, "winding", "turns_per_section")
    winding = {
        "n_sections": n,
        "turns_per_section": turns,
        "total_inductance_H": d(rng, "winding", "total_inductance_H"),
        "total_ground_capacitance_F": d(rng, "winding", "total_ground_capacitance_F"),
        "alpha": d(rng, "winding", "alpha"),
        "k0": d(rng, "winding", "k0"),
        "series_resistance_ohm": None,
        "damping": d(rng, "winding", "damping"),
        "neutral": d(rng, "winding", "neutral"),
        "shunt_ohm": d(rng, "winding", "shunt_ohm"),
    }
    # series resistance at impulse frequencies: given, or from the envelope time constant 2 L / R
    if fam.values["winding.series_resistance_ohm"] is not None:
        winding["series_resistance_ohm"] = d(rng, "winding", "series_resistance_ohm")
    else:
        tau = d(rng, "winding", "resistive_time_constant_s")
        winding["series_resistance_ohm"] = 2.0 * winding["total_inductance_H"] / tau
    mag = d(rng, "winding", "magnetising_H")
    mag_ratio = d(rng, "winding", "magnetising_full_ratio")
    test_chopped = bool(rng.random() < fam.values["test.chopped_fraction"])
    ref_chopped = test_chopped and bool(rng.random() < fam.values["test.reference_chopped_fraction"])
    chop_test = d(rng, "test", "chop_time_s") if test_chopped else None
    scatter = d(rng, "test", "chop_scatter_s") * (1 if rng.random() < 0.5 else -1)
    chop_ref = max(chop_test + scatter, 0.5e-6) if ref_chopped else None
    drift = d(rng, "test", "generator_drift")
    fs = d(rng, "recorder", "sample_rate_Hz")
    bits = d(rng, "recorder", "bits")
    bil = d(rng, "test", "bil_V")
    level = d(rng, "test", "reduced_level")
    vfac = d(rng, "recorder", "voltage_range_factor")
    pretrigger = d(rng, "recorder", "pretrigger_s")  # one setting for the whole sequence

    def recorder(range_scale: float) -> dict[str, Any]:
        return {
            "sample_rate_Hz": fs,
            "bits": bits,
            "voltage_range_V": bil * vfac * range_scale,
            "noise_lsb": d(rng, "recorder", "noise_lsb"),
            "interference_amplitude_lsb": d(rng, "recorder", "interference_amplitude_lsb"),
            "interference_frequency_Hz": d(rng, "recorder", "interference_frequency_Hz"),
            "pretrigger_s": pretrigger,
            "baseline_offset_lsb": d(rng, "recorder", "baseline_offset_lsb"),
            "bandwidth_Hz": d(rng, "recorder", "bandwidth_fraction") * fs,
        }

    rec_test = recorder(1.0)
    # benign: sometimes the lab re-ranges the reduced shot to use more codes (IEC 60076-4, recalled)
    range_scale = 1.0
    if rng.random() < fam.values["recorder.range_change_fraction"]:
        range_scale = float(np.clip(level * rng.uniform(1.05, 1.3), level, 1.0))
    rec_ref = recorder(range_scale)
    rec_ref["current_range_scale"] = range_scale

    fault: dict[str, Any] = {}
    if event in ("turn_to_turn", "to_ground", "discharge_only"):
        fault["breakdown_fraction"] = d(rng, "faults", "breakdown_fraction")
        fault["target_phase"] = d(rng, "faults", "phases")
    # Front-of-wave stress concentrates on the line-end sections (initial distribution
    # sinh(alpha (1 - x)) / sinh(alpha), Greenwood, Electrical Transients in Power Systems): a fault aimed
    # at the front is placed in the line-end share ``front_region`` of the winding, others anywhere.
    reach = n
    if fault.get("target_phase") == "front":
        reach = max(2, int(np.ceil(fam.values["faults.front_region"] * n)))
    if event == "turn_to_turn":
        if rng.random() < fam.values["faults.section_short_fraction"] and n >= 3:
            span = int(rng.integers(1, 3))
            first = int(rng.integers(0, min(n - span, reach) + 1))
            fault.update(kind="sections", first_section=first, sections_bridged=span,
                         shorted_turns=span * turns)
        else:
            lo, hi = (fam.values["faults.shorted_turns"] if isinstance(fam.values["faults.shorted_turns"], list)
                      else [fam.values["faults.shorted_turns"]] * 2)
            k = int(rng.integers(lo, min(hi, turns - 1) + 1)) if lo <= turns - 1 else 1
            fault.update(kind="turns", section=int(rng.integers(0, reach)), shorted_turns=k,
                         line_side=bool(rng.random() < 0.5))
        fault["arc_resistance_ohm"] = d(rng, "faults", "arc_resistance_ohm")
    elif event == "to_ground":
        fault.update(node=int(rng.integers(1, min(reach, n - 1) + 1)), arc_resistance_ohm=d(rng, "faults", "arc_resistance_ohm"))
    elif event == "discharge_only":
        fault.update(
            node=int(rng.integers(1, min(reach, n - 1) + 1)),
            charge_C=d(rng, "faults", "discharge_charge_C"),
            width_s=d(rng, "faults", "discharge_width_s"),
            max_pulses=d(rng, "faults", "discharge_pulses"),
            repetition_s=d(rng, "faults", "discharge_repetition_s"),
        )
    return Scenario(
        case_index=int(case_index),
        seed=int(seed),
        family=fam.name,
        event=event,
        winding=winding,
        magnetising_reference_H=mag,
        magnetising_test_H=mag * mag_ratio,
        bil_V=bil,
        polarity=d(rng, "test", "polarity"),
        reduced_level=level,
        test_kind="chopped" if test_chopped else "full",
        reference_chopped=ref_chopped,
        chop_time_test_s=chop_test,
        chop_time_reference_s=chop_ref,
        front_time_s=d(rng, "test", "front_time_s"),
        generator_capacitance_F=d(rng, "test", "generator_capacitance_F"),
        load_capacitance_F=d(rng, "test", "load_capacitance_F"),
        lead_inductance_H=d(rng, "test", "lead_inductance_H"),
        time_to_half_s=d(rng, "test", "time_to_half_s"),
        front_resistor_drift=float(rng.uniform(-drift, drift)),
        tail_resistor_drift=float(rng.uniform(-drift, drift)),
        record_length_s=d(rng, "test", "record_length_s"),
        recorder_reference=rec_ref,
        recorder_test=rec_test,
        current_range_factor=d(rng, "recorder", "current_range_factor"),
        fault=fault,
    )


def _phase(t_fault_s: float, times_s: np.ndarray, v_healthy: np.ndarray) -> str:
    """'front', 'crest' or 'tail': where on the healthy applied voltage the fault instant falls.

    Crest: the healthy voltage is within 5 % of its extreme value (common practice for "at the crest");
    front before that, tail after it.
    """
    a = np.abs(v_healthy)
    k_peak = int(np.argmax(a))
    k = int(np.clip(np.searchsorted(times_s, t_fault_s), 0, times_s.size - 1))
    if a[k] >= 0.95 * a[k_peak]:
        return "crest"
    return "front" if k < k_peak else "tail"


def _breakdown_voltage(sc: Scenario, f: Mapping[str, Any], full_stress: float, healthy: Any,
                       node_a: int, node_b: int | None) -> float:
    """Breakdown (or inception) voltage of the gap for the scenario's target phase.

    The stress of a healthy network is linear in the level, so any voltage in (level x full stress,
    full stress) strikes in the full-level shot only. The gap breaks down at the first instant its
    running maximum stress reaches the breakdown voltage; among the instants where that running
    maximum rises inside the allowed band and the healthy applied voltage is in the target phase
    (front, crest, tail), one is picked by ``breakdown_fraction`` (as a quantile). If the target phase
    has no such instant, ``breakdown_fraction`` places the voltage linearly in the band.
    """
    lo = full_stress * (sc.reduced_level + 0.02 * (1.0 - sc.reduced_level))
    hi = full_stress * (1.0 - 0.02 * (1.0 - sc.reduced_level))
    frac = f["breakdown_fraction"]
    v_nodes = healthy.node_voltages_V
    gap = v_nodes[:, node_a] - (v_nodes[:, node_b] if node_b is not None else 0.0)
    run_max = np.maximum.accumulate(np.abs(gap))
    rising = np.r_[False, run_max[1:] > run_max[:-1]] & (run_max > lo) & (run_max < hi)
    a = np.abs(healthy.terminal_voltage_V)
    k_peak = int(np.argmax(a))
    idx = np.arange(a.size)
    phase = np.where(a >= 0.95 * a[k_peak], "crest", np.where(idx < k_peak, "front", "tail"))
    cand = np.flatnonzero(rising & (phase == f.get("target_phase", "")))
    if cand.size:
        k = cand[min(int(frac * cand.size), cand.size - 1)]
        return float(0.5 * (run_max[k - 1] + run_max[k]))
    return float(full_stress * (sc.reduced_level + frac * (1.0 - sc.reduced_level)))


def make_pair(scenario: Scenario) -> tuple[Any, Any, dict[str, Any]]:
    """Simulate and record one scenario: reduced-level reference shot and full-level test shot.

    Parameters
    ----------
    scenario : Scenario
        From :func:`sample_scenario`.

    Returns
    -------
    reference : detector.record.Record
        Reduced-level shot of the healthy winding (``shot_kind`` ``'reduced'`` or ``'chopped'``).
    test : detector.record.Record
        Full-level shot, with the scenario's fault if any (``'full'`` or ``'chopped'``).
    label : dict
        ``event``, ``fault_node_a``, ``fault_node_b`` (-1 = ground, -2 = none; node indices of the test
        design, in which a turn-to-turn fault's section is split in two), ``shorted_turns``,
        ``position`` (0 line end .. 1 neutral end, NaN for none), ``fault_time_us`` (on the test
        record's own time axis, NaN for none), ``fault_phase`` (front/crest/tail), ``fault_occurred``,
        ``chop_time_reference_us``/``chop_time_test_us`` (instant the gap closes, on each record's own
        time axis; NaN for full waves),
        ``arc_resistance_ohm``, ``discharge_charge_C``, ``breakdown_voltage_V``, and the scenario's
        test and recorder parameters (see ``synthetic.dataset.LABEL_COLUMNS``).
    """
    from .circuit import ChoppingGap, design_generator
    from .digitiser import Digitiser, digitise
    from .faults import Breakdown, DischargeTrain
    from .simulate import max_stress, simulate
    from .winding import WindingDesign

    sc = scenario
    w = dict(sc.winding)
    n = w.pop("n_sections")
    tps = w.pop("turns_per_section")
    base = WindingDesign.from_totals(
        n, turns_per_section=tps, magnetising_H=sc.magnetising_reference_H,
        name=f"{sc.family}-{sc.case_index}", **w,
    )
    f = sc.fault
    node_a = node_b = None
    shorted = 0
    if sc.event == "turn_to_turn" and f["kind"] == "turns":
        first = f["shorted_turns"] if f["line_side"] else tps - f["shorted_turns"]
        base, new_node = base.split_section(f["section"], first)
        s = f["section"]
        node_a, node_b = (s, new_node) if f["line_side"] else (new_node, new_node + 1)
        shorted = f["shorted_turns"]
    elif sc.event == "turn_to_turn":
        node_a, node_b = f["first_section"], f["first_section"] + f["sections_bridged"]
        shorted = f["shorted_turns"]
    elif sc.event in ("to_ground", "discharge_only"):
        node_a = f["node"]
    test_design = dataclasses.replace(base, magnetising_H=sc.magnetising_test_H)

    sign = -1.0 if sc.polarity == "negative" else 1.0
    gen = design_generator(base, front_time_s=sc.front_time_s, time_to_half_s=sc.time_to_half_s,
                           C1_F=sc.generator_capacitance_F, C_load_F=sc.load_capacitance_F,
                           L_lead_H=sc.lead_inductance_H, test_voltage_V=sign * sc.bil_V)
    gen_ref = dataclasses.replace(
        gen, R_front_ohm=gen.R_front_ohm * (1 + sc.front_resistor_drift),
        R_tail_ohm=gen.R_tail_ohm * (1 + sc.tail_resistor_drift),
    )
    chop_t = ChoppingGap(sc.chop_time_test_s) if sc.chop_time_test_s is not None else None
    chop_r = ChoppingGap(sc.chop_time_reference_s) if sc.chop_time_reference_s is not None else None
    fs = sc.recorder_test["sample_rate_Hz"]
    dt_sim = SIM_STEP_FRACTION / fs
    t_end = sc.record_length_s

    faults: tuple[Any, ...] = ()
    bdv = math.nan
    if sc.event != "none":
        full_stress = max_stress(test_design, gen, t_end_s=t_end, node_a=node_a, node_b=node_b, chop=chop_t)
        bdv = _breakdown_voltage(sc, f, full_stress, simulate(test_design, gen, t_end_s=t_end, dt_s=dt_sim,
                                                              chop=chop_t, record_nodes=True), node_a, node_b)
        if sc.event == "discharge_only":
            faults = (DischargeTrain(node_a, bdv, f["charge_C"], f["width_s"], f["max_pulses"], f["repetition_s"]),)
        else:
            faults = (Breakdown(node_a, node_b, bdv, f["arc_resistance_ohm"]),)

    sim_ref = simulate(base, gen_ref, t_end_s=t_end, dt_s=dt_sim, chop=chop_r, level=sc.reduced_level)
    sim_test = simulate(test_design, gen, t_end_s=t_end, dt_s=dt_sim, chop=chop_t, faults=faults)
    # The fault's own effect, free of noise and of every benign difference: the faulted full-level shot
    # minus the healthy one on the same network (the decomposition is cached, so this costs little).
    effect_I = effect_U = 0.0
    if sc.event != "none" and sim_test.fault_time_s is not None:
        sim_ok = simulate(test_design, gen, t_end_s=t_end, dt_s=dt_sim, chop=chop_t)
        effect_I = float(np.max(np.abs(sim_test.neutral_current_A - sim_ok.neutral_current_A)))
        effect_U = float(np.max(np.abs(sim_test.terminal_voltage_V - sim_ok.terminal_voltage_V)))

    peak_I_full = float(np.abs(sim_ref.neutral_current_A).max()) / sc.reduced_level
    i_range = max(peak_I_full * sc.current_range_factor, 1e-6)
    rr = dict(sc.recorder_reference)
    i_scale = rr.pop("current_range_scale", 1.0)
    dig_ref = Digitiser(current_range_A=i_range * i_scale, **rr)
    dig_test = Digitiser(current_range_A=i_range, **sc.recorder_test)
    n_samples = int(np.floor(sc.record_length_s * fs))
    ss = np.random.SeedSequence(sc.seed, spawn_key=(sc.case_index, 1))
    rng_ref, rng_test = (np.random.default_rng(s) for s in ss.spawn(2))
    unit_id = f"SYN-{sc.family[:4].upper()}-{sc.seed}-{sc.case_index:06d}"
    common = {"unit_id": unit_id, "terminal": "HV", "lab": "synthetic (shotcheck)", "polarity": sc.polarity}
    ref = digitise(sim_ref, dig_ref, rng=rng_ref, n_samples=n_samples, meta={
        **common, "shot_kind": "chopped" if chop_r is not None else "reduced",
        "level_percent": 100.0 * sc.reduced_level, "shot_id": f"{unit_id}-R"})
    test = digitise(sim_test, dig_test, rng=rng_test, n_samples=n_samples, meta={
        **common, "shot_kind": sc.test_kind, "level_percent": 100.0, "shot_id": f"{unit_id}-F"})

    occurred = sim_test.fault_time_s is not None and sc.event != "none"
    fault_time_us = math.nan
    phase = ""
    position = math.nan
    if sc.event != "none":
        pa = test_design.node_position(node_a)
        pb = test_design.node_position(node_b) if node_b is not None else pa
        position = 0.5 * (pa + pb)
    if occurred:
        fault_time_us = 1e6 * (sim_test.fault_time_s + test.meta["trigger_time_s"])
        # the healthy reference wave has the test wave's shape (up to the benign drift)
        phase = _phase(sim_test.fault_time_s, sim_ref.times_s, sim_ref.terminal_voltage_V)
    label = {
        "event": sc.event,
        "fault_occurred": bool(occurred),
        "fault_node_a": -2 if node_a is None else int(node_a),
        "fault_node_b": -2 if node_a is None else (-1 if node_b is None else int(node_b)),
        "shorted_turns": int(shorted),
        "position": position,
        "fault_time_us": fault_time_us,
        "fault_phase": phase,
        "breakdown_voltage_V": abs(bdv),
        "arc_resistance_ohm": f.get("arc_resistance_ohm", math.nan),
        "discharge_charge_C": f.get("charge_C", math.nan),
        "reference_level_percent": 100.0 * sc.reduced_level,
        "test_level_percent": 100.0,
        "reference_kind": ref.meta["shot_kind"],
        "test_kind": sc.test_kind,
        # gap closing instants on each record's own time axis (not the IEC 60060-1 Tc, which runs from O1)
        "chop_time_reference_us": math.nan if chop_r is None else
        1e6 * (sc.chop_time_reference_s + ref.meta["trigger_time_s"]),
        "chop_time_test_us": math.nan if chop_t is None else 1e6 * (sc.chop_time_test_s + test.meta["trigger_time_s"]),
        "sample_rate_Hz": fs,
        "bits": sc.recorder_test["bits"],
        "family": sc.family,
        "n_sections": int(test_design.n_sections),
        "total_turns": float(test_design.total_turns),
        "total_inductance_H": sc.winding["total_inductance_H"],
        "total_ground_capacitance_F": sc.winding["total_ground_capacitance_F"],
        "alpha": sc.winding["alpha"],
        "k0": sc.winding["k0"],
        "damping": sc.winding["damping"],
        "series_resistance_ohm": sc.winding["series_resistance_ohm"],
        "turns_per_section": int(sc.winding["turns_per_section"]),
        "neutral": sc.winding["neutral"],
        "shunt_ohm": sc.winding["shunt_ohm"],
        "magnetising_reference_H": sc.magnetising_reference_H,
        "magnetising_test_H": sc.magnetising_test_H,
        "bil_kV": sc.bil_V / 1e3,
        "polarity": sc.polarity,
        "front_time_us": sc.front_time_s * 1e6,
        "time_to_half_us": sc.time_to_half_s * 1e6,
        "front_resistor_drift": sc.front_resistor_drift,
        "tail_resistor_drift": sc.tail_resistor_drift,
        # size of the fault's effect in codes of the test recorder (noise-free simulation difference):
        # below about one code no comparison of records can see the fault
        "effect_current_lsb": effect_I / (2.0 * dig_test.current_range_A / 2 ** dig_test.bits),
        "effect_voltage_lsb": effect_U / (2.0 * dig_test.voltage_range_V / 2 ** dig_test.bits),
    }
    return ref, test, label


#: Simulation time step as a fraction of the recorder's sample interval (the band limit is applied on
#: the finer simulation grid, see synthetic.digitiser).
SIM_STEP_FRACTION = 0.5
