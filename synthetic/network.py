"""Assembly of the winding + impulse-generator network for one topology: matrices in energy coordinates,
their eigen-decomposition and its check, cached by topology (see :mod:`synthetic.simulate` for the method).
"""

from __future__ import annotations

import collections
import functools
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import scipy.linalg as sla
from threadpoolctl import ThreadpoolController

from detector._validation import ShotcheckError

from .circuit import ChoppingGap, ImpulseGenerator
from .faults import Breakdown
from .winding import WindingDesign

__all__ = ["Network", "build_network", "capacitance_matrix", "clear_cache", "single_threaded", "MAX_RESIDUAL"]

#: Largest relative residual of a decomposition accepted without error.
MAX_RESIDUAL = 1e-7
_THREADS = ThreadpoolController()


def single_threaded(func: Callable[..., Any]) -> Callable[..., Any]:
    """Run ``func`` with one BLAS thread: the matrices here are small and threaded BLAS on a shared machine
    spends more time waiting than computing (measured 10x slower on 2 busy cores)."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        with _THREADS.limit(limits=1, user_api="blas"):
            return func(*args, **kwargs)

    return wrapper



# ============================================================================ network assembly
def capacitance_matrix(winding: WindingDesign) -> np.ndarray:
    """Nodal capacitance matrix of the winding alone [F], shape (n_nodes, n_nodes).

    diag(Cg) plus, for each section, Cs_k on the (k, k), (k+1, k+1) diagonal and -Cs_k off the diagonal.
    """
    n = winding.n_nodes
    C = np.diag(winding.Cg_F.astype(float))
    cs = winding.Cs_F
    i = np.arange(n - 1)
    C[i, i] += cs
    C[i + 1, i + 1] += cs
    C[i, i + 1] -= cs
    C[i + 1, i] -= cs
    return C


def _closed_key(b: Breakdown) -> tuple:
    return (b.node_a, b.node_b, b.arc_resistance_ohm)


class Network:
    """One topology of the test circuit: matrices, energy scaling and eigendecomposition.

    Built by :func:`build_network`. State order: node voltages of the free nodes (winding nodes in order,
    then the generator capacitor), then the inductive branch currents in ``branch_names`` order.

    Attributes
    ----------
    A : numpy.ndarray
        State matrix in physical units.
    lam : numpy.ndarray
        Kept eigenvalues [1/s] (one of each conjugate pair).
    residual : float
        max(|A_e V - V diag(lam)|) / |A_e| and |V^-1 V - I| of the decomposition.
    """

    def __init__(self, C: np.ndarray, G: np.ndarray, P: np.ndarray, Lb: np.ndarray, Rb: np.ndarray,
                 node_names: list, branch_names: list):
        self.C, self.G, self.P, self.Lb, self.Rb = C, G, P, Lb, Rb
        self.node_names = node_names
        self.branch_names = branch_names
        self.nv, self.nb = C.shape[0], Lb.shape[0]
        self.nx = self.nv + self.nb
        self._node_pos = {name: i for i, name in enumerate(node_names)}
        self._branch_pos = {name: i for i, name in enumerate(branch_names)}
        # energy coordinates xi = T x with T = blockdiag(Lc^T, Ll^T), C = Lc Lc^T, Lb = Ll Ll^T; there
        # A_e = [[-D1, -K], [K^T, -D2]], D1 = Lc^-1 G Lc^-T, D2 = Ll^-1 R Ll^-T (symmetric), K = Lc^-1 P Ll^-T,
        # assembled with that exact structure (skew coupling, symmetric losses)
        Lc = np.linalg.cholesky(C)
        Lci = sla.solve_triangular(Lc, np.eye(self.nv), lower=True)
        D1 = Lci @ G @ Lci.T
        Ae = np.zeros((self.nx, self.nx))
        Ae[: self.nv, : self.nv] = -0.5 * (D1 + D1.T)
        if self.nb:
            Ll = np.linalg.cholesky(Lb)
            Lli = sla.solve_triangular(Ll, np.eye(self.nb), lower=True)
            K = Lci @ P @ Lli.T
            D2 = Lli @ Rb @ Lli.T
            Ae[: self.nv, self.nv:] = -K
            Ae[self.nv:, : self.nv] = K.T
            Ae[self.nv:, self.nv:] = -0.5 * (D2 + D2.T)
        else:
            Ll = Lli = np.zeros((0, 0))
        T = sla.block_diag(Lc.T, Ll.T)
        Tinv = sla.block_diag(Lci.T, Lli.T)
        self.A = Tinv @ Ae @ T
        Cinv = Lci.T @ Lci
        lam, V = sla.eig(Ae, overwrite_a=False, check_finite=False)
        W = np.linalg.solve(V, np.eye(self.nx))
        scale = max(np.abs(Ae).max(), 1e-300)
        res1 = np.abs(Ae @ V - V * lam).max() / scale / max(np.abs(V).max(), 1e-300)
        res2 = np.abs(W @ V - np.eye(self.nx)).max()
        self.residual = float(max(res1, res2))
        if not np.isfinite(self.residual) or self.residual > MAX_RESIDUAL:
            raise ShotcheckError(
                f"the network's modal decomposition is ill-conditioned (residual {self.residual:.1e}); "
                "a near-critically damped mode: change a resistance slightly"
            )
        sel = lam.imag >= 0.0
        self.lam = lam[sel]
        self.weight = np.where(self.lam.imag > 0, 2.0, 1.0)
        self.Vx = (Tinv @ V)[:, sel]  # physical state from modal coordinates
        self.Wx = (W @ T)[sel, :]  # modal coordinates from physical state
        self.Cinv = Cinv
        self.T, self.Tinv = T, Tinv
        self.Ae = Ae
        self.lam_all = lam

    # ----------------------------------------------------------------- rows and states
    def node_state(self, name: object) -> int | None:
        """State index of a node voltage (``k`` winding node, ``'gen'``), None if grounded/absent."""
        return self._node_pos.get(name)

    def branch_state(self, name: object) -> int | None:
        """State index of an inductive branch current (``('sec', k)``, ``'lead'``, ``'gap'``, ``'mag'``)."""
        i = self._branch_pos.get(name)
        return None if i is None else self.nv + i

    def row_voltage(self, a: int | str | None, b: int | str | None = None) -> np.ndarray:
        """Physical row giving v_a - v_b (None = ground)."""
        r = np.zeros(self.nx)
        for name, sign in ((a, 1.0), (b, -1.0)):
            if name is None:
                continue
            i = self.node_state(name)
            if i is not None:
                r[i] += sign
        return r

    def modal_row(self, row: np.ndarray, derivative: bool = False) -> np.ndarray:
        """Modal coefficients (conjugate-pair weights included) of a physical output row.

        For ``derivative`` the row is applied to dx/dt; its direct term for injected currents is given by
        :meth:`feedthrough`.
        """
        m = (row @ self.Vx) * self.weight
        if derivative:
            m = m * self.lam
        return m

    def injection(self, node: int | tuple[int, int]) -> np.ndarray:
        """Modal input vector beta of a unit current injected into winding node ``node``.

        A pair ``(a, b)`` injects the current into ``a`` and draws it from ``b`` (a source between two
        nodes: no net charge reaches ground).
        """
        if isinstance(node, tuple):
            return self.injection(node[0]) - self.injection(node[1])
        i = self.node_state(node)
        b = np.zeros(self.nx)
        if i is not None:
            b[: self.nv] = self.Cinv[:, i]
        return self.Wx @ b

    def feedthrough(self, row: np.ndarray, node: int | tuple[int, int]) -> float:
        """Direct term of a derivative row for a unit current injected into ``node``: row . (A-input)."""
        if isinstance(node, tuple):
            return self.feedthrough(row, node[0]) - self.feedthrough(row, node[1])
        i = self.node_state(node)
        if i is None:
            return 0.0
        return float(row[: self.nv] @ self.Cinv[:, i])

    def to_modal(self, x: np.ndarray) -> np.ndarray:
        """Modal coordinates (kept modes) of a physical state."""
        return self.Wx @ x

    def to_state(self, z: np.ndarray) -> np.ndarray:
        """Physical state from kept-mode coordinates."""
        return np.real(self.Vx @ (self.weight * z))

    def energy_J(self, x: np.ndarray) -> np.ndarray:
        """Stored energy 1/2 v^T C v + 1/2 i^T L i [J] of states ``x`` (shape (nx,) or (nx, m))."""
        v, i = x[: self.nv], x[self.nv:]
        e = 0.5 * np.einsum("i...,ij,j...->...", v, self.C, v)
        if self.nb:
            e = e + 0.5 * np.einsum("i...,ij,j...->...", i, self.Lb, i)
        return e

    def response(self, x0: np.ndarray, times_s: np.ndarray) -> np.ndarray:
        """Free response x(t) [SI] from ``x0`` at arbitrary times ``times_s`` (shape (nx, m))."""
        z0 = self.to_modal(x0)
        E = np.exp(np.outer(self.lam, np.asarray(times_s, dtype=float)))
        return np.real(self.Vx @ ((self.weight * z0)[:, None] * E))

    def transform_state(self, x: np.ndarray, other: Network) -> np.ndarray:
        """Map a state of ``other`` into this topology (same nodes; branches matched by name, new ones 0)."""
        y = np.zeros(self.nx)
        for name, i in self._node_pos.items():
            j = other.node_state(name)
            if j is not None:
                y[i] = x[j]
        for name, i in self._branch_pos.items():
            j = other.branch_state(name)
            if j is not None:
                y[self.nv + i] = x[j]
        return y


@single_threaded
def build_network(winding: WindingDesign | None, generator: ImpulseGenerator | None = None, *,
                  chop: ChoppingGap | None = None, closed: Sequence[Breakdown] = (),
                  grounded_nodes: Sequence[int] = ()) -> Network:
    """Assemble one topology (uncached).

    Parameters
    ----------
    winding : WindingDesign or None
        None: the generator on its load capacitance alone (one terminal node).
    generator : ImpulseGenerator or None
        None: nothing connected at the line terminal.
    chop : ChoppingGap or None
        A closed chopping gap at the terminal.
    closed : sequence of Breakdown
        Closed arcs.
    grounded_nodes : sequence of int
        Winding nodes tied solidly to ground (removed from the state), for reference checks.

    Returns
    -------
    Network
    """
    if winding is None:
        if generator is None:
            raise ShotcheckError("build_network needs a winding or a generator")
        Cw = np.zeros((1, 1))
        n_w = 1
    else:
        Cw = capacitance_matrix(winding)
        n_w = winding.n_nodes
    has_gen = generator is not None
    nn = n_w + (1 if has_gen else 0)
    gi = n_w  # generator node index in the full list
    C = np.zeros((nn, nn))
    C[:n_w, :n_w] = Cw
    G = np.zeros((nn, nn))

    def conductance(a: int, b: int | None, g: float) -> None:
        G[a, a] += g
        if b is not None:
            G[b, b] += g
            G[a, b] -= g
            G[b, a] -= g

    branches: list[tuple[object, int, int | None, float]] = []  # name, from, to, R
    Lblocks: list[np.ndarray] = []
    if winding is not None:
        n = winding.n_sections
        gp = 1.0 / winding.Rp_ohm  # 0 where no damping resistor
        k = np.arange(n)
        np.add.at(G, (k, k), gp)
        np.add.at(G, (k + 1, k + 1), gp)
        np.add.at(G, (k, k + 1), -gp)
        np.add.at(G, (k + 1, k), -gp)
        if winding.neutral == "grounded":
            conductance(n, None, 1.0 / winding.shunt_ohm)
        for k in range(n):
            branches.append((("sec", k), k, k + 1, float(winding.R_ohm[k])))
        Lblocks.append(winding.inductance_matrix())
        if np.isfinite(winding.magnetising_H):
            branches.append(("mag", 0, None, 0.0))
            Lblocks.append(np.array([[winding.magnetising_H]]))
        for b in closed:
            for node in (b.node_a, b.node_b):
                if node is not None and node > n:
                    raise ShotcheckError(f"Breakdown node {node} is outside the winding's nodes 0..{n}")
            conductance(b.node_a, b.node_b, 1.0 / b.arc_resistance_ohm)
    if has_gen:
        C[0, 0] += generator.C_load_F
        C[gi, gi] += generator.C1_F
        if np.isfinite(generator.R_tail_ohm):
            conductance(gi, None, 1.0 / generator.R_tail_ohm)
        if generator.L_lead_H > 0:
            branches.append(("lead", gi, 0, generator.R_front_ohm))
            Lblocks.append(np.array([[generator.L_lead_H]]))
        else:
            conductance(gi, 0, 1.0 / generator.R_front_ohm)
    if chop is not None:
        if chop.lead_inductance_H > 0:
            branches.append(("gap", 0, None, chop.arc_resistance_ohm))
            Lblocks.append(np.array([[chop.lead_inductance_H]]))
        else:
            conductance(0, None, 1.0 / chop.arc_resistance_ohm)
    nb = len(branches)
    P = np.zeros((nn, nb))
    for j, (_, a, b, _) in enumerate(branches):
        P[a, j] += 1.0
        if b is not None:
            P[b, j] -= 1.0
    Lb = sla.block_diag(*Lblocks) if Lblocks else np.zeros((0, 0))
    Rb = np.diag([br[3] for br in branches]) if nb else np.zeros((0, 0))
    names: list = list(range(n_w)) + (["gen"] if has_gen else [])
    keep = np.array([i for i in range(nn) if not (i < n_w and i in set(grounded_nodes))], dtype=int)
    if np.any(np.diag(C)[keep] <= 0):
        raise ShotcheckError("every free node needs a positive capacitance to ground")
    return Network(C[np.ix_(keep, keep)], G[np.ix_(keep, keep)], P[keep], Lb, Rb,
                   [names[i] for i in keep], [br[0] for br in branches])


_CACHE: collections.OrderedDict = collections.OrderedDict()
_CACHE_SIZE = 48


def clear_cache() -> None:
    """Forget cached decompositions."""
    _CACHE.clear()


def _network(winding: WindingDesign | None, generator: ImpulseGenerator, chop: ChoppingGap | None,
             closed: Sequence[Breakdown]) -> Network:
    key = (
        None if winding is None else winding.key(),
        generator.key(),
        None if chop is None else (chop.arc_resistance_ohm, chop.lead_inductance_H),
        tuple(sorted(_closed_key(b) for b in closed)),
    )
    net = _CACHE.get(key)
    if net is None:
        net = build_network(winding, generator, chop=chop, closed=closed)
        _CACHE[key] = net
        if len(_CACHE) > _CACHE_SIZE:
            _CACHE.popitem(last=False)
    else:
        _CACHE.move_to_end(key)
    return net
