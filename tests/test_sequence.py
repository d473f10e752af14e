"""Sequence logic: plans, roles, declared-kind checks, level warnings, the summary."""

from __future__ import annotations

import pytest

from detector._validation import ShotcheckError
from detector.sequence import (
    PLANS,
    Step,
    check_declared,
    check_level,
    level_warning,
    parse_plan,
    reference_of,
    role_for,
    summarize,
)


def test_default_plan_is_the_order_of_issue_5():
    # issue 5 (seed document): reduced 75 %, full 100 %, two chopped 115 %, full 100 %, reduced 75 %
    assert [(s.kind, s.level_percent) for s in parse_plan(None)] == [
        ("reduced", 75.0), ("full", 100.0), ("chopped", 115.0), ("chopped", 115.0), ("full", 100.0), ("reduced", 75.0)]
    # REFERENCE.md (IEC 60076-3/-4, IEEE C57.12.90, recalled): reduced level 50-75 % (IEC) or 50-70 % (IEEE)
    assert 50 <= PLANS["iec"][0].level_percent <= 75 and 50 <= PLANS["ieee"][0].level_percent <= 70


def _adder(shots):
    """A function that posts a shot of a kind to ``shots`` and returns its (role, reference id)."""
    def add(kind):
        role, ref = role_for(kind, shots)
        shots.append({"id": f"x{len(shots)}", "kind": kind, "role": role})
        return role, ref
    return add


def test_roles():
    add = _adder([])
    assert add("reduced") == ("reference", None)
    assert add("reduced") == ("reduced_check", "x0")
    assert add("full") == ("test", "x0")
    assert add("chopped") == ("test", "x0")
    assert add("reduced") == ("closing", "x0")
    with pytest.raises(ShotcheckError, match="no reference"):
        role_for("chopped", [])


def test_a_reduced_chopped_wave_is_the_reference_of_the_chopped_shots():
    shots = []
    add = _adder(shots)
    assert add("reduced") == ("reference", None)
    assert add("chopped") == ("test", "x0")  # no chopped reference yet: the opening full wave
    assert add("full") == ("test", "x0")
    assert add("reduced_chopped") == ("chopped_reference", "x0")  # itself checked against the opening one
    assert add("chopped") == ("test", "x3")
    assert add("full") == ("test", "x0")  # full shots keep the full reference
    assert add("reduced_chopped") == ("chopped_check", "x3")
    assert add("reduced") == ("closing", "x0")
    # the stored shots give back the same references, shot by shot
    assert [reference_of(s, shots) for s in shots] == [None, "x0", "x0", "x0", "x3", "x0", "x3", "x0"]
    assert reference_of({"id": "nope", "kind": "full"}, shots) is None
    with pytest.raises(ShotcheckError, match="no reference"):
        role_for("reduced_chopped", [])


def test_levels_of_the_reduced_chopped_wave():
    assert check_level("reduced_chopped", 60.0) == 60.0
    with pytest.raises(ShotcheckError, match="below 100"):
        check_level("reduced_chopped", 110.0)
    with pytest.raises(ShotcheckError, match="reduced_chopped"):
        check_level("chopped", 60.0)  # the message names the kind to declare
    check_declared("reduced_chopped", "lightning_chopped")
    with pytest.raises(ShotcheckError, match="full lightning impulse"):
        check_declared("reduced_chopped", "lightning_full")


def test_plan_with_a_reduced_chopped_wave():
    # IEC 60076-3 order with chopped waves (from memory): reduced full, full, reduced chopped, two
    # chopped, two full; the project closes every plan with a reduced full wave
    kinds = [s.kind for s in parse_plan("iec_chopped")]
    assert kinds == ["reduced", "full", "reduced_chopped", "chopped", "chopped", "full", "full", "reduced"]
    assert all(s.level_percent < 100 for s in PLANS["iec_chopped"] if s.kind in ("reduced", "reduced_chopped"))


def test_declared_kind_checks():
    check_declared("chopped", "lightning_chopped")
    check_declared("reduced", "lightning_full")
    with pytest.raises(ShotcheckError, match="chopped lightning impulse"):
        check_declared("full", "lightning_chopped", name="s.cff")
    with pytest.raises(ShotcheckError, match="switching"):
        check_declared("reduced", "switching")


@pytest.mark.parametrize("spec, msg", [
    ("nope", "Invalid value"), ([], "at least one"), ([{"kind": "full", "level_percent": 100}], "opens with"),
    ([{"kind": "reduced"}], "level_percent"), ([{"kind": "reduced", "level_percent": 100}], "below 100"),
    ([{"kind": "reduced", "level_percent": 60}, {"kind": "chopped", "level_percent": 50}], "full-level"),
])
def test_bad_plans(spec, msg):
    with pytest.raises(ShotcheckError, match=msg):
        parse_plan(spec)


def test_level_warning():
    assert level_warning(100 / 75, 1.0 / 0.75) is None
    assert level_warning(100 / 75, 1.05 / 0.75) is None  # 5 % inside the 10 % tolerance
    assert "differs" in level_warning(115 / 75, 1.0 / 0.75)


def test_summary_counts_faults_and_the_closing_shot():
    plan = [Step("reduced", 75), Step("full", 100), Step("reduced", 75)]
    shots = [{"id": "a", "kind": "reduced", "level_percent": 75, "role": "reference", "comparison_id": None},
             {"id": "b", "kind": "full", "level_percent": 100, "role": "test", "comparison_id": "cb"},
             {"id": "c", "kind": "reduced", "level_percent": 75, "role": "closing", "comparison_id": "cc"}]
    ok = summarize(plan, shots, {"cb": {"fault_indicated": False}, "cc": {"fault_indicated": False}})
    assert ok["status"] == "complete" and not ok["fault_indicated"] and ok["lasting_change"] is False
    bad = summarize(plan, shots, {"cb": {"fault_indicated": True}, "cc": {"fault_indicated": True}})
    assert bad["faulted_shots"] == ["b", "c"] and bad["lasting_change"] is True
    partial = summarize(plan, shots[:2], {"cb": None})
    assert partial["status"] == "in_progress" and partial["shots_pending"] == 1 and partial["lasting_change"] is None
