"""Tests of the ladder winding model: construction, splitting, static distribution and natural frequencies."""

from __future__ import annotations

import numpy as np
import pytest

from detector._validation import ShotcheckError
from synthetic.simulate import build_network, capacitance_matrix
from synthetic.winding import WindingDesign


def _uniform(n: int, alpha: float, *, neutral: str = "grounded", k0: float = 0.0, lossless: bool = True,
             Lt: float = 10e-3, Cg: float = 2e-9) -> WindingDesign:
    return WindingDesign.from_totals(
        n, total_inductance_H=Lt, total_ground_capacitance_F=Cg, alpha=alpha, k0=k0,
        series_resistance_ohm=0.0 if lossless else None, damping=0.0 if lossless else 0.05, neutral=neutral,
    )


def test_from_totals_keeps_the_totals():
    w = WindingDesign.from_totals(40, total_inductance_H=0.2, total_ground_capacitance_F=4e-9, alpha=12.0,
                                  k0=0.6, turns_per_section=8)
    assert w.n_sections == 40 and w.n_nodes == 41 and w.total_turns == 320
    assert w.alpha == pytest.approx(12.0, rel=1e-12)
    assert np.sum(w.Cg_F) == pytest.approx(4e-9, rel=1e-12)
    assert w.Cg_F[0] == pytest.approx(0.5 * w.Cg_F[1])  # half values at the ends
    assert w.total_inductance_H == pytest.approx(0.2, rel=1e-12)
    assert w.node_position(0) == 0.0 and w.node_position(40) == 1.0
    assert w.node_position(10) == pytest.approx(0.25)
    assert np.all(np.linalg.eigvalsh(w.inductance_matrix()) > 0)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"n_sections": 0}, "n_sections"),
        ({"k0": 1.0}, "k0"),
        ({"neutral": "floating"}, "neutral"),
        ({"shunt_ohm": 0.0}, "shunt_ohm"),
        ({"alpha": -1.0}, "alpha"),
    ],
)
def test_from_totals_rejects_bad_values(kwargs, match):
    base = {"n_sections": 10, "total_inductance_H": 1e-2, "total_ground_capacitance_F": 1e-9, "alpha": 5.0}
    base.update(kwargs)
    with pytest.raises(ShotcheckError, match=match):
        WindingDesign.from_totals(base.pop("n_sections"), **base)


def test_design_rejects_bad_arrays_naming_the_field():
    w = _uniform(10, 5.0)
    with pytest.raises(ShotcheckError, match=r"Cg_F\[3\]"):
        WindingDesign(w.L_H, w.R_ohm, w.Rp_ohm, w.Cs_F, np.where(np.arange(11) == 3, 0.0, w.Cg_F))
    with pytest.raises(ShotcheckError, match="Cs_F must have shape"):
        WindingDesign(w.L_H, w.R_ohm, w.Rp_ohm, w.Cs_F[:-1], w.Cg_F)
    with pytest.raises(ShotcheckError, match="give exactly one"):
        WindingDesign.from_totals(10, total_inductance_H=1.0, total_ground_capacitance_F=1e-9)


def test_split_section_one_turn():
    w = WindingDesign.from_totals(20, total_inductance_H=0.1, total_ground_capacitance_F=3e-9, alpha=8.0,
                                  k0=0.7, turns_per_section=12)
    s, node = w.split_section(5, 1)
    assert node == 6 and s.n_sections == 21 and s.total_turns == w.total_turns
    assert s.node_position(node) == pytest.approx((5 * 12 + 1) / 240)
    M = s.inductance_matrix()
    # the two parts in series make the original section's self inductance
    assert M[5, 5] + M[6, 6] + 2 * M[5, 6] == pytest.approx(w.L_H[5], rel=1e-12)
    assert M[5, 5] / M[6, 6] == pytest.approx((1 / 11) ** 2, rel=1e-12)
    assert np.all(np.linalg.eigvalsh(M) > 0)
    # series capacitance and resistance of the parts give back the section's values
    assert 1 / (1 / s.Cs_F[5] + 1 / s.Cs_F[6]) == pytest.approx(w.Cs_F[5], rel=1e-12)
    assert s.R_ohm[5] + s.R_ohm[6] == pytest.approx(w.R_ohm[5], rel=1e-12)
    assert np.sum(s.Cg_F) == pytest.approx(np.sum(w.Cg_F), rel=1e-12)
    assert np.all(s.Cg_F > 0)
    # splitting the same section again (the rest of it) still gives a positive definite matrix
    s2, _ = s.split_section(6, 1)
    assert np.all(np.linalg.eigvalsh(s2.inductance_matrix()) > 0)
    with pytest.raises(ShotcheckError, match="turns_in_first"):
        w.split_section(5, 12)


@pytest.mark.parametrize("alpha", [5.0, 10.0, 20.0])
@pytest.mark.parametrize("neutral", ["grounded", "isolated"])
def test_initial_distribution_of_the_capacitive_network(alpha, neutral):
    """Static capacitive distribution vs the continuous winding.

    Greenwood, Electrical Transients in Power Systems (2nd ed., ch. 12) and Bewley, Traveling Waves on
    Transmission Systems: u(x) = U0 sinh(alpha (1-x)) / sinh(alpha) (grounded neutral),
    U0 cosh(alpha (1-x)) / cosh(alpha) (isolated). A very steep front meets only capacitances, so the
    distribution is the solution of C v = 0 at the free nodes with v_0 = U0 (and v_N = 0 if grounded).
    Tolerance 2 % of U0 (the brief's limit): the 60-section ladder differs from the continuum by the
    discretisation of the exponential decay, below 1 % here.
    """
    n = 60
    w = _uniform(n, alpha, neutral=neutral)
    C = capacitance_matrix(w)
    free = np.arange(1, n + 1 if neutral == "isolated" else n)
    v = np.zeros(n + 1)
    v[0] = 1.0
    v[free] = np.linalg.solve(C[np.ix_(free, free)], -C[free, 0])
    x = w.node_positions()
    if neutral == "grounded":
        ref = np.sinh(alpha * (1 - x)) / np.sinh(alpha)  # Greenwood ch. 12; Bewley
    else:
        ref = np.cosh(alpha * (1 - x)) / np.cosh(alpha)  # Greenwood ch. 12; Bewley
    assert np.max(np.abs(v - ref)) < 0.02


def test_reference_value_of_the_distribution():
    # REFERENCE.md (computed from Greenwood's formula): alpha = 10 -> u(0.1) = 0.368 U0, u(0.2) = 0.135 U0
    w = _uniform(100, 10.0)
    C = capacitance_matrix(w)
    free = np.arange(1, 100)
    v = np.zeros(101)
    v[0] = 1.0
    v[free] = np.linalg.solve(C[np.ix_(free, free)], -C[free, 0])
    assert v[10] == pytest.approx(0.368, abs=0.005)
    assert v[20] == pytest.approx(0.135, abs=0.005)


def _ladder_frequencies(w: WindingDesign, grounded_nodes) -> np.ndarray:
    net = build_network(w, None, grounded_nodes=grounded_nodes)
    f = net.lam.imag / (2 * np.pi)
    return np.sort(f[f > 1.0])


@pytest.mark.parametrize("n", [10, 40, 120])
def test_natural_frequencies_of_a_discrete_ladder(n):
    """Uniform lossless ladder without coupling, both ends grounded, vs its closed form (filter theory).

    Derivation: per section L, Cs; per node Cg. With both ends at 0 V the interior node voltages obey
    Cg v_j'' + Cs (2 v_j - v_{j-1} - v_{j+1})'' + (2 v_j - v_{j-1} - v_{j+1}) / L = 0. The modes
    v_j = sin(j m pi / N) turn the second difference into l_m v_j with l_m = 4 sin^2(m pi / 2N), so
    omega_m^2 (Cg + l_m Cs) = l_m / L, i.e. f_m = (1/2pi) sqrt(l_m / (L (Cg + l_m Cs))), m = 1..N-1.
    Tolerance 0.5 % (brief); the modal solution agrees to round-off.
    """
    Lt, Cg_t, Cs_t = 10e-3, 2e-9, 20e-12  # worked example of REFERENCE.md (Greenwood/Rudenberg section)
    w = WindingDesign.from_totals(n, total_inductance_H=Lt, total_ground_capacitance_F=Cg_t,
                                  total_series_capacitance_F=Cs_t, k0=0.0, series_resistance_ohm=0.0,
                                  damping=0.0, neutral="isolated")
    f = _ladder_frequencies(w, (0, n))
    L, Cg, Cs = Lt / n, Cg_t / n, Cs_t * n
    m = np.arange(1, n)
    lm = 4 * np.sin(m * np.pi / (2 * n)) ** 2
    f_ref = np.sqrt(lm / (L * (Cg + lm * Cs))) / (2 * np.pi)  # filter theory, derived in the docstring
    assert f.size == n - 1
    np.testing.assert_allclose(f, f_ref, rtol=5e-3)
    np.testing.assert_allclose(f, f_ref, rtol=1e-8)  # exact solution: agreement far inside the limit


def test_natural_frequencies_approach_the_continuous_winding():
    """40-section ladder vs the continuous winding f_k = 1 / (2 pi sqrt(Lt (Cg / beta_k^2 + Cs))).

    Rudenberg, Transient Performance of Electric Power Systems; Greenwood ch. 12: beta_k = k pi (neutral
    grounded), (2k - 1) pi / 2 (isolated). REFERENCE.md worked values (computed): Lt = 10 mH, Cg = 2 nF,
    Cs = 20 pF, grounded: 106.7, 189.3, 244.1 kHz; a 40-section ladder 106.6, 189.2, 243.8 kHz.
    """
    Lt, Cg_t, Cs_t = 10e-3, 2e-9, 20e-12
    k = np.arange(1, 4)
    for neutral, grounded, beta in (("grounded", (0, 40), k * np.pi),
                                    ("isolated", (0,), (2 * k - 1) * np.pi / 2)):
        w = WindingDesign.from_totals(40, total_inductance_H=Lt, total_ground_capacitance_F=Cg_t,
                                      total_series_capacitance_F=Cs_t, k0=0.0, series_resistance_ohm=0.0,
                                      damping=0.0, neutral="isolated")
        f = _ladder_frequencies(w, grounded)[:3]
        f_cont = 1 / (2 * np.pi * np.sqrt(Lt * (Cg_t / beta**2 + Cs_t)))  # Rudenberg; Greenwood
        np.testing.assert_allclose(f, f_cont, rtol=5e-3, err_msg=neutral)
        if neutral == "grounded":
            np.testing.assert_allclose(f_cont / 1e3, [106.7, 189.3, 244.1], atol=0.06)  # REFERENCE.md
            np.testing.assert_allclose(f / 1e3, [106.6, 189.2, 243.8], atol=0.06)  # REFERENCE.md
