"""Lumped ladder model of a transformer winding for impulse simulation.

API (agreed with the dataset side; extend, do not rename)
---------------------------------------------------------
``WindingDesign`` (frozen dataclass)
    Per-section arrays ``L_H`` (n,), ``R_ohm`` (n,), ``Rp_ohm`` (n,) parallel damping (``np.inf`` = none),
    ``Cs_F`` (n,), node ground capacitances ``Cg_F`` (n+1,) (half values at the two ends), mutual coupling
    factor ``k0`` (M_jk = k0**|p_j - p_k| sqrt(L_j L_k), p = section positions, by default 0..n-1),
    ``turns`` (n,), ``neutral`` in {"grounded", "isolated"}, ``shunt_ohm``, ``magnetising_H``, ``name``,
    and (added) ``positions`` (n,) section centres in section units (None = 0..n-1).
    Properties ``n_sections``, ``n_nodes``, ``alpha``, ``total_turns``; methods ``node_position(node)``,
    ``inductance_matrix()``, ``split_section(section, turns_in_first) -> (design, new_node)``,
    ``to_spice(generator, chop=None, faults=(), *, t_end_s, dt_s, ...) -> str``.
``WindingDesign.from_totals(n_sections, *, total_inductance_H, total_ground_capacitance_F,
total_series_capacitance_F=None, alpha=None, turns_per_section=10, k0=0.5, series_resistance_ohm=None,
damping=0.05, neutral="grounded", shunt_ohm=1.0, magnetising_H=np.inf, name="")``

Model
-----
Node 0 is the line terminal, node n the neutral end. Section k (0-based) joins nodes k and k+1: a self
inductance ``L_H[k]`` in series with ``R_ohm[k]``, shunted by the series capacitance ``Cs_F[k]`` and by the
damping resistance ``Rp_ohm[k]``. Node j has ``Cg_F[j]`` to ground. The mutual coupling between sections
decays geometrically with their distance, ``k0 ** |p_j - p_k|``; this is the exponential (Ornstein-Uhlenbeck)
kernel, positive definite for any set of distinct positions when 0 <= k0 < 1, so the inductance matrix stays
positive definite after sections are split.
"""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING, Any

import numpy as np

from detector._validation import ShotcheckError, check_option, check_range

if TYPE_CHECKING:  # pragma: no cover
    from .circuit import ChoppingGap, ImpulseGenerator

__all__ = ["WindingDesign", "NEUTRAL_CONNECTIONS"]

#: Allowed neutral-end connections.
NEUTRAL_CONNECTIONS = ("grounded", "isolated")


def _array(name: str, value: Any, n: int, *, positive: bool, allow_inf: bool = False,
           allow_zero: bool = False) -> np.ndarray:
    arr = np.array(value, dtype=np.float64, copy=True)
    if arr.ndim == 0:
        arr = np.full(n, float(arr))
    if arr.shape != (n,):
        raise ShotcheckError(f"WindingDesign.{name} must have shape ({n},), got {arr.shape}")
    bad = np.isnan(arr) | (np.isinf(arr) & ~allow_inf) | (arr < 0)
    if positive and not allow_zero:
        bad |= arr == 0
    if bad.any():
        i = int(np.argmax(bad))
        expect = "> 0" if positive and not allow_zero else ">= 0"
        if allow_inf:
            expect += " (np.inf allowed)"
        raise ShotcheckError(f"WindingDesign.{name}[{i}] must be {expect}, got {arr[i]!r}")
    arr.flags.writeable = False
    return arr


@dataclasses.dataclass(frozen=True, eq=False)
class WindingDesign:
    """Ladder network of one winding (all values SI).

    Parameters
    ----------
    L_H : array_like, shape (n,)
        Self inductance of each section [H].
    R_ohm : array_like, shape (n,)
        Series resistance of each section [ohm].
    Rp_ohm : array_like, shape (n,)
        Damping resistance across each section [ohm]; ``np.inf`` for none.
    Cs_F : array_like, shape (n,)
        Series capacitance across each section [F].
    Cg_F : array_like, shape (n+1,)
        Ground capacitance of each node [F], all > 0 (ends usually carry half a section's share).
    k0 : float
        Coupling factor between neighbouring sections, 0 <= k0 < 1.
    turns : array_like, shape (n,)
        Turns of each section (positive integers); used for positions along the winding.
    neutral : {'grounded', 'isolated'}
        Neutral-end connection. Grounded means through the current shunt ``shunt_ohm``.
    shunt_ohm : float
        Neutral current shunt [ohm], > 0.
    magnetising_H : float
        Inductance from the line terminal to ground for the core's magnetising branch [H]; ``np.inf``: none.
    name : str
        Free text.
    positions : array_like, shape (n,), optional
        Section centres in section units for the coupling law; None means 0, 1, ..., n-1.
    """

    L_H: np.ndarray
    R_ohm: np.ndarray
    Rp_ohm: np.ndarray
    Cs_F: np.ndarray
    Cg_F: np.ndarray
    k0: float = 0.5
    turns: np.ndarray | None = None
    neutral: str = "grounded"
    shunt_ohm: float = 1.0
    magnetising_H: float = np.inf
    name: str = ""
    positions: np.ndarray | None = None

    def __post_init__(self) -> None:
        L = np.asarray(self.L_H, dtype=np.float64)
        if L.ndim != 1 or L.size < 1:
            raise ShotcheckError(f"WindingDesign.L_H must be a 1-D array with >= 1 section, got shape {L.shape}")
        n = L.size
        set_ = object.__setattr__
        set_(self, "L_H", _array("L_H", L, n, positive=True))
        set_(self, "R_ohm", _array("R_ohm", self.R_ohm, n, positive=False))
        set_(self, "Rp_ohm", _array("Rp_ohm", self.Rp_ohm, n, positive=True, allow_inf=True))
        set_(self, "Cs_F", _array("Cs_F", self.Cs_F, n, positive=True))
        set_(self, "Cg_F", _array("Cg_F", self.Cg_F, n + 1, positive=True))
        turns = np.full(n, 1.0) if self.turns is None else self.turns
        t = _array("turns", turns, n, positive=True)
        if np.any(t != np.round(t)):
            raise ShotcheckError("WindingDesign.turns must be whole numbers of turns")
        set_(self, "turns", t)
        pos = np.arange(n, dtype=np.float64) if self.positions is None else self.positions
        p = np.array(pos, dtype=np.float64)
        if p.shape != (n,) or not np.all(np.isfinite(p)) or np.any(np.diff(p) <= 0):
            raise ShotcheckError(
                f"WindingDesign.positions must be {n} finite, strictly increasing values, got {pos!r}"
            )
        p.flags.writeable = False
        set_(self, "positions", p)
        set_(self, "k0", check_range("WindingDesign.k0", self.k0, 0.0, 1.0, high_inclusive=False))
        check_option("WindingDesign.neutral", self.neutral, NEUTRAL_CONNECTIONS)
        set_(self, "shunt_ohm", check_range("WindingDesign.shunt_ohm", self.shunt_ohm, 0.0, None,
                                            low_inclusive=False, unit="ohm"))
        mag = float(self.magnetising_H)
        if not (mag > 0):
            raise ShotcheckError(f"WindingDesign.magnetising_H must be > 0 or np.inf, got {self.magnetising_H!r}")
        set_(self, "magnetising_H", mag)

    # ------------------------------------------------------------------ construction
    @classmethod
    def from_totals(
        cls,
        n_sections: int,
        *,
        total_inductance_H: float,
        total_ground_capacitance_F: float,
        total_series_capacitance_F: float | None = None,
        alpha: float | None = None,
        turns_per_section: int | np.ndarray = 10,
        k0: float = 0.5,
        series_resistance_ohm: float | None = None,
        damping: float = 0.05,
        neutral: str = "grounded",
        shunt_ohm: float = 1.0,
        magnetising_H: float = np.inf,
        name: str = "",
    ) -> WindingDesign:
        """Build a uniform winding from its terminal totals.

        Parameters
        ----------
        n_sections : int
            Number of sections, 1..1000 (10-120 is the useful range).
        total_inductance_H : float
            Inductance of the whole winding seen between its two ends with all sections in series [H],
            i.e. the sum of every entry of the inductance matrix.
        total_ground_capacitance_F : float
            Sum of the node ground capacitances [F].
        total_series_capacitance_F : float, optional
            Series capacitance of the chain, 1 / sum(1 / Cs_k) [F]. Give this or ``alpha``.
        alpha : float, optional
            Distribution constant sqrt(Cg_total / Cs_total); sets the series capacitance.
        turns_per_section : int or array_like
            Turns of every section.
        k0 : float
            Coupling factor of neighbouring sections.
        series_resistance_ohm : float, optional
            Total series resistance [ohm] (at impulse frequencies, far above the DC value). None: chosen so
            that the resistive envelope 2 L / R of the winding is 25 us (a modelling choice).
        damping : float
            Dimensionless damping of each section's own L-Cs resonance by its parallel resistance:
            Rp_k = sqrt(L_k / Cs_k) / damping; 0 means no parallel resistance.
        neutral, shunt_ohm, magnetising_H, name
            As in the class.

        Returns
        -------
        WindingDesign
        """
        n = int(n_sections)
        if n != n_sections or not 1 <= n <= 1000:
            raise ShotcheckError(f"n_sections must be a whole number in [1, 1000], got {n_sections!r}")
        Lt = check_range("total_inductance_H", total_inductance_H, 0.0, None, low_inclusive=False, unit="H")
        Cg_tot = check_range("total_ground_capacitance_F", total_ground_capacitance_F, 0.0, None,
                             low_inclusive=False, unit="F")
        if (total_series_capacitance_F is None) == (alpha is None):
            raise ShotcheckError("give exactly one of total_series_capacitance_F and alpha")
        if alpha is not None:
            a = check_range("alpha", alpha, 0.0, None, low_inclusive=False)
            Cs_tot = Cg_tot / a**2
        else:
            Cs_tot = check_range("total_series_capacitance_F", total_series_capacitance_F, 0.0, None,
                                 low_inclusive=False, unit="F")
        k0 = check_range("k0", k0, 0.0, 1.0, high_inclusive=False)
        d = np.arange(1, n)
        coupling_sum = n + 2.0 * np.sum((n - d) * k0**d)
        Ls = Lt / coupling_sum
        if series_resistance_ohm is None:
            R_tot = 2.0 * Lt / 25e-6
        else:
            R_tot = check_range("series_resistance_ohm", series_resistance_ohm, 0.0, None, unit="ohm")
        damping = check_range("damping", damping, 0.0, None)
        Cs = Cs_tot * n
        Rp = np.inf if damping == 0 else np.sqrt(Ls / Cs) / damping
        cg = np.full(n + 1, Cg_tot / n)
        cg[[0, -1]] *= 0.5
        return cls(
            L_H=np.full(n, Ls), R_ohm=np.full(n, R_tot / n), Rp_ohm=np.full(n, Rp), Cs_F=np.full(n, Cs),
            Cg_F=cg, k0=k0, turns=np.broadcast_to(np.asarray(turns_per_section, dtype=float), (n,)),
            neutral=neutral, shunt_ohm=shunt_ohm, magnetising_H=magnetising_H, name=name,
        )

    # ------------------------------------------------------------------ properties
    @property
    def n_sections(self) -> int:
        """Number of sections."""
        return int(self.L_H.size)

    @property
    def n_nodes(self) -> int:
        """Number of nodes, ``n_sections + 1``."""
        return self.n_sections + 1

    @property
    def series_capacitance_F(self) -> float:
        """Series capacitance of the whole chain, 1 / sum(1 / Cs_k) [F]."""
        return float(1.0 / np.sum(1.0 / self.Cs_F))

    @property
    def alpha(self) -> float:
        """Distribution constant sqrt(sum Cg / series capacitance of the chain) (dimensionless)."""
        return float(np.sqrt(np.sum(self.Cg_F) / self.series_capacitance_F))

    @property
    def total_turns(self) -> int:
        """Total number of turns."""
        return int(np.sum(self.turns))

    @property
    def total_inductance_H(self) -> float:
        """Inductance between the two ends with all sections in series (sum of the matrix) [H]."""
        return float(np.sum(self.inductance_matrix()))

    def node_position(self, node: int) -> float:
        """Position of a node along the winding by turns: 0 at the line end, 1 at the neutral end.

        Parameters
        ----------
        node : int
            Node index, 0..n_sections.

        Returns
        -------
        float
        """
        node = self._check_node("node", node)
        return float(np.sum(self.turns[:node]) / np.sum(self.turns))

    def node_positions(self) -> np.ndarray:
        """Positions (0..1, by turns) of all nodes, shape (n_nodes,)."""
        c = np.concatenate(([0.0], np.cumsum(self.turns)))
        return c / c[-1]

    def _check_node(self, name: str, node: int) -> int:
        try:
            k = int(node)
        except (TypeError, ValueError):
            raise ShotcheckError(f"{name} must be a node index, got {node!r}") from None
        if k != node or not 0 <= k <= self.n_sections:
            raise ShotcheckError(f"{name} must be a node index in [0, {self.n_sections}], got {node!r}")
        return k

    def inductance_matrix(self) -> np.ndarray:
        """Section inductance matrix M_jk = k0**|p_j - p_k| sqrt(L_j L_k) [H], shape (n, n)."""
        p = self.positions
        s = np.sqrt(self.L_H)
        if self.k0 == 0.0:
            return np.diag(self.L_H.copy())
        k = self.k0 ** np.abs(p[:, None] - p[None, :])
        return k * s[:, None] * s[None, :]

    # ------------------------------------------------------------------ editing
    def split_section(self, section: int, turns_in_first: int) -> tuple[WindingDesign, int]:
        """Split one section into two parts in proportion to turns.

        The part nearer the line end gets ``turns_in_first`` turns (fraction f of the section). Parts:
        self inductances in the ratio f^2 : (1-f)^2 with their sum plus twice their mutual inductance equal to
        the section's L; series and damping resistances in proportion f : 1-f; series capacitances Cs/f and
        Cs/(1-f) (their series combination is Cs); the section's ground capacitance share c (its lumped
        halves at its two ends) is redistributed to f c/2, c/2, (1-f) c/2 on the old first node, the new node
        and the old second node, keeping the total. The parts sit at positions p - 1/2 + f/2 and
        p + f/2 in section units, so their mutual coupling is k0**0.5 and the matrix stays positive definite.

        Parameters
        ----------
        section : int
            Section index, 0..n_sections-1.
        turns_in_first : int
            Turns of the first part, 1..turns[section]-1.

        Returns
        -------
        design : WindingDesign
            Design with n_sections + 1 sections.
        new_node : int
            Index of the new internal node (``section + 1``).
        """
        n = self.n_sections
        try:
            k = int(section)
        except (TypeError, ValueError):
            raise ShotcheckError(f"section must be an index, got {section!r}") from None
        if k != section or not 0 <= k < n:
            raise ShotcheckError(f"section must be in [0, {n - 1}], got {section!r}")
        nt = int(self.turns[k])
        if int(turns_in_first) != turns_in_first or not 1 <= turns_in_first <= nt - 1:
            raise ShotcheckError(
                f"turns_in_first must be a whole number in [1, {nt - 1}] for section {k} of {nt} turns, "
                f"got {turns_in_first!r}"
            )
        f = turns_in_first / nt
        kin = self.k0**0.5
        L = self.L_H[k]
        q = f**2 + (1 - f) ** 2 + 2 * kin * f * (1 - f)
        La, Lb = L * f**2 / q, L * (1 - f) ** 2 / q

        def ins(arr: np.ndarray, a: float, b: float) -> np.ndarray:
            return np.concatenate((arr[:k], [a, b], arr[k + 1:]))

        w0 = 2.0 if k == 0 else 1.0
        w1 = 2.0 if k + 1 == n else 1.0
        c = min(self.Cg_F[k] * w0, self.Cg_F[k + 1] * w1)
        cg = np.concatenate((self.Cg_F[: k + 1], [0.5 * c], self.Cg_F[k + 1:]))
        cg[k] -= (1 - f) * c / 2
        cg[k + 2] -= f * c / 2
        p = self.positions[k]
        rp = self.Rp_ohm[k]
        new = dataclasses.replace(
            self,
            L_H=ins(self.L_H, La, Lb),
            R_ohm=ins(self.R_ohm, self.R_ohm[k] * f, self.R_ohm[k] * (1 - f)),
            Rp_ohm=ins(self.Rp_ohm, rp * f, rp * (1 - f)),
            Cs_F=ins(self.Cs_F, self.Cs_F[k] / f, self.Cs_F[k] / (1 - f)),
            Cg_F=cg,
            turns=ins(self.turns, float(turns_in_first), float(nt - turns_in_first)),
            positions=ins(self.positions, p - 0.5 + f / 2, p + f / 2),
        )
        return new, k + 1

    # ------------------------------------------------------------------ export
    def to_spice(
        self,
        generator: ImpulseGenerator,
        chop: ChoppingGap | None = None,
        faults: tuple = (),
        *,
        t_end_s: float,
        dt_s: float,
        switch_times_s: tuple[float, ...] | None = None,
        level: float = 1.0,
    ) -> str:
        """Return an ngspice netlist of this winding with its test circuit; see :func:`synthetic.spice.netlist`."""
        from .spice import netlist

        return netlist(self, generator, chop=chop, faults=faults, t_end_s=t_end_s, dt_s=dt_s,
                       switch_times_s=switch_times_s, level=level)

    def key(self) -> tuple:
        """Hashable content key (used to cache network decompositions)."""
        return (
            self.L_H.tobytes(), self.R_ohm.tobytes(), self.Rp_ohm.tobytes(), self.Cs_F.tobytes(),
            self.Cg_F.tobytes(), self.k0, self.positions.tobytes(), self.neutral, self.shunt_ohm,
            self.magnetising_H,
        )
