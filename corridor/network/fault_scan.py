"""Fault-position scan by superposition on the factorised asset chains.

For every fault case (an asset exposed to an electrical line) and every fault
position along the line, the EMF on the asset is the current fed from terminal
A on one side of the fault and minus the current fed from terminal B on the
other (docs/methods.md §8.2). Voltages are linear in the EMF, so each band of
sections between two positions is solved once per chain as a unit right-hand
side on the chain's nodal matrix (:class:`corridor.network.response.ChainSystem`),
and every position is a weighted sum of those unit responses.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from corridor.network import _kernels


@dataclass(frozen=True)
class FaultScan:
    """Result of :func:`scan_fault_positions`.

    Attributes
    ----------
    segment_voltage_v : ndarray of float, shape (n_segments,)
        Worst max(|V_start|, |V_end|) of each segment over every case and
        fault position [V]; 0 where no case reaches the segment.
    segment_current_a : ndarray of float, shape (n_segments,)
        max(|I_start|, |I_end|) of the segment for the governing case and
        position [A].
    segment_case, segment_position : ndarray of int, shape (n_segments,)
        Governing case and index of its fault position (-1: none).
    chain_case, chain_position : ndarray of int, shape (n_chains,)
        Case and position giving the largest |V| anywhere on the chain (-1: none).
    chain_node_voltage_v : ndarray of complex, shape (n_nodes,)
        Node voltages of each chain for its governing case and position [V]
        (0 on chains no case reaches).
    segment_emf_v : ndarray of complex, shape (n_segments,)
        Segment EMF of each chain's governing case and position [V].
    segment_worst_emf_v : ndarray of complex, shape (n_segments,)
        Segment EMF in the segment's own governing case and position [V].
    node_voltage_worst_v : ndarray of float, shape (n_nodes,)
        Largest |V| of each node over every case and position [V].
    chain_emf_v : ndarray of float, shape (n_chains,)
        Largest |Σ segment EMF| of each chain over every case and position [V]
        (the longitudinal EMF between the chain's ends).
    """

    segment_voltage_v: np.ndarray
    segment_current_a: np.ndarray
    segment_case: np.ndarray
    segment_position: np.ndarray
    chain_case: np.ndarray
    chain_position: np.ndarray
    chain_node_voltage_v: np.ndarray
    segment_emf_v: np.ndarray
    segment_worst_emf_v: np.ndarray
    node_voltage_worst_v: np.ndarray
    chain_emf_v: np.ndarray


def _section_bands(section_case, section_position_m, case_positions_m):
    """Band of each section: the number of its case's fault positions at or before it."""
    pos = np.asarray(case_positions_m, float)
    n_case, n_max = pos.shape
    n_pos = np.isfinite(pos).sum(axis=1).astype(np.int64)
    case = np.asarray(section_case, np.int64)
    if n_case == 0 or case.size == 0:
        return np.zeros(case.size, np.int64), n_pos
    # one sorted key per (case, position); positions are increasing within a case
    span = np.nanmax(np.abs(pos)) if np.isfinite(pos).any() else 1.0
    span = 2.0 * max(float(np.nanmax(np.abs(section_position_m))), span) + 1.0
    ok = np.isfinite(pos)
    keys = (np.arange(n_case)[:, None] * span + np.where(ok, pos, 0.0))[ok]
    first = np.r_[0, np.cumsum(n_pos)[:-1]]
    at = np.searchsorted(keys, case * span + np.asarray(section_position_m, float), side="right")
    return at - first[case], n_pos


def scan_fault_positions(system, section_segment, section_case, section_position_m,
                         section_emf_v_per_a, case_positions_m, case_current_start_a,
                         case_current_end_a):
    """Worst voltage and current of every segment over fault positions, by superposition.

    Parameters
    ----------
    system : ChainSystem
        The factorised chains.
    section_segment : array_like of int, shape (n_sections,)
        Segment of each EMF-carrying section.
    section_case : array_like of int, shape (n_sections,)
        Fault case (faulted line and phase on one asset) of each section.
    section_position_m : array_like of float, shape (n_sections,)
        Position of the section along the faulted line, from its start [m].
    section_emf_v_per_a : array_like of complex, shape (n_sections,)
        EMF of the section along the chain direction per ampere of fault
        current flowing along the line from its start towards its end,
        earth-wire screening included [V/A].
    case_positions_m : array_like of float, shape (n_cases, n_max)
        Fault positions of each case along the line, increasing, padded with
        NaN [m].
    case_current_start_a, case_current_end_a : array_like of complex, shape (n_cases, n_max)
        For a fault at each position, the current fed from the line's start
        (flowing towards the fault, i.e. along the line) and from its end
        (flowing towards the fault, against the line) [A]; padding ignored.

    Returns
    -------
    FaultScan

    Notes
    -----
    For a fault at x the section EMF is e·I_A(x) where the section lies
    before x and −e·I_B(x) beyond it (docs/methods.md §8.2). Node voltages
    are linear in the EMF (§11): with V_b the response to the unit EMFs of
    band b (the sections with b positions at or before them; one solve column
    per band, from the factors), the fault at position k gives

        V(k) = (I_A(x_k) + I_B(x_k))·Σ_{b ≤ k} V_b − I_B(x_k)·Σ_b V_b,

    for every position at once from the cumulative sum over the bands. The
    segment currents follow in the same way from the cumulated EMFs. A chain
    near several faulted lines is scanned once per case (a copy of the chain
    per case), and the worst over the copies is kept.

    Each copy is solved and scanned in one compiled pass
    (:func:`corridor.network._kernels.scan_units`): no (nodes × positions)
    temporaries beyond the copy's own, and no GIL held.

    References
    ----------
    .. [1] E. D. Sunde, Earth Conduction Effects in Transmission Systems,
       Dover, 1968 (linear response, superposition).
    .. [2] LAPACK Users' Guide, 3rd ed., SIAM, 1999 (one factorisation, many
       right-hand sides).
    """
    batch = system.batch
    n_seg, n_nodes, n_chain = batch.n_segments, batch.n_nodes, batch.n_chains
    sec_seg = np.asarray(section_segment, np.int64)
    sec_case = np.asarray(section_case, np.int64)
    emf = np.asarray(section_emf_v_per_a, complex)
    i_a = np.asarray(case_current_start_a, complex)
    i_b = np.asarray(case_current_end_a, complex)
    out = FaultScan(np.zeros(n_seg), np.zeros(n_seg), np.full(n_seg, -1, np.int64),
                    np.full(n_seg, -1, np.int64), np.full(n_chain, -1, np.int64),
                    np.full(n_chain, -1, np.int64), np.zeros(n_nodes, complex),
                    np.zeros(n_seg, complex), np.zeros(n_seg, complex), np.zeros(n_nodes),
                    np.zeros(n_chain))
    if sec_seg.size == 0:
        return out
    # only the cases these sections belong to (a re-solve of a few assets gets the
    # whole run's case table), and only up to their last position
    present = np.zeros(len(case_positions_m), bool)
    present[sec_case] = True
    cases = np.flatnonzero(present)
    sec_case = (np.cumsum(present) - 1)[sec_case]
    positions = np.asarray(case_positions_m, float)[cases]
    width = max(int(np.isfinite(positions).sum(axis=1).max()), 1)
    positions = positions[:, :width]
    i_a = i_a[cases, :width]
    i_b = i_b[cases, :width]
    band, n_pos = _section_bands(sec_case, section_position_m, positions)
    # currents per case and position; 0 from the case's last band on (no position there)
    n_case, n_max = i_a.shape
    ok = np.arange(n_max)[None, :] < n_pos[:, None]
    w_ab = np.zeros((n_case, n_max + 1), complex)
    w_b = np.zeros((n_case, n_max + 1), complex)
    w_ab[:, :n_max] = np.where(ok, i_a + i_b, 0.0)
    w_b[:, :n_max] = np.where(ok, i_b, 0.0)
    # scan units: one copy of a chain per case with sections on it; sections sorted by
    # unit, then segment
    unit_key = batch.segment_chain[sec_seg] * (n_case + 1) + sec_case
    order = np.lexsort((sec_seg, unit_key))
    key_sorted = unit_key[order]
    units, unit_first = np.unique(key_sorted, return_index=True)
    _diag, off = system.tridiagonal
    peak = np.full(n_chain, -1.0)  # the governing copy's peak so far
    _kernels.scan_units(
        system.pivots, off, system.injection_s, system.y_series_s, system.y_half_s,
        batch.chain_first_node, batch.chain_start,
        np.diff(np.r_[batch.chain_first_node, n_nodes]), units // (n_case + 1),
        units % (n_case + 1), np.r_[unit_first, len(order)], sec_seg[order], band[order],
        emf[order], n_pos, w_ab, w_b, out.segment_voltage_v, out.segment_current_a,
        out.segment_case, out.segment_position, out.segment_worst_emf_v,
        out.node_voltage_worst_v, out.chain_case, out.chain_position,
        out.chain_node_voltage_v, out.segment_emf_v, out.chain_emf_v, peak)
    for governing in (out.segment_case, out.chain_case):  # back to the callers' cases
        hit = governing >= 0
        governing[hit] = cases[governing[hit]]
    return out
