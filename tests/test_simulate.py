"""Tests of the piecewise-linear modal simulation: physics references, invariants, events and faults."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from detector._validation import ShotcheckError
from synthetic.circuit import ChoppingGap, ImpulseGenerator, design_generator
from synthetic.faults import Breakdown, DischargeTrain, pulse_current_A, pulse_time_constants
from synthetic.simulate import build_network, max_stress, simulate
from synthetic.winding import WindingDesign

FEW = settings(derandomize=True, max_examples=5, deadline=None)


def _winding(n: int = 40, *, Lt: float = 0.02, alpha: float = 10.0, neutral: str = "grounded",
             k0: float = 0.6, damping: float = 0.05) -> WindingDesign:
    return WindingDesign.from_totals(n, total_inductance_H=Lt, total_ground_capacitance_F=5e-9, alpha=alpha,
                                     k0=k0, damping=damping, series_resistance_ohm=2 * Lt / 50e-6,
                                     neutral=neutral)


@pytest.fixture(scope="module")
def case():
    w = _winding()
    g = design_generator(w, test_voltage_V=1e6, C1_F=0.5e-6)
    return w, g


@pytest.mark.parametrize("alpha", [5.0, 10.0, 20.0])
@pytest.mark.parametrize("neutral", ["grounded", "isolated"])
def test_distribution_a_few_ns_after_a_steep_front(alpha, neutral):
    """Node voltages 30 ns into a 10-ns front vs the initial distribution of the continuous winding.

    Greenwood, Electrical Transients in Power Systems, ch. 12; Bewley: u(x) = U0 sinh(alpha(1-x))/sinh(alpha)
    (grounded), U0 cosh(alpha(1-x))/cosh(alpha) (isolated). At 30 ns the inductor currents (the integral of
    the section voltage over L) have moved a negligible charge (winding of 1 H here), so the node voltages
    follow the capacitive divider; they are compared relative to the terminal voltage U0 = v_0(30 ns).
    Tolerance: 2 % of U0 (the ladder of 80 sections differs from the continuum by < 1 %).
    """
    w = WindingDesign.from_totals(80, total_inductance_H=1.0, total_ground_capacitance_F=2e-9, alpha=alpha,
                                  k0=0.5, neutral=neutral, series_resistance_ohm=10.0, damping=0.0)
    g = ImpulseGenerator(C1_F=1e-6, R_front_ohm=1.0, R_tail_ohm=1e4, C_load_F=10e-9, L_lead_H=0.0, charge_V=1.0)
    r = simulate(w, g, t_end_s=30e-9, dt_s=1e-9, record_nodes=True)
    u = r.node_voltages_V[-1] / r.node_voltages_V[-1, 0]
    x = w.node_positions()
    if neutral == "grounded":
        ref = np.sinh(alpha * (1 - x)) / np.sinh(alpha)  # Greenwood ch. 12; Bewley
    else:
        ref = np.cosh(alpha * (1 - x)) / np.cosh(alpha)  # Greenwood ch. 12; Bewley
    assert np.max(np.abs(u - ref)) < 0.02  # Greenwood ch. 12; Bewley (2 % of U0)


def test_internal_voltage_exceeds_the_applied_peak(case):
    """Common practice: with a capacitive (alpha ~ 10) grounded-neutral winding under a 1.2/50 wave the
    distribution is not uniform and internal oscillations lift some node above the terminal peak."""
    w, g = case
    r = simulate(w, g, t_end_s=100e-6, dt_s=1e-8, record_nodes=True)
    nodes = r.node_voltages_V
    assert nodes.max() > 1.01 * r.terminal_voltage_V.max()  # common practice
    # non-uniform: 1 us into the front the first 10 % of the winding holds far more than 10 % of the voltage
    k = int(np.searchsorted(r.times_s, 1e-6))
    assert nodes[k, 0] - nodes[k, 4] > 0.3 * nodes[k, 0]  # common practice


@FEW
@given(n=st.integers(10, 30), alpha=st.floats(3, 25), k0=st.floats(0, 0.8), level=st.floats(0.3, 1.5))
def test_response_is_linear_in_the_charging_voltage(n, alpha, k0, level):
    w = _winding(n, alpha=alpha, k0=k0)
    g = ImpulseGenerator(50e-9, 300.0, 1500.0, 1e-9, 5e-6, 1e5)
    chop = ChoppingGap(4e-6, 2.0, 1e-6)
    a = simulate(w, g, t_end_s=20e-6, dt_s=1e-8, chop=chop)
    b = simulate(w, g, t_end_s=20e-6, dt_s=1e-8, chop=chop, level=level)
    np.testing.assert_allclose(b.terminal_voltage_V, level * a.terminal_voltage_V,
                               atol=1e-9 * np.abs(a.terminal_voltage_V).max())
    np.testing.assert_allclose(b.neutral_current_A, level * a.neutral_current_A,
                               atol=1e-9 * np.abs(a.neutral_current_A).max())


def _random_state(net, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=net.nx)
    x[: net.nv] *= 1e3  # volts
    return x


@FEW
@given(n=st.integers(5, 30), alpha=st.floats(2, 25), k0=st.floats(0, 0.9), seed=st.integers(0, 1000))
def test_lossless_network_conserves_energy(n, alpha, k0, seed):
    """sum 1/2 C v^2 + 1/2 i^T L i is constant for R = 0, no damping, isolated neutral, no source."""
    w = WindingDesign.from_totals(n, total_inductance_H=0.05, total_ground_capacitance_F=3e-9, alpha=alpha,
                                  k0=k0, series_resistance_ohm=0.0, damping=0.0, neutral="isolated")
    net = build_network(w, None)
    x0 = _random_state(net, seed)
    x = net.response(x0, np.linspace(0, 200e-6, 401))
    e = net.energy_J(x)
    np.testing.assert_allclose(e, e[0], rtol=1e-9)


@FEW
@given(n=st.integers(5, 30), alpha=st.floats(2, 25), k0=st.floats(0, 0.9), seed=st.integers(0, 1000),
       neutral=st.sampled_from(["grounded", "isolated"]))
def test_stored_energy_never_grows_without_source(n, alpha, k0, seed, neutral):
    w = _winding(n, alpha=alpha, k0=k0, neutral=neutral)
    net = build_network(w, None)
    x0 = _random_state(net, seed)
    e = net.energy_J(net.response(x0, np.linspace(0, 100e-6, 2001)))
    assert np.all(np.diff(e) <= 1e-9 * e[0])
    assert e[-1] < e[0]


@FEW
@given(charge=st.floats(1e-12, 50e-9), width=st.floats(5e-9, 200e-9), node=st.integers(0, 20),
       n_pulses=st.integers(1, 6))
def test_discharge_pulses_inject_their_charge(charge, width, node, n_pulses):
    """With no DC path to ground (isolated neutral, no tail resistor) the charge of the pulses ends up spread
    over all ground capacitances: the final common voltage rises by Q_total / C_total (charge conservation)."""
    w = WindingDesign.from_totals(20, total_inductance_H=0.05, total_ground_capacitance_F=2e-9, alpha=5.0,
                                  neutral="isolated", series_resistance_ohm=2e4, damping=0.3)
    g = ImpulseGenerator(2e-9, 100.0, np.inf, 0.5e-9, 0.0, 1e4)
    train = DischargeTrain(node=node, inception_V=2e3, charge_C=charge, width_s=width, max_pulses=n_pulses,
                           repetition_s=2e-6)
    a = simulate(w, g, t_end_s=2e-3, dt_s=1e-6, record_nodes=True)
    b = simulate(w, g, t_end_s=2e-3, dt_s=1e-6, record_nodes=True, faults=(train,))
    pulses = [e for e in b.events if e[1] == f"discharge node {node}"]
    assert len(pulses) == n_pulses
    np.testing.assert_allclose(np.diff([p[0] for p in pulses]), 2e-6, rtol=1e-9)
    c_total = w.Cg_F.sum() + g.C1_F + g.C_load_F
    rise = b.node_voltages_V[-1] - a.node_voltages_V[-1]
    np.testing.assert_allclose(rise, n_pulses * charge / c_total, rtol=1e-6)
    assert b.fault_time_s == pytest.approx(pulses[0][0])


def test_pulse_shape_integral_and_width():
    t = np.linspace(-1e-8, 2e-6, 400001)
    i = pulse_current_A(t, 2e-12, 50e-9)
    assert np.trapezoid(i, t) == pytest.approx(2e-12, rel=1e-6)
    above = t[i >= 0.5 * i.max()]
    assert above[-1] - above[0] == pytest.approx(50e-9, rel=1e-3)
    tau1, tau2 = pulse_time_constants(50e-9)
    assert tau1 / tau2 == pytest.approx(10.0)


def test_discharge_pulses_on_a_fine_grid_match_the_exact_current():
    """A 10-ns pulse sampled every 0.5 ns: the tank current of an isolated winding contains the pulse
    current (its direct feed-through) on top of the smooth response; the difference of two shots integrates
    to the injected charge over the pulse window."""
    w = _winding(20, neutral="isolated")
    g = ImpulseGenerator(50e-9, 300.0, 1500.0, 1e-9, 5e-6, 1e5)
    train = DischargeTrain(node=5, inception_V=1e4, charge_C=1e-9, width_s=10e-9, max_pulses=1, repetition_s=1e-6)
    a = simulate(w, g, t_end_s=6e-6, dt_s=0.5e-9)
    b = simulate(w, g, t_end_s=6e-6, dt_s=0.5e-9, faults=(train,))
    t_p = b.fault_time_s
    d = b.neutral_current_A - a.neutral_current_A
    win = (a.times_s >= t_p - 1e-9) & (a.times_s <= t_p + 1e-7)
    # the tank current carries the injected charge to ground over the pulse window (most of it; a small part
    # stays on the neighbouring series capacitances for a while)
    q = np.trapezoid(d[win], a.times_s[win])
    assert 0.5e-9 < q <= 1.05e-9


def test_reduced_shot_never_breaks_down_full_shot_does(case):
    """Common practice (the basis of reduced/full comparison): a gap whose breakdown voltage lies above the
    reduced-level stress survives the reduced shot and strikes in the full shot at the crossing instant."""
    w, g = case
    s_red = max_stress(w, g, t_end_s=100e-6, node_a=12, node_b=13, level=0.6)
    s_full = max_stress(w, g, t_end_s=100e-6, node_a=12, node_b=13, level=1.0)
    assert s_full == pytest.approx(s_red / 0.6, rel=1e-9)
    for frac in (0.001, 0.5, 0.999):
        bd = Breakdown(12, 13, s_red + frac * (s_full - s_red), 1.0)
        red = simulate(w, g, t_end_s=100e-6, dt_s=1e-8, faults=(bd,), level=0.6)
        assert red.events == () and red.fault_time_s is None  # common practice
        full = simulate(w, g, t_end_s=100e-6, dt_s=1e-8, faults=(bd,))
        assert full.events[0][1] == "breakdown 12-13"
    # the instant is where the healthy gap voltage first reaches the level
    bd = Breakdown(12, 13, 0.5 * (s_red + s_full), 1.0)
    full = simulate(w, g, t_end_s=100e-6, dt_s=1e-8, faults=(bd,))
    healthy = simulate(w, g, t_end_s=100e-6, dt_s=1e-8, record_nodes=True)
    gap = np.abs(healthy.node_voltages_V[:, 12] - healthy.node_voltages_V[:, 13])
    k = int(np.argmax(gap >= bd.breakdown_voltage_V))
    assert healthy.times_s[k - 1] < full.fault_time_s <= healthy.times_s[k]
    # identical records up to the fault, different afterwards
    before = full.times_s < full.fault_time_s
    np.testing.assert_allclose(full.neutral_current_A[before], healthy.neutral_current_A[before], rtol=0,
                               atol=1e-9 * np.abs(healthy.neutral_current_A).max())
    assert np.abs(full.neutral_current_A - healthy.neutral_current_A).max() > 0.01 * np.abs(
        healthy.neutral_current_A).max()


def test_small_arc_resistance_is_accurate(case):
    """A 0.01 ohm arc (modes near -1e12 1/s) gives the same records as a 1e-5 ohm arc to 1e-3 of the peak,
    and the decomposition of the stiff topology stays accurate."""
    w, g = case
    s = max_stress(w, g, t_end_s=60e-6, node_a=8, node_b=None)
    res = [simulate(w, g, t_end_s=60e-6, dt_s=1e-8, faults=(Breakdown(8, None, 0.8 * s, R),))
           for R in (0.01, 1e-5)]
    i0 = np.abs(res[0].neutral_current_A).max()
    np.testing.assert_allclose(res[0].neutral_current_A, res[1].neutral_current_A, atol=1e-3 * i0)
    np.testing.assert_allclose(res[0].terminal_voltage_V, res[1].terminal_voltage_V,
                               atol=1e-3 * np.abs(res[0].terminal_voltage_V).max())
    net = build_network(w, g, closed=(Breakdown(8, None, 1.0, 1e-5),))
    assert net.residual < 1e-9
    assert net.lam.real.min() < -1e13


def test_arc_extinguishes_at_current_zero(case):
    w, g = case
    s = max_stress(w, g, t_end_s=100e-6, node_a=35, node_b=36)
    bd = Breakdown(35, 36, 0.7 * s, 50.0, extinguish_at_current_zero=True)
    r = simulate(w, g, t_end_s=100e-6, dt_s=1e-8, faults=(bd,), record_nodes=True)
    kinds = [e[1] for e in r.events]
    assert kinds[:2] == ["breakdown 35-36", "extinction 35-36"]
    t_b, t_e = r.events[0][0], r.events[1][0]
    gap = r.node_voltages_V[:, 35] - r.node_voltages_V[:, 36]
    arc = (r.times_s > t_b) & (r.times_s < t_e)
    # while the arc burns its voltage (= its current times R) keeps one sign; it is ~0 at extinction
    assert np.all(np.sign(gap[arc]) == np.sign(gap[arc][0]))
    k = int(np.searchsorted(r.times_s, t_e))
    assert abs(gap[k]) < 0.01 * s


def test_chopped_wave_collapses(case):
    w, g = case
    r = simulate(w, g, t_end_s=20e-6, dt_s=1e-8, chop=ChoppingGap(3e-6, 1.0, 2e-6))
    assert r.events == ((3e-6, "chop"),)
    k = int(np.searchsorted(r.times_s, 3e-6))
    peak = r.terminal_voltage_V[:k].max()
    # the collapse rings through zero (opposite-polarity swing) and has died to < 5 % of the peak 3 us later
    ring = r.terminal_voltage_V[(r.times_s > 3e-6) & (r.times_s < 4e-6)]
    assert ring.min() < -0.1 * peak
    late = r.terminal_voltage_V[r.times_s > 6e-6]
    assert np.abs(late).max() < 0.05 * peak


def test_isolated_neutral_current_is_the_capacitive_current(case):
    _, g = case
    w = _winding(30, neutral="isolated")
    r = simulate(w, g, t_end_s=20e-6, dt_s=2e-9, record_nodes=True)
    dv = np.gradient(r.node_voltages_V, r.times_s, axis=0)
    i_ref = dv @ w.Cg_F
    sl = slice(10, -10)
    np.testing.assert_allclose(r.neutral_current_A[sl], i_ref[sl], atol=5e-3 * np.abs(i_ref).max())


def test_one_turn_short_is_representable():
    w = WindingDesign.from_totals(30, total_inductance_H=0.02, total_ground_capacitance_F=5e-9, alpha=10.0,
                                  k0=0.6, turns_per_section=12, series_resistance_ohm=800.0)
    s, node = w.split_section(10, 1)
    g = design_generator(s, test_voltage_V=1e6, C1_F=0.5e-6)
    stress = max_stress(s, g, t_end_s=60e-6, node_a=node - 1, node_b=node)
    r = simulate(s, g, t_end_s=60e-6, dt_s=1e-8, faults=(Breakdown(node - 1, node, 0.9 * stress, 0.1),))
    h = simulate(s, g, t_end_s=60e-6, dt_s=1e-8)
    assert r.events[0][1] == f"breakdown {node - 1}-{node}"
    # a one-turn short changes the neutral current, though by a small amount
    diff = np.abs(r.neutral_current_A - h.neutral_current_A).max() / np.abs(h.neutral_current_A).max()
    assert 1e-4 < diff < 0.2


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"t_end_s": -1.0}, "t_end_s"),
        ({"dt_s": 0.0}, "dt_s"),
        ({"level": 0.0}, "level"),
        ({"faults": (Breakdown(3, 99, 1e3),)}, "outside"),
        ({"faults": (DischargeTrain(77, 1e3, 1e-12),)}, "outside"),
        ({"faults": ("spark",)}, "Breakdown or DischargeTrain"),
    ],
)
def test_bad_simulation_arguments(case, kwargs, match):
    w, g = case
    args = {"t_end_s": 1e-5, "dt_s": 1e-8}
    args.update(kwargs)
    with pytest.raises(ShotcheckError, match=match):
        simulate(w, g, **args)


@FEW
@given(n=st.integers(10, 120), alpha=st.floats(1, 30), k0=st.floats(0, 0.95), r_tot=st.floats(0, 3e4),
       damping=st.sampled_from([0.0, 0.01, 0.3, 1.0]), arc=st.floats(0.01, 50), seed=st.integers(0, 99))
def test_decomposition_stays_accurate_over_the_design_range(n, alpha, k0, r_tot, damping, arc, seed):
    """Energy scaling keeps the eigenvector matrix well conditioned: V^-1 V = I and A V = V diag(lam) to
    round-off, with and without a closed arc, over the range of designs the data set draws from."""
    rng = np.random.default_rng(seed)
    w = WindingDesign.from_totals(n, total_inductance_H=10 ** rng.uniform(-2.5, 0),
                                  total_ground_capacitance_F=10 ** rng.uniform(-9.5, -8), alpha=alpha, k0=k0,
                                  series_resistance_ohm=r_tot, damping=damping)
    g = ImpulseGenerator(0.3e-6, 250.0, 600.0, 1e-9, 5e-6, 1.0)
    a = int(rng.integers(0, n))
    for closed in ((), (Breakdown(a, a + 1, 1.0, arc),), (Breakdown(a, None, 1.0, arc),)):
        assert build_network(w, g, closed=closed).residual < 1e-11


def test_recorded_gaps_equal_node_differences(case):
    w, g = case
    r = simulate(w, g, t_end_s=20e-6, dt_s=1e-8, record_nodes=True, record_gaps=((3, 4), (7, None)))
    nodes = r.node_voltages_V
    np.testing.assert_allclose(r.gap_voltages_V[:, 0], nodes[:, 3] - nodes[:, 4], atol=1e-9 * nodes.max())
    np.testing.assert_allclose(r.gap_voltages_V[:, 1], nodes[:, 7], atol=1e-9 * nodes.max())
    np.testing.assert_allclose(r.terminal_voltage_V, nodes[:, 0], atol=1e-9 * nodes.max())
    with pytest.raises(ShotcheckError, match="record_gaps"):
        simulate(w, g, t_end_s=1e-6, dt_s=1e-8, record_gaps=((3, 400),))


def test_state_and_pulses_carry_across_a_topology_change(case):
    """A 'chop' through 1e15 ohm changes the topology but (to 1e-9 A) not the physics: the pulse-only part of
    the shot must be unchanged when a discharge pulse is in flight at the switching instant (its remaining
    current continues in the new topology)."""
    w, g = case
    train = DischargeTrain(node=6, inception_V=2e5, charge_C=50e-9, width_s=200e-9, max_pulses=2,
                           repetition_s=1e-6)
    kw = {"t_end_s": 10e-6, "dt_s": 1e-8, "record_gaps": ((6, None),)}
    plain = simulate(w, g, faults=(train,), **kw)
    t_pulse = plain.fault_time_s
    chop = ChoppingGap(t_pulse + 50e-9, arc_resistance_ohm=1e15, lead_inductance_H=0.0)
    switched = simulate(w, g, faults=(train,), chop=chop, **kw)
    assert [e[1] for e in switched.events] == ["discharge node 6", "chop", "discharge node 6"]
    for field in ("neutral_current_A", "gap_voltages_V"):
        d_plain = getattr(plain, field) - getattr(simulate(w, g, **kw), field)
        d_switched = getattr(switched, field) - getattr(simulate(w, g, chop=chop, **kw), field)
        assert np.abs(d_plain).max() > 0
        np.testing.assert_allclose(d_switched, d_plain, rtol=0, atol=1e-6 * np.abs(d_plain).max())


def test_state_matrix_is_the_nodal_equations(case):
    """C v' = -G v - P i, L i' = P^T v - R i: the energy-scaled assembly gives back these equations, and a
    lossless network has purely imaginary modes."""
    w, g = case
    net = build_network(w, g, chop=ChoppingGap(1e-6, 1.0, 1e-6), closed=(Breakdown(4, 9, 1.0, 0.3),))
    nv = net.nv
    ref = np.block([[-np.linalg.solve(net.C, net.G), -np.linalg.solve(net.C, net.P)],
                    [np.linalg.solve(net.Lb, net.P.T), -np.linalg.solve(net.Lb, net.Rb)]])
    np.testing.assert_allclose(net.A, ref, rtol=1e-9, atol=1e-12 * np.abs(ref).max())
    assert net.branch_names[-1] == "gap" and nv == w.n_nodes + 1
    lossless = WindingDesign.from_totals(15, total_inductance_H=0.05, total_ground_capacitance_F=3e-9, alpha=9.0,
                                         k0=0.7, series_resistance_ohm=0.0, damping=0.0, neutral="isolated")
    lam = build_network(lossless, None).lam
    assert np.abs(lam.real).max() < 1e-10 * np.abs(lam).max()


def test_discharge_between_two_nodes_moves_charge_but_adds_none():
    """A discharge across a gap between two nodes (charge conservation): with no DC path to ground the
    total charge on the ground capacitances is unchanged, so the common voltage does not rise, while the
    node on the receiving side ends higher than without the discharge."""
    w = WindingDesign.from_totals(20, total_inductance_H=0.05, total_ground_capacitance_F=2e-9, alpha=5.0,
                                  neutral="isolated", series_resistance_ohm=2e4, damping=0.3)
    g = ImpulseGenerator(2e-9, 100.0, np.inf, 0.5e-9, 0.0, 1e4)
    train = DischargeTrain(node=8, inception_V=1e2, charge_C=5e-9, width_s=20e-9, max_pulses=3,
                           repetition_s=2e-6, node_b=9)
    a = simulate(w, g, t_end_s=2e-3, dt_s=1e-6, record_nodes=True)
    b = simulate(w, g, t_end_s=2e-3, dt_s=1e-6, record_nodes=True, faults=(train,))
    assert [e[1] for e in b.events] == ["discharge 8-9"] * 3
    cg = np.concatenate(([g.C1_F + g.C_load_F], np.zeros(w.n_nodes - 1))) + w.Cg_F
    dq = float((b.node_voltages_V[-1] - a.node_voltages_V[-1]) @ cg)
    assert abs(dq) < 1e-6 * 3 * 5e-9
    with pytest.raises(ShotcheckError, match="node_b must differ"):
        DischargeTrain(node=8, inception_V=1e2, charge_C=5e-9, node_b=8)
