"""Insulation faults that the simulation can apply to a winding during the full-level shot.

API (agreed; extend, do not rename)
-----------------------------------
``Breakdown(node_a, node_b, breakdown_voltage_V, arc_resistance_ohm, extinguish_at_current_zero=False)``
    A gap between two winding nodes (``node_b=None``: to ground) that closes, as a resistive arc, at the
    first instant |v_a - v_b| >= breakdown_voltage_V; with ``extinguish_at_current_zero`` it opens again at
    the next zero of its current (and may strike again).
``DischargeTrain(node, inception_V, charge_C, width_s, max_pulses, repetition_s)``
    Short current pulses injected into ``node`` (from ground) while |v_node| >= inception_V, at most
    ``max_pulses``, one every ``repetition_s``; the topology is unchanged.
``pulse_time_constants(width_s) -> (tau1_s, tau2_s)``, ``pulse_current_A(t_s, charge_C, width_s)``.

Pulse shape: i(t) = Q / (tau1 - tau2) * (exp(-t / tau1) - exp(-t / tau2)) for t >= 0, tau2 = tau1 / 10, whose
integral is exactly Q and whose full width at half maximum equals ``width_s`` (tau1 = width_s / 1.0066...,
computed at import). The polarity follows the node voltage at the pulse instant.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from scipy.optimize import brentq

from detector._validation import ShotcheckError, check_range

__all__ = ["Breakdown", "DischargeTrain", "pulse_time_constants", "pulse_current_A", "PULSE_TAU_RATIO"]

#: tau1 / tau2 of the double-exponential discharge pulse.
PULSE_TAU_RATIO = 10.0


def _fwhm_unit() -> float:
    r = PULSE_TAU_RATIO

    def shape(x: float) -> float:
        return np.exp(-x) - np.exp(-r * x)

    x_pk = np.log(r) / (r - 1.0)
    half = 0.5 * shape(x_pk)
    a = brentq(lambda x: shape(x) - half, 0.0, x_pk, xtol=1e-15)
    b = brentq(lambda x: shape(x) - half, x_pk, 50.0, xtol=1e-15)
    return float(b - a)


_FWHM_PER_TAU1 = _fwhm_unit()


def pulse_time_constants(width_s: float) -> tuple[float, float]:
    """Return (tau1, tau2) [s] of a discharge pulse whose full width at half maximum is ``width_s`` [s]."""
    tau1 = float(width_s) / _FWHM_PER_TAU1
    return tau1, tau1 / PULSE_TAU_RATIO


def pulse_current_A(t_s: np.ndarray, charge_C: float, width_s: float) -> np.ndarray:
    """Current [A] of one discharge pulse starting at t = 0, for times ``t_s`` [s] (zero before 0)."""
    tau1, tau2 = pulse_time_constants(width_s)
    t = np.asarray(t_s, dtype=float)
    s = np.maximum(t, 0.0)
    i = charge_C / (tau1 - tau2) * (np.exp(-s / tau1) - np.exp(-s / tau2))
    return np.where(t >= 0, i, 0.0)


def _check_node(name: str, value: object) -> int:
    try:
        k = int(value)  # type: ignore[call-overload]
    except (TypeError, ValueError):
        raise ShotcheckError(f"{name} must be a node index, got {value!r}") from None
    if k != value or k < 0:
        raise ShotcheckError(f"{name} must be a node index >= 0, got {value!r}")
    return k


@dataclasses.dataclass(frozen=True)
class Breakdown:
    """Flashover of a gap between two nodes, or from a node to ground.

    Parameters
    ----------
    node_a : int
        First winding node.
    node_b : int or None
        Second winding node; None means ground.
    breakdown_voltage_V : float
        Gap closes at the first instant |v_a - v_b| reaches this value [V], > 0.
    arc_resistance_ohm : float
        Resistance of the arc once closed [ohm], > 0 (0.01-50 ohm is the useful range).
    extinguish_at_current_zero : bool
        Open the arc at the next zero of its current; it may strike again.
    """

    node_a: int
    node_b: int | None
    breakdown_voltage_V: float
    arc_resistance_ohm: float = 1.0
    extinguish_at_current_zero: bool = False

    def __post_init__(self) -> None:
        a = _check_node("Breakdown.node_a", self.node_a)
        object.__setattr__(self, "node_a", a)
        if self.node_b is not None:
            b = _check_node("Breakdown.node_b", self.node_b)
            if b == a:
                raise ShotcheckError(f"Breakdown.node_b must differ from node_a, both are {a}")
            object.__setattr__(self, "node_b", b)
        object.__setattr__(self, "breakdown_voltage_V", check_range(
            "Breakdown.breakdown_voltage_V", self.breakdown_voltage_V, 0.0, None, low_inclusive=False, unit="V"))
        object.__setattr__(self, "arc_resistance_ohm", check_range(
            "Breakdown.arc_resistance_ohm", self.arc_resistance_ohm, 0.0, None, low_inclusive=False, unit="ohm"))

    @property
    def label(self) -> str:
        """Short text such as ``'12-13'`` or ``'12-ground'``."""
        return f"{self.node_a}-{'ground' if self.node_b is None else self.node_b}"


@dataclasses.dataclass(frozen=True)
class DischargeTrain:
    """Partial discharges: current pulses while the stress of a gap exceeds inception.

    Parameters
    ----------
    node : int
        Winding node receiving the pulses.
    inception_V : float
        Pulses occur only while the gap voltage |v_node - v_node_b| (|v_node| for a discharge to
        ground) is at least inception_V [V], > 0.
    charge_C : float
        Charge of each pulse [C], > 0 (pC to tens of nC).
    width_s : float
        Full width at half maximum of each current pulse [s] (5-200 ns useful).
    max_pulses : int
        Largest number of pulses in one shot, >= 1.
    repetition_s : float
        Interval between pulses [s], > 0; first pulse at the inception instant.
    node_b : int or None
        Other end of the discharging gap (an adjacent turn or disc): the pulse current flows from
        ``node_b`` to ``node`` and no net charge reaches ground. None: a discharge to ground.
    """

    node: int
    inception_V: float
    charge_C: float
    width_s: float = 20e-9
    max_pulses: int = 10
    repetition_s: float = 1e-6
    node_b: int | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "node", _check_node("DischargeTrain.node", self.node))
        if self.node_b is not None:
            object.__setattr__(self, "node_b", _check_node("DischargeTrain.node_b", self.node_b))
            if self.node_b == self.node:
                raise ShotcheckError("DischargeTrain.node_b must differ from node")
        for name, unit in (("inception_V", "V"), ("charge_C", "C"), ("width_s", "s"), ("repetition_s", "s")):
            v = check_range(f"DischargeTrain.{name}", getattr(self, name), 0.0, None, low_inclusive=False,
                            unit=unit)
            object.__setattr__(self, name, v)
        if int(self.max_pulses) != self.max_pulses or self.max_pulses < 1:
            raise ShotcheckError(f"DischargeTrain.max_pulses must be a whole number >= 1, got {self.max_pulses!r}")
        object.__setattr__(self, "max_pulses", int(self.max_pulses))
