"""A test sequence of one terminal: which shot is the reference, what each shot is compared with, and
the summary verdict of the whole sequence.

A lightning-impulse test of a terminal applies shots in a set order. The opening reduced-level full
wave is the reference; every full-level full shot is compared with it, and a closing reduced-level shot
is compared with the opening one (a lasting change between the two means damage that outlived the
full-level shots). A reduced-level chopped wave, where the plan has one, becomes the reference of the
full-level chopped shots: a chopped shot compared with a chopped reference sees the winding's answer to
the collapse, which a full-wave reference barely excites (the README gives the measured difference).
Without one, chopped shots are compared with the opening full wave. The order is a :class:`Plan`;
:data:`PLANS` holds the default order, one with a reduced chopped wave, and an IEEE-style one. The
sequence logic is plain Python, used by the service and the watcher.

Examples
--------
>>> from detector.sequence import PLANS, role_for
>>> [f"{s.kind}@{s.level_percent:g}" for s in PLANS["iec"]]
['reduced@75', 'full@100', 'chopped@115', 'chopped@115', 'full@100', 'reduced@75']
>>> role_for("full", [])
Traceback (most recent call last):
...
detector._validation.ShotcheckError: no reference shot yet: post the opening reduced-level full wave first
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from typing import Any

from ._validation import ShotcheckError, check_option

__all__ = ["Step", "Plan", "PLANS", "SHOT_KINDS", "REDUCED_KINDS", "WAVE_KIND_OF", "parse_plan", "role_for",
           "reference_of", "check_declared", "summarize"]

#: Kinds of shot in a sequence: reduced-level full wave, full-level full wave, full-level chopped wave,
#: reduced-level chopped wave.
SHOT_KINDS = ("reduced", "full", "chopped", "reduced_chopped")
#: Wave kind (:mod:`detector.waveshape`) each shot kind must show.
WAVE_KIND_OF = {"reduced": "lightning_full", "full": "lightning_full", "chopped": "lightning_chopped",
                "reduced_chopped": "lightning_chopped"}
#: Shot kinds applied at a reduced level (below 100 % of the test level).
REDUCED_KINDS = ("reduced", "reduced_chopped")


@dataclasses.dataclass(frozen=True)
class Step:
    """One planned shot.

    Parameters
    ----------
    kind : {'reduced', 'full', 'chopped', 'reduced_chopped'}
        Reduced-level full wave, full-level full wave, full-level chopped wave, or reduced-level
        chopped wave.
    level_percent : float
        Applied level in percent of the test level, in (0, 200].
    """

    kind: str
    level_percent: float

    def __post_init__(self) -> None:
        check_option("kind", self.kind, SHOT_KINDS)
        check_level(self.kind, self.level_percent)

    def to_dict(self) -> dict[str, Any]:
        """``{'kind': ..., 'level_percent': ...}``."""
        return {"kind": self.kind, "level_percent": float(self.level_percent)}


def check_level(kind: str, level_percent: float, *, field: str = "level_percent") -> float:
    """Check that a level suits the shot kind: reduced below 100 %, full-level at 80 % or more.

    Parameters
    ----------
    kind : {'reduced', 'full', 'chopped', 'reduced_chopped'}
    level_percent : float
        Applied level [% of the test level].

    Returns
    -------
    float

    Raises
    ------
    ShotcheckError
        Naming the field and the expected range.
    """
    try:
        lv = float(level_percent)
    except (TypeError, ValueError):
        raise ShotcheckError(f"{field}: must be a number of percent, got {level_percent!r}") from None
    if not (0.0 < lv <= 200.0):
        raise ShotcheckError(f"{field}: must be in (0, 200] percent of the test level, got {lv:g}")
    if kind in REDUCED_KINDS and lv >= 100.0:
        raise ShotcheckError(f"{field}: a reduced-level shot must be below 100 %, got {lv:g} %")
    if kind in ("full", "chopped") and lv < 80.0:
        raise ShotcheckError(
            f"{field}: a {kind} shot is a full-level shot (80 % or more of the test level), got {lv:g} %; "
            f"declare it as {'reduced_chopped' if kind == 'chopped' else 'reduced'!r}"
        )
    return lv


Plan = tuple[Step, ...]

#: Named shot orders. ``'iec'`` is the order given in the project's seed document (issue 5):
#: reduced 75 %, full 100 %, two chopped at 115 %, full 100 %, reduced 75 %. ``'iec_chopped'`` adds a
#: reduced-level chopped wave before the chopped shots, as the reference they are compared with (one
#: reduced full, one full, reduced chopped, two chopped, two full: IEC 60076-3's order for tests with
#: chopped waves, from memory), and closes with a reduced full wave. ``'ieee'`` is one reduced
#: full wave, two chopped waves, one full wave, as IEEE C57.12.90 orders them (from memory), with the
#: reduced level inside 50-70 % and chopped waves at 110 % (REFERENCE.md "Transformer impulse tests",
#: recalled). Labs adapt both, so a sequence may bring its own plan.
PLANS: dict[str, Plan] = {
    "iec": (Step("reduced", 75.0), Step("full", 100.0), Step("chopped", 115.0), Step("chopped", 115.0),
            Step("full", 100.0), Step("reduced", 75.0)),
    "iec_chopped": (Step("reduced", 75.0), Step("full", 100.0), Step("reduced_chopped", 75.0),
                    Step("chopped", 115.0), Step("chopped", 115.0), Step("full", 100.0), Step("full", 100.0),
                    Step("reduced", 75.0)),
    "ieee": (Step("reduced", 60.0), Step("chopped", 110.0), Step("chopped", 110.0), Step("full", 100.0)),
}


def parse_plan(spec: str | Sequence[Mapping[str, Any]] | None) -> Plan:
    """Return a plan from a name in :data:`PLANS`, a list of ``{kind, level_percent}``, or None ('iec').

    Raises
    ------
    ShotcheckError
        Unknown name, malformed step, or a plan that does not open with a reduced-level shot.
    """
    if spec is None:
        return PLANS["iec"]
    if isinstance(spec, str):
        check_option("plan", spec, tuple(PLANS))
        return PLANS[spec]
    steps = []
    for i, s in enumerate(spec):
        if not isinstance(s, Mapping) or "kind" not in s or "level_percent" not in s:
            raise ShotcheckError(f"plan[{i}]: expected an object with 'kind' and 'level_percent', got {s!r}")
        try:
            steps.append(Step(str(s["kind"]), float(s["level_percent"])))
        except (TypeError, ValueError) as exc:
            raise ShotcheckError(f"plan[{i}]: {exc}") from None
    if not steps:
        raise ShotcheckError("plan: needs at least one step")
    if steps[0].kind != "reduced":
        raise ShotcheckError("plan[0]: a sequence opens with a reduced-level full wave (the reference)")
    return tuple(steps)


def role_for(kind: str, previous: Sequence[Mapping[str, Any]]) -> tuple[str, str | None]:
    """Role of a new shot and the id of the shot it is compared with.

    Parameters
    ----------
    kind : {'reduced', 'full', 'chopped', 'reduced_chopped'}
    previous : sequence of mapping
        Earlier shots of the sequence in order, each with ``id``, ``kind`` and ``role``.

    Returns
    -------
    role : {'reference', 'reduced_check', 'test', 'closing', 'chopped_reference', 'chopped_check'}
        ``reference`` the opening reduced full wave; ``reduced_check`` a further reduced full wave before
        any full-level shot; ``test`` a full-level shot; ``closing`` a reduced full wave after full-level
        shots; ``chopped_reference`` the first reduced chopped wave (compared with the opening reference,
        and the reference of the chopped shots after it); ``chopped_check`` a further reduced chopped
        wave (compared with the chopped reference).
    reference_id : str or None
        Id of the shot compared with: the chopped reference for a chopped shot or a further reduced
        chopped wave when there is one, else the opening reduced full wave (None for the reference).

    Raises
    ------
    ShotcheckError
        A shot other than a reduced full wave before the reference.

    Examples
    --------
    >>> shots = [{"id": "s1", "kind": "reduced", "role": "reference"},
    ...          {"id": "s2", "kind": "reduced_chopped", "role": "chopped_reference"}]
    >>> role_for("chopped", shots), role_for("full", shots)
    (('test', 's2'), ('test', 's1'))
    """
    check_option("kind", kind, SHOT_KINDS)
    ref = next((s for s in previous if s["role"] == "reference"), None)
    if ref is None:
        if kind == "reduced":
            return "reference", None
        raise ShotcheckError("no reference shot yet: post the opening reduced-level full wave first")
    chop_ref = next((s for s in previous if s["role"] == "chopped_reference"), None)
    if kind == "reduced_chopped":
        if chop_ref is None:
            return "chopped_reference", str(ref["id"])
        return "chopped_check", str(chop_ref["id"])
    if kind == "chopped":
        return "test", str((chop_ref or ref)["id"])
    if kind == "full":
        return "test", str(ref["id"])
    after_full = any(s["kind"] not in REDUCED_KINDS for s in previous)
    return ("closing" if after_full else "reduced_check"), str(ref["id"])


def reference_of(shot: Mapping[str, Any], shots: Sequence[Mapping[str, Any]]) -> str | None:
    """Id of the shot a stored shot is compared with (:func:`role_for` over the shots before it).

    Parameters
    ----------
    shot : mapping
        A shot of the sequence, with ``id`` and ``kind``.
    shots : sequence of mapping
        All shots of its sequence in order (``id``, ``kind``, ``role``).

    Returns
    -------
    str or None
        None for the opening reference (or a shot not in ``shots``).
    """
    ids = [str(s["id"]) for s in shots]
    if str(shot["id"]) not in ids:
        return None
    before = shots[: ids.index(str(shot["id"]))]
    try:
        return role_for(str(shot["kind"]), before)[1]
    except ShotcheckError:
        return None


def check_declared(kind: str, wave_kind: str, *, name: str = "record") -> None:
    """Refuse a record whose measured wave kind contradicts the declared shot kind.

    Parameters
    ----------
    kind : {'reduced', 'full', 'chopped', 'reduced_chopped'}
        Declared by the client.
    wave_kind : str
        ``WaveShape.kind`` measured on the record (IEC 60060-1 evaluation).
    name : str
        Record name for the message.

    Raises
    ------
    ShotcheckError
    """
    expected = WAVE_KIND_OF[kind]
    if wave_kind != expected:
        what = {"lightning_full": "a full lightning impulse", "lightning_chopped": "a chopped lightning impulse",
                "switching": "a switching impulse"}.get(wave_kind, wave_kind)
        raise ShotcheckError(
            f"{name}: declared kind {kind!r} needs {WAVE_KIND_OF[kind].replace('_', ' ')}, but the record "
            f"shows {what}; check the kind or the file"
        )


def level_warning(declared_ratio: float, measured_ratio: float, *, tolerance: float = 0.1) -> str | None:
    """Warning text when the measured test-voltage ratio to the reference departs from the declared one.

    Parameters
    ----------
    declared_ratio : float
        Declared level of the shot / declared level of the reference [1].
    measured_ratio : float
        Test voltage of the shot / test voltage of the reference [1].
    tolerance : float
        Allowed relative departure [1].
    """
    if declared_ratio <= 0 or not (abs(measured_ratio / declared_ratio - 1.0) > tolerance):
        return None
    return (f"measured level ratio to the reference {measured_ratio:.3f} differs from the declared "
            f"{declared_ratio:.3f} by more than {tolerance:.0%}; check the declared level or the divider ratio")


def summarize(plan: Sequence[Step], shots: Sequence[Mapping[str, Any]],
              verdicts: Mapping[str, Mapping[str, Any] | None]) -> dict[str, Any]:
    """Sequence verdict from its shots and their comparison verdicts.

    Parameters
    ----------
    plan : sequence of Step
    shots : sequence of mapping
        Shots in order with ``id``, ``kind``, ``level_percent``, ``role``, ``comparison_id``.
    verdicts : mapping
        Comparison id -> verdict dict (``fault_indicated``, ``event``...) or None if not available.

    Returns
    -------
    dict
        ``status`` ('in_progress', 'complete'), ``fault_indicated`` (any compared shot),
        ``lasting_change`` (the closing reduced shot differs from the opening one; None until posted),
        ``shots_expected``, ``shots_received``, ``faulted_shots`` (ids), ``deviations`` (plan
        mismatches, as text) and ``conclusion`` (one line for a person).
    """
    deviations = []
    for i, s in enumerate(shots):
        if i < len(plan):
            p = plan[i]
            if s["kind"] != p.kind or abs(float(s["level_percent"]) - p.level_percent) > 1e-6:
                deviations.append(f"shot {i + 1}: {s['kind']} at {float(s['level_percent']):g} %, the plan has "
                                  f"{p.kind} at {p.level_percent:g} %")
        else:
            deviations.append(f"shot {i + 1}: beyond the {len(plan)} planned shots")
    faulted, lasting = [], None
    pending = 0
    for s in shots:
        cid = s.get("comparison_id")
        if s["role"] == "reference":
            continue
        v = verdicts.get(cid) if cid else None
        if v is None:
            pending += 1
            continue
        if v.get("fault_indicated"):
            faulted.append(s["id"])
        if s["role"] == "closing":
            lasting = bool(v.get("fault_indicated"))
    status = "complete" if len(shots) >= len(plan) and pending == 0 else "in_progress"
    if faulted:
        conclusion = (f"difference indicated on {len(faulted)} shot(s): {', '.join(faulted)}; "
                      "the responsible engineer must examine the records")
    elif status == "complete":
        conclusion = "no significant difference indicated on any compared shot (advisory)"
    else:
        conclusion = f"{len(shots)} of {len(plan)} planned shots received; no difference indicated so far"
    return {
        "status": status,
        "fault_indicated": bool(faulted),
        "lasting_change": lasting,
        "shots_expected": len(plan),
        "shots_received": len(shots),
        "shots_pending": pending,
        "faulted_shots": faulted,
        "deviations": deviations,
        "conclusion": conclusion,
    }
