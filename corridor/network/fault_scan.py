"""Fault-position scan by superposition on the factorised asset chains.

For every fault case (an asset exposed to an electrical line) and every fault
position along the line, the EMF on the asset is the current fed from terminal
A on one side of the fault and minus the current fed from terminal B on the
other (docs/methods.md §8.2). Voltages are linear in the EMF, so each band of
sections between two positions is solved once per chain as a unit right-hand
side on the factorisation :class:`corridor.network.response.ChainSystem`
already holds, and every position is a weighted sum of those unit responses.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from corridor.network.response import ChainBatch, ChainSystem


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

    Memory: the (chain, case) copies are taken widest first in blocks of about
    ``_SCAN_BLOCK_ENTRIES`` (nodes × columns, a few MB: the work stays in the
    processor's cache); a block is factorised on its own (the chains are
    independent).

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
    band, n_pos = _section_bands(sec_case, section_position_m, case_positions_m)
    # currents per case and column; 0 beyond the case's positions (those columns give 0 V)
    n_max = i_a.shape[1]
    ok = np.arange(n_max)[None, :] < n_pos[:, None]
    pad = np.zeros((len(n_pos), 1), complex)  # the last band column: no position
    # laid out column first, once (not per block: the cases grow with the network)
    sum_ab_t = np.ascontiguousarray(np.hstack([np.where(ok, i_a + i_b, 0.0), pad]).T)
    i_b_t = np.ascontiguousarray(np.hstack([np.where(ok, i_b, 0.0), pad]).T)
    # scan units: one copy of a chain per case with sections on it
    seg_chain = batch.segment_chain
    unit_key = seg_chain[sec_seg] * (len(n_pos) + 1) + sec_case
    units, unit_of_sec = np.unique(unit_key, return_inverse=True)
    unit_chain = units // (len(n_pos) + 1)
    unit_case = units % (len(n_pos) + 1)
    unit_width = n_pos[unit_case] + 1
    chain_nodes = np.diff(np.r_[batch.chain_first_node, n_nodes])
    order = np.argsort(-unit_width, kind="stable")
    sec_order = np.argsort(unit_of_sec, kind="stable")
    sec_unit_sorted = unit_of_sec[sec_order]
    peak = np.full(n_chain, -1.0)  # chain peak so far, to merge copies
    work = _Workspace()
    for block in _scan_blocks(order, chain_nodes[unit_chain], unit_width):
        block = np.sort(block)
        width = int(unit_width[block].max())
        sub, seg_idx, node_idx = _gather_system(system, unit_chain[block])
        # sections of the block's units, mapped to the block's local segments
        lo = np.searchsorted(sec_unit_sorted, block[0], side="left")
        hi = np.searchsorted(sec_unit_sorted, block[-1], side="right")
        sel = sec_order[lo:hi]
        sel = sel[np.isin(unit_of_sec[sel], block)]
        local_unit = np.searchsorted(block, unit_of_sec[sel])
        seg_first = np.cumsum(chain_nodes[unit_chain[block]] - 1) - (
            chain_nodes[unit_chain[block]] - 1)
        local_seg = seg_first[local_unit] + (
            sec_seg[sel] - batch.chain_start[unit_chain[block]][local_unit])
        _scan_block(sub, local_seg, band[sel], emf[sel], width, unit_case[block],
                    sum_ab_t[:width], i_b_t[:width], n_pos, out, peak,
                    (seg_idx, node_idx, unit_chain[block]), work)
    return out


#: Nodes × solve columns handled at once by the fault scan (16 bytes each, a few
#: arrays of this size live at a time).
_SCAN_BLOCK_ENTRIES = 200_000


class _Workspace:
    """Work arrays reused from block to block.

    Fresh multi-megabyte arrays for every block cost page faults that can
    exceed the arithmetic on them; these buffers grow once and are reused.
    """

    def __init__(self):
        self._buffers = {}

    def get(self, name, shape, dtype, zero=False):
        """A C-contiguous array of ``shape`` backed by the buffer ``name``."""
        size = int(np.prod(shape))
        buf = self._buffers.get(name)
        if buf is None or buf.dtype != np.dtype(dtype) or buf.size < size:
            buf = np.empty(max(size, 1), dtype)
            self._buffers[name] = buf
        arr = buf[:size].reshape(shape)
        if zero:
            arr.fill(0)
        return arr


def _scan_blocks(units, unit_nodes, unit_width):
    """Split ``units`` (widest first) so that nodes × widest layout stay near the budget."""
    blocks, start, nodes = [], 0, 0
    for i, u in enumerate(units):
        if i > start and (nodes + unit_nodes[u]) * unit_width[units[start]] > (
                _SCAN_BLOCK_ENTRIES):
            blocks.append(units[start:i])
            start, nodes = i, 0
        nodes += int(unit_nodes[u])
    if len(units):
        blocks.append(units[start:])
    return blocks


def _gather_system(system, chains):
    """The :class:`ChainSystem` of the given chains alone (chains are independent;
    a chain may repeat). Returns the system and the global segment and node
    indices of its rows."""
    batch = system.batch
    if len(chains) == batch.n_chains and np.array_equal(chains, np.arange(batch.n_chains)):
        return system, np.arange(batch.n_segments), np.arange(batch.n_nodes)
    seg_count = np.diff(np.r_[batch.chain_start, batch.n_segments])[chains]
    seg_first = batch.chain_start[chains]
    seg_idx = np.repeat(seg_first - np.cumsum(seg_count) + seg_count, seg_count) + np.arange(
        seg_count.sum())
    node_first = batch.chain_first_node[chains]
    node_count = seg_count + 1
    node_idx = np.repeat(node_first - np.cumsum(node_count) + node_count, node_count) + \
        np.arange(node_count.sum())
    sub = ChainBatch(batch.segment_length_m[seg_idx], batch.series_impedance_ohm_per_m[seg_idx],
                     batch.shunt_admittance_s_per_m[seg_idx], np.cumsum(seg_count) - seg_count,
                     batch.node_shunt_admittance_s[node_idx], batch.segment_break[seg_idx],
                     batch.start_termination_admittance_s[chains],
                     batch.end_termination_admittance_s[chains])
    return ChainSystem(sub), seg_idx, node_idx


def _cumsum_rows(a):
    """In-place cumulative sum down the rows of a 2-D array (fast for few, long rows)."""
    for k in range(1, a.shape[0]):
        a[k] += a[k - 1]
    return a


def _first_argmax_rows(a, best):
    """Index of the first row where each column of ``a`` reaches ``best``."""
    out = np.zeros(a.shape[1], np.int64)
    for k in range(a.shape[0] - 1, -1, -1):
        np.copyto(out, k, where=a[k] == best)
    return out


def _scan_block(system, sec_seg, band, emf, n_col, unit_case, sum_ab_t, i_b_t, n_pos, out,
                peak, where, work):
    """Scan one block of chain copies (one case each); merge into ``out`` (worst wins).

    Arrays are laid out band/position first, (n_col, n_rows), so that the sums over
    bands and the maxima over positions run along contiguous rows; ``sum_ab_t`` and
    ``i_b_t`` are the end currents so laid out, (n_col, n_case).
    """
    seg_idx, node_idx, chains = where
    batch = system.batch
    n_unit, n_nodes = batch.n_chains, batch.n_nodes
    # unit EMFs of the bands at each segment's start node (a chain's last node: 0)
    first = batch.segment_start_node
    unit_emf = work.get("unit", (n_col, n_nodes + 1), complex, zero=True)
    np.add.at(unit_emf, (band, first[sec_seg]), emf)
    inj = np.zeros(n_nodes + 1, complex)
    inj[first] = system.injection_s
    v = work.get("v", (n_col, n_nodes + 1), complex)
    np.multiply(unit_emf, inj, out=v)  # Norton current out of each start node ...
    rhs_t = work.get("rhs", (n_col, n_nodes + 1), complex)
    np.negative(v, out=rhs_t)
    rhs_t[:, 1:] += v[:, :-1]  # ... into the next node
    cum = system._solve_rhs(rhs_t.T).T  # (n_col, n_nodes), in the rhs buffer
    _cumsum_rows(cum)  # Σ_{b ≤ k} V_b
    node_unit = batch.node_chain
    seg_unit = batch.segment_chain
    case_n = unit_case[node_unit]
    total = cum[n_pos[case_n], np.arange(n_nodes)]  # Σ_b V_b (the last band)
    v = work.get("v", (n_col, n_nodes), complex)
    np.take(sum_ab_t, case_n, axis=1, out=v)
    v *= cum
    tmp = work.get("tmp", (n_col, n_nodes), complex)
    np.take(i_b_t, case_n, axis=1, out=tmp)
    tmp *= total
    v -= tmp  # columns beyond the positions give 0
    mag = work.get("mag", (n_col, n_nodes), float)
    np.abs(v, out=mag)
    worst = mag.max(axis=0)
    col = _first_argmax_rows(mag, worst)
    # segments: the worse of their two nodes, in that node's governing column
    w1, w2 = worst[first], worst[first + 1]
    seg_col = np.where(w2 > w1, col[first + 1], col[first])
    seg_w = np.maximum(w1, w2)
    chain_e = np.add.reduceat(unit_emf[:, :n_nodes], batch.chain_first_node, axis=1)
    cum_e = _cumsum_rows(unit_emf)  # (n_col, n_nodes + 1), segments at their start nodes
    case_s = unit_case[seg_unit]
    e_total = cum_e[n_pos[case_s], first]
    e_best = (sum_ab_t[seg_col, case_s] * cum_e[seg_col, first]
              - i_b_t[seg_col, case_s] * e_total)
    current = system.currents_at(v.T, e_best, seg_col)
    # a chain may be in the block more than once (one copy per case): per global
    # segment, the copy with the largest value, then only if it beats earlier blocks
    order = np.lexsort((seg_w, seg_idx))
    last = np.r_[seg_idx[order][1:] != seg_idx[order][:-1], True]
    win = order[last]
    win = win[seg_w[win] > out.segment_voltage_v[seg_idx[win]]]
    tgt = seg_idx[win]
    out.segment_voltage_v[tgt] = seg_w[win]
    out.segment_current_a[tgt] = current[win]
    out.segment_case[tgt] = case_s[win]
    out.segment_position[tgt] = seg_col[win]
    out.segment_worst_emf_v[tgt] = e_best[win]
    np.maximum.at(out.node_voltage_worst_v, node_idx, worst)
    # per chain copy: the column of its largest |V|, its profile, its longitudinal EMF
    unit_first = batch.chain_first_node
    unit_max = np.maximum.reduceat(worst, unit_first)
    hit = np.where(worst == unit_max[node_unit], np.arange(n_nodes), n_nodes)
    unit_peak_node = np.minimum.reduceat(hit, unit_first)
    unit_col = col[unit_peak_node]
    _cumsum_rows(chain_e)
    units = np.arange(n_unit)
    chain_total = chain_e[n_pos[unit_case], units]
    chain_emf = np.abs(sum_ab_t[:, unit_case] * chain_e - i_b_t[:, unit_case] * chain_total)
    np.maximum.at(out.chain_emf_v, chains, chain_emf.max(axis=0))
    unit_last = batch.chain_last_node
    for u in range(n_unit):  # a short loop over the block's chain copies
        c = chains[u]
        if unit_max[u] <= peak[c]:
            continue
        peak[c] = unit_max[u]
        k = unit_col[u]
        out.chain_case[c] = unit_case[u]
        out.chain_position[c] = k
        out.chain_node_voltage_v[node_idx[unit_first[u]:unit_last[u] + 1]] = (
            v[k, unit_first[u]:unit_last[u] + 1])
        s0, s1 = batch.chain_start[u], batch.chain_start[u] + unit_last[u] - unit_first[u]
        out.segment_emf_v[seg_idx[s0:s1]] = (
            sum_ab_t[k, unit_case[u]] * cum_e[k, unit_first[u]:unit_last[u]]
            - i_b_t[k, unit_case[u]] * e_total[s0:s1])
