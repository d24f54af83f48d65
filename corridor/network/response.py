"""Response of assets to induced EMF: batched distributed-source transmission lines.

Every asset (pipeline, fence, rail, telecom cable) is a chain of uniform
segments, each a lossy earth-return transmission line with series impedance
``z`` [Ω/m], shunt admittance ``y`` [S/m] and a longitudinal EMF (E. D.
Sunde, Earth Conduction Effects in Transmission Systems, 1968)::

    dV/dx = -z·I + E(x),     dI/dx = -y·V

Each segment is replaced by its *exact* equivalent pi and its distributed EMF
by the exact nodal (Norton) injections, so node voltages are exact for a
piecewise-uniform EMF whatever the segment length. All chains of a run are
stacked into one tridiagonal nodal-admittance system, factorised once (LU
without pivoting: the pivots are the input admittances to earth of each chain
up to a node, which a passive lossy chain keeps away from zero; a zero or
non-finite pivot is refused) and solved for every EMF case and the Thevenin
impedances by a compiled loop (:mod:`corridor.network._kernels`); no dense
matrix, no general sparse LU, no Python loop per node or per asset.

No path to earth
----------------
A part of a chain with no admittance to earth at all (y = 0, no ground, no
grounded or continuing end, between two breaks or ends) has an undefined
potential; the solver refuses it with :class:`corridor.errors.InputError`.
Real conductors always have some capacitance to earth: callers should give
above-ground wires y = jωC with C ≈ 10 pF/m (from memory) rather than 0.

Layout
------
The batch (:class:`corridor.network.chain_batch.ChainBatch`, re-exported here
with the line constants) is laid out as follows.
Segments of all chains are concatenated; ``chain_start[c]`` is the index of
the first segment of chain ``c`` (chains are contiguous and in order, each
with at least one segment). A chain of ``n`` segments has ``n + 1`` nodes;
nodes are concatenated likewise, so segment ``s`` of chain ``c`` runs from
node ``s + c`` to node ``s + c + 1``.

Sign conventions
----------------
The EMF of a segment and its longitudinal current are positive in the chain
direction (from the chain's first node to its last). Node voltages are to
remote earth.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from corridor.errors import InputError
from corridor.network import _kernels
from corridor.network.chain_batch import (
    ChainBatch,
    _ids,
    matched_termination_admittance,
    propagation_constant,
)

logger = logging.getLogger(__name__)

__all__ = [
    "ChainBatch",
    "ChainSolution",
    "ChainSystem",
    "SummedMagnitudes",
    "matched_termination_admittance",
    "propagation_constant",
]

#: Below this |w| the break-stub ratio (1 − sech w)/w² uses its Taylor series
#: (first omitted term ≈ w⁴/120 < 1e-18 relative there).
_SERIES_LIMIT = 1e-4


# --------------------------------------------------------------------------
# Stable hyperbolic ratios (Re u >= 0)
# --------------------------------------------------------------------------
#: Below this |u²| the even ratios use four Taylor terms in s = u²; the first
#: omitted term is below 2.2e-16 relative there. The exact forms (expm1) are
#: accurate everywhere except u = 0; the series is the fast path.
_EVEN_SERIES_LIMIT = 1e-3


def _even_ratios(s):
    """u/sinh(u) and tanh(u/2)/(u/2) as functions of s = u² (Re u >= 0).

    Series: u/sinh u = 1 − s/6 + 7s²/360 − 31s³/15120 + …,
    tanh(w)/w = 1 − s/12 + s²/120 − 17s³/20160 + … (w = u/2).
    Exact: with m = expm1(−u), u/sinh u = 2u·e^{−u}/(−m(2 + m)),
    tanh(u/2)/(u/2) = −2m/(u(2 + m)).
    """
    r1 = ((-31.0 / 15120.0) * s + 7.0 / 360.0) * s
    r1 -= 1.0 / 6.0
    r1 *= s
    r1 += 1.0
    r2 = ((-17.0 / 20160.0) * s + 1.0 / 120.0) * s
    r2 -= 1.0 / 12.0
    r2 *= s
    r2 += 1.0
    big = np.abs(s) >= _EVEN_SERIES_LIMIT
    if big.any():
        u = np.sqrt(s[big])
        m = np.expm1(-u)
        e = 1.0 + m  # e^{-u}; recomputed where it underflows against 1
        far = u.real > 30.0
        if far.any():
            e[far] = np.exp(-u[far])
        two_m = 2.0 + m
        r1[big] = 2.0 * u * e / (-m * two_m)
        r2[big] = -2.0 * m / (u * two_m)
    return r1, r2


def _split(u):
    small = np.abs(u) < _SERIES_LIMIT
    return small, np.where(small, 1.0, u)


def _one_minus_sech_over_w2(w):
    """(1 − sech w)/w², stable for small and large w (Re w >= 0)."""
    small, ws = _split(w)
    phi_exact = np.expm1(-ws) / ws
    phi_series = -(1.0 - w / 2.0 + w * w / 6.0 - w * w * w / 24.0)
    phi = np.where(small, phi_series, phi_exact)
    return phi * phi / (2.0 + np.expm1(-2.0 * np.where(small, w, ws)))


# --------------------------------------------------------------------------
# Solution
# --------------------------------------------------------------------------
@dataclass
class SummedMagnitudes:
    """Sums of magnitudes over the summed cases of :meth:`ChainSystem.solve` (``sum_from``).

    Attributes
    ----------
    node_voltage_v : ndarray of float, shape (n_nodes,)
        Σ |V| of each node [V].
    segment_current_start_a, segment_current_end_a : ndarray of float, shape (n_segments,)
        Σ |I| at the start / end of each segment [A].
    """

    node_voltage_v: np.ndarray
    segment_current_start_a: np.ndarray
    segment_current_end_a: np.ndarray


@dataclass(frozen=True)
class ChainSolution:
    """Node voltages and segment currents of a batched solve.

    Arrays have a trailing case axis when the EMF was given with one.

    Attributes
    ----------
    node_voltage_v : ndarray of complex, shape (n_nodes[, n_cases])
        Voltage of each node to remote earth [V].
    segment_current_start_a, segment_current_end_a : ndarray of complex
        Longitudinal current at the start / end of each segment, positive in
        the chain direction [A], shape (n_segments[, n_cases]). For a broken
        segment these are the currents of its two stubs at their nodes (the
        current at the break itself is zero).
    segment_voltage_v : ndarray of float
        max(|V_start|, |V_end|) of each segment [V].
    segment_current_a : ndarray of float
        max(|I_start|, |I_end|) of each segment [A] (the magnitude of the
        current along a uniform segment peaks at an end unless the current
        reverses inside it, which at 50 m segments changes the peak little).
    summed : SummedMagnitudes or None
        With ``sum_from``: the sums of magnitudes over the summed cases.
    """

    node_voltage_v: np.ndarray
    segment_current_start_a: np.ndarray
    segment_current_end_a: np.ndarray
    segment_voltage_v: np.ndarray
    segment_current_a: np.ndarray
    summed: SummedMagnitudes | None = None


class ChainSystem:
    """Assembled and factorised nodal system of a :class:`ChainBatch`.

    Assemble and factorise once, then solve any number of EMF cases, and
    Thevenin impedances, with the same factors.

    Parameters
    ----------
    batch : ChainBatch
        The chains.

    Raises
    ------
    corridor.errors.InputError
        If part of a chain has no path to earth at all (no shunt admittance,
        no ground, no termination between two breaks or ends): its potential
        is undefined. The caller should then add the small capacitance to
        earth the conductor really has (about 10 pF/m above ground, from
        memory) as ``y = jωC``.

    Notes
    -----
    Exact equivalent pi of a uniform segment of length l, γ = √(zy), u = γl:

        Y_series = 1/(Zc·sinh u) = (u/sinh u)/(z·l)
        Y_shunt/2 = tanh(u/2)/Zc = (y·l/2)·tanh(u/2)/(u/2)

    With a uniform EMF e = E_seg/l along the segment, I_p = e/z, V_p = 0 is a
    particular solution, so the exact Norton injection is J = E_seg/(z·l)
    out of the start node into the end node, and the longitudinal currents are

        I_start = Y_shunt/2·V1 + Y_series·(V1 − V2) + J
        I_end   = Y_series·(V1 − V2) − Y_shunt/2·V2 + J

    A broken segment (break at its midpoint) has Y_series = 0; each open-ended
    half of length l/2 presents tanh(u/2)/Zc = Y_shunt/2 and injects
    J·(1 − sech(u/2)) = E_seg·y·l/4·(1 − sech w)/w², w = u/2. The ratios are
    even in u: they are evaluated as four-term Taylor series in u² = z·y·l²
    where |u²| < 1e-3 (error < 3e-16; no square root needed, and y → 0 is
    stable) and with expm1 elsewhere.

    The matrix is assembled on construction and LU-factorised on first use
    (:attr:`pivots`, kept for further EMF cases and Thevenin impedances).

    References
    ----------
    .. [1] E. D. Sunde, Earth Conduction Effects in Transmission Systems,
       Dover, 1968.
    .. [2] G. H. Golub and C. F. Van Loan, Matrix Computations, 4th ed., Johns
       Hopkins, 2013, §4.3 (tridiagonal LU without pivoting).
    """

    def __init__(self, batch: ChainBatch):
        self.batch = batch
        length = batch.segment_length_m
        z = batch.series_impedance_ohm_per_m
        y = batch.shunt_admittance_s_per_m
        brk = batch.segment_break
        u_over_sinh, tanh_ratio = _even_ratios(z * y * (length * length))
        # Norton injection per volt of segment EMF [S]: 1/(z·l), or the stub
        # injection for broken segments.
        injection = 1.0 / (z * length)
        y_series = u_over_sinh * injection
        y_half = (0.5 * length) * y * tanh_ratio
        if brk.any():
            y_series[brk] = 0.0
            w = 0.5 * np.sqrt(z[brk] * y[brk]) * length[brk]
            injection[brk] = 0.25 * y[brk] * length[brk] * _one_minus_sech_over_w2(w)
        self.y_series_s = y_series
        self.y_half_s = y_half
        self.injection_s = injection

        n_node = batch.n_nodes
        first = batch.segment_start_node
        self._first = first
        if not np.all(y != 0):
            shunt = np.zeros(n_node + 1, dtype=complex)
            shunt[first] = y_half
            shunt[1:] += shunt[:-1].copy()
            shunt = shunt[:n_node] + batch.node_shunt_admittance_s
            shunt[batch.chain_first_node] += batch.start_termination_admittance_s
            shunt[batch.chain_last_node] += batch.end_termination_admittance_s
            self._check_paths_to_earth(shunt, first, brk)
        # Each segment's admittances are scattered to its start node, then
        # shifted by one onto its end node (a chain's last node starts no
        # segment, so nothing leaks across chains).
        both = np.zeros(n_node, dtype=complex)
        both[first] = y_half + y_series
        diag = np.array(batch.node_shunt_admittance_s, dtype=complex)
        diag += both
        diag[1:] += both[:-1]
        diag[batch.chain_first_node] += batch.start_termination_admittance_s
        diag[batch.chain_last_node] += batch.end_termination_admittance_s
        off = np.zeros(n_node, dtype=complex)
        off[first] = -y_series
        self._diag = diag
        self._off = off
        self._pivots: np.ndarray | None = None

    @property
    def tridiagonal(self) -> tuple[np.ndarray, np.ndarray]:
        """The nodal matrix: its diagonal and its symmetric off-diagonal (n_nodes each;
        the off-diagonal couples node n to n + 1 and is 0 between chains and at breaks)."""
        return self._diag, self._off

    @property
    def pivots(self) -> np.ndarray:
        """Pivots of the LU factors without pivoting (computed once, then kept).

        Raises
        ------
        corridor.errors.InputError
            If a pivot is zero or not finite: a part of a chain has no usable
            path to earth.
        """
        if self._pivots is None:
            piv = _kernels.chain_pivots(self._diag, self._off)
            bad = ~(np.isfinite(piv) & (piv != 0))
            if bad.any():
                node = int(np.flatnonzero(bad)[0])
                raise InputError(
                    f"nodal system is singular at node {node} (chain"
                    f" {int(self.batch.node_chain[node])}): a part of a chain has no usable"
                    " path to earth")
            self._pivots = piv
        return self._pivots

    def _check_paths_to_earth(self, shunt_diag, first, brk):
        batch = self.batch
        # A cut between node n and n+1: a chain boundary or a broken segment.
        cut = np.ones(batch.n_nodes - 1, dtype=bool)
        cut[first] = brk
        island = np.concatenate(([0], np.cumsum(cut)))
        total = np.bincount(island, weights=np.abs(shunt_diag))
        floating = np.flatnonzero(total == 0)
        if floating.size:
            nodes = np.flatnonzero(np.isin(island, floating))
            chains = np.unique(batch.node_chain[nodes])
            raise InputError(
                f"chains {_ids(np.isin(np.arange(batch.n_chains), chains))}: a part of the chain"
                " has no path to earth (no shunt admittance, ground or termination); add the"
                " conductor's capacitance to earth as y = jωC")

    # ---- solving ----------------------------------------------------------
    def solve(self, segment_emf_v, node_current_a=None, current_cases=None,
              sum_from=None) -> ChainSolution:
        """Solve for one or more EMF cases.

        Parameters
        ----------
        segment_emf_v : array_like of complex, shape (n_segments[, n_cases])
            Total EMF of each segment along the chain direction [V], taken as
            uniform along the segment.
        node_current_a : array_like of complex, shape (n_nodes[, n_cases]), optional
            Extra current injected into each node from remote earth [A].
        current_cases : sequence of int, optional
            Cases whose segment currents are wanted (default all); the others
            get NaN currents.
        sum_from : int, optional
            Cases from this one on are not returned one by one: only the sums of
            their magnitudes, ``ChainSolution.summed`` (the worst case over cases
            of unknown relative phase, docs/methods.md §8). A summed case is solved
            on a chain only where it has a source there. Needs a case axis.

        Returns
        -------
        ChainSolution
            The cases before ``sum_from`` (all cases by default).
        """
        batch = self.batch
        emf = np.asarray(segment_emf_v, dtype=complex)
        single = emf.ndim == 1
        emf2 = emf.reshape(batch.n_segments, -1) if emf.ndim <= 2 else None
        if emf2 is None or emf.shape[0] != batch.n_segments:
            raise InputError(
                f"segment_emf_v: expected shape ({batch.n_segments},) or"
                f" ({batch.n_segments}, n_cases), got {emf.shape}")
        n_case = emf2.shape[1]
        n_kept = n_case if sum_from is None else int(sum_from)
        if not 0 <= n_kept <= n_case or (single and sum_from is not None):
            raise InputError(f"sum_from: expected 0 .. {n_case} with a case axis, got"
                             f" {sum_from}")
        if node_current_a is None:
            node_current = np.zeros((0, n_case), complex)
        else:
            node_current = np.ascontiguousarray(
                np.broadcast_to(np.asarray(node_current_a, dtype=complex).reshape(
                    batch.n_nodes, -1), (batch.n_nodes, n_case)))
        v = np.zeros((batch.n_nodes, n_kept), complex)
        i_start = np.zeros((batch.n_segments, n_kept), complex)
        i_end = np.zeros((batch.n_segments, n_kept), complex)
        summed = SummedMagnitudes(np.zeros(batch.n_nodes), np.zeros(batch.n_segments),
                                  np.zeros(batch.n_segments))
        _kernels.solve_summed(
            self.pivots, self._off, self.injection_s, self.y_series_s, self.y_half_s,
            batch.chain_first_node, batch.chain_start,
            np.diff(np.r_[batch.chain_first_node, batch.n_nodes]),
            np.ascontiguousarray(emf2), node_current, n_kept, v, i_start, i_end,
            summed.node_voltage_v, summed.segment_current_start_a,
            summed.segment_current_end_a)
        if current_cases is not None:  # the cases not asked for get NaN currents
            unwanted = np.ones(n_kept, bool)
            unwanted[[c for c in np.asarray(current_cases, int).tolist() if c < n_kept]] = False
            i_start[:, unwanted] = np.nan
            i_end[:, unwanted] = np.nan
        v_abs = np.abs(v)
        seg_v = np.maximum(v_abs[self._first], v_abs[self._first + 1])
        seg_i = np.maximum(np.abs(i_start), np.abs(i_end))
        if single:
            v, i_start, i_end, seg_v, seg_i = (a[:, 0] for a in (v, i_start, i_end, seg_v, seg_i))
        return ChainSolution(v, i_start, i_end, seg_v, seg_i,
                             None if sum_from is None else summed)

    def thevenin_impedance(self, node_index) -> np.ndarray:
        """Impedance between nodes and remote earth with every EMF shorted.

        Parameters
        ----------
        node_index : array_like of int
            Global node indices. Nodes of different chains share one solve
            column; k nodes of the same chain need k columns, so asking for one
            node per chain (e.g. each chain's peak) costs a single extra solve.

        Returns
        -------
        ndarray of complex
            Thevenin (driving-point) impedance Z_th [Ω] at each node, same
            shape as ``node_index``.

        Notes
        -----
        Z_th,k = (Y⁻¹)_kk, the voltage at node k for a unit current injected at
        k. The open-circuit voltage V_k and Z_th give the current available to
        a person or a ground R: I = V_k/(R + Z_th), and V after grounding
        = V_k·R/(R + Z_th).
        """
        nodes = np.asarray(node_index, dtype=np.int64)
        flat = nodes.ravel()
        if flat.size == 0:
            return np.zeros(nodes.shape, dtype=complex)
        if flat.min() < 0 or flat.max() >= self.batch.n_nodes:
            raise InputError("node_index: out of range")
        chain = self.batch.node_chain[flat]
        order = np.argsort(chain, kind="stable")
        sorted_chain = chain[order]
        group_first = np.searchsorted(sorted_chain, sorted_chain, side="left")
        rank = np.empty(flat.size, dtype=np.int64)
        rank[order] = np.arange(flat.size) - group_first
        v = np.zeros((self.batch.n_nodes, int(rank.max()) + 1), dtype=complex)
        v[flat, rank] = 1.0
        _kernels.tridiagonal_solve(self.pivots, self._off, v)
        return v[flat, rank].reshape(nodes.shape)

    def peak_node(self, node_voltage_v) -> np.ndarray:
        """Node of largest |V| in each chain.

        Parameters
        ----------
        node_voltage_v : array_like of complex, shape (n_nodes,)
            Node voltages of one case [V].

        Returns
        -------
        ndarray of int, shape (n_chains,)
            Global index of the first node where |V| reaches its chain maximum.
        """
        mag = np.abs(np.asarray(node_voltage_v))
        if mag.shape != (self.batch.n_nodes,):
            raise InputError("node_voltage_v: expected one case, shape (n_nodes,)")
        chain_max = np.maximum.reduceat(mag, self.batch.chain_first_node)
        hit = np.flatnonzero(mag == chain_max[self.batch.node_chain])
        _, first_hit = np.unique(self.batch.node_chain[hit], return_index=True)
        return hit[first_hit]
