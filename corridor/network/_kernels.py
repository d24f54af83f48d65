"""Compiled inner loops of the chain solves (:mod:`corridor.network.response`) and of
the fault-position scan (:mod:`corridor.network.fault_scan`).

The scan: one pass per chain copy (a chain and one fault case) does what the array version
did in a dozen passes over (nodes × positions) temporaries: the band right-hand
sides, the tridiagonal solve of every band column, the cumulative sum over bands,
the voltage for every fault position and its maximum, the segment currents and
the merge into the run's arrays (the worst copy wins). The work stays in the
processor's cache and runs without the GIL, so the partitions of a run use both
cores.

The nodal matrix of a chain is complex symmetric with off-diagonal −Y_series.
It is factorised without pivoting: the pivots are the Schur complements
S_n = Y_nn − Y_{n−1,n}²/S_{n−1}, the input admittance to earth at node n of the
chain up to n, which a passive lossy chain keeps away from zero; the callers
check every pivot is finite and non-zero (an isolated part with no path to earth
is refused before, by :class:`corridor.network.response.ChainSystem`).

References
----------
.. [1] G. H. Golub and C. F. Van Loan, Matrix Computations, 4th ed., Johns Hopkins,
   2013, §4.3 (tridiagonal LU without pivoting).
"""

from __future__ import annotations

import numpy as np
from numba import njit


def _compiled(fn):
    """``fn`` compiled without the GIL, its machine code cached on disk where numba finds
    a writable place (beside the package, else the user's cache folder); with none (a
    read-only install run by a user without a home), compiled afresh in each process."""
    try:
        return njit(cache=True, nogil=True)(fn)
    except RuntimeError:  # numba: "cannot cache function ...: no locator available"
        return njit(nogil=True)(fn)


@_compiled
def chain_pivots(diag, off):  # pragma: no cover - compiled (its results are tested)
    """Pivots of the tridiagonal LU without pivoting, chains stacked (off = 0 between)."""
    n = diag.shape[0]
    piv = np.empty(n, np.complex128)
    if n == 0:
        return piv
    piv[0] = diag[0]
    for i in range(1, n):
        o = off[i - 1]
        if o == 0:
            piv[i] = diag[i]
        else:
            piv[i] = diag[i] - o * o / piv[i - 1]
    return piv


@_compiled
def tridiagonal_solve(piv, off, x):  # pragma: no cover - compiled (its results are tested)
    """Solve the stacked chains in place for every column of ``x`` (n_nodes, n_cols)."""
    n, n_col = x.shape
    for i in range(1, n):
        o = off[i - 1]
        if o != 0:
            f = o / piv[i - 1]
            for k in range(n_col):
                x[i, k] -= f * x[i - 1, k]
    for i in range(n - 1, -1, -1):
        d = 1.0 / piv[i]
        if i == n - 1:
            for k in range(n_col):
                x[i, k] *= d
        else:
            o = off[i]
            for k in range(n_col):
                x[i, k] = (x[i, k] - o * x[i + 1, k]) * d


@_compiled
def solve_summed(piv, off, inj, y_series, y_half, chain_first_node, chain_start, chain_nodes,
                 emf, node_current, n_kept, v, i_start, i_end, v_sum, i_start_sum,
                 i_end_sum):  # pragma: no cover - compiled (its results are tested)
    """Node voltages ``v`` and segment end currents of the first ``n_kept`` cases; of the
    others only Σ_case |V| per node and Σ_case |I_start|, Σ_case |I_end| per segment.

    ``emf`` (n_segments, n_cases) is each segment's EMF; ``node_current`` is
    (n_nodes, n_cases) or has no rows.

    Chain by chain, on a scratch of the chain's nodes × (kept cases + the summed cases
    with any source on the chain): a summed case with no EMF and no node current on a
    chain contributes nothing there and is not solved.
    """
    n_case = emf.shape[1]
    has_current = node_current.shape[0] > 0
    m_max = 1
    for c in range(chain_first_node.shape[0]):
        m_max = max(m_max, chain_nodes[c])
    x = np.empty((m_max, n_case), np.complex128)
    cols = np.empty(n_case, np.int64)
    for c in range(chain_first_node.shape[0]):
        n0 = chain_first_node[c]
        s0 = chain_start[c]
        m = chain_nodes[c]
        # the cases solved on this chain: the kept ones, and the summed ones with a source
        w = 0
        for k in range(n_case):
            active = k < n_kept
            if not active:
                for s in range(s0, s0 + m - 1):
                    if emf[s, k] != 0:
                        active = True
                        break
            if not active and has_current:
                for n in range(n0, n0 + m):
                    if node_current[n, k] != 0:
                        active = True
                        break
            if active:
                cols[w] = k
                w += 1
        for n in range(m):
            for j in range(w):
                x[n, j] = node_current[n0 + n, cols[j]] if has_current else 0j
        for ls in range(m - 1):
            s = s0 + ls
            for j in range(w):
                e = emf[s, cols[j]] * inj[s]
                x[ls, j] -= e  # a Norton current out of the segment's start node ...
                x[ls + 1, j] += e  # ... into its end node
        tridiagonal_solve(piv[n0:n0 + m], off[n0:n0 + m], x[:m, :w])
        for n in range(m):
            acc = 0.0
            for j in range(w):
                if cols[j] < n_kept:
                    v[n0 + n, cols[j]] = x[n, j]
                else:
                    acc += abs(x[n, j])
            v_sum[n0 + n] = acc
        for ls in range(m - 1):
            s = s0 + ls
            acc_s = 0.0
            acc_e = 0.0
            for j in range(w):
                v1 = x[ls, j]
                v2 = x[ls + 1, j]
                through = (v1 - v2) * y_series[s] + emf[s, cols[j]] * inj[s]
                a = y_half[s] * v1 + through
                b = through - y_half[s] * v2
                if cols[j] < n_kept:
                    i_start[s, cols[j]] = a
                    i_end[s, cols[j]] = b
                else:
                    acc_s += abs(a)
                    acc_e += abs(b)
            i_start_sum[s] = acc_s
            i_end_sum[s] = acc_e


@_compiled
def _mag2(v):  # pragma: no cover - compiled
    return v.real * v.real + v.imag * v.imag


@_compiled
def _segment_emf(sec_seg, sec_band, sec_emf, p, p1, s, kc):  # pragma: no cover - compiled
    """Segment ``s``'s EMF over its sections from ``p`` on (sorted by segment): the part in
    bands up to ``kc``, the total, and the first section after the segment's."""
    e_cum = 0j
    e_tot = 0j
    while p < p1 and sec_seg[p] == s:
        e_tot += sec_emf[p]
        if sec_band[p] <= kc:
            e_cum += sec_emf[p]
        p += 1
    return e_cum, e_tot, p


@_compiled
def scan_units(piv, off, inj, y_series, y_half, chain_first_node, chain_start, chain_nodes,
               unit_chain, unit_case, unit_ptr, sec_seg, sec_band, sec_emf, n_pos, w_ab, w_b,
               seg_v, seg_i, seg_case, seg_pos, seg_worst_emf, node_worst, chain_case,
               chain_pos, chain_node_v, seg_emf, chain_emf, peak):  # pragma: no cover
    """Scan every chain copy (``unit``) and merge it into the output arrays in place.

    Sections are sorted by unit, then by segment; ``unit_ptr`` holds each unit's first
    section (length n_units + 1). ``w_ab[q, k]`` and ``w_b[q, k]`` are I_A + I_B and
    I_B of case q for a fault at its position k, 0 from k = n_pos[q] on. A copy
    replaces earlier results only where it is strictly worse.
    """
    n_unit = unit_chain.shape[0]
    size = 1
    m_max = 1
    w_max = 1
    for u in range(n_unit):
        m = chain_nodes[unit_chain[u]]
        w = n_pos[unit_case[u]] + 1
        size = max(size, m * w)
        m_max = max(m_max, m)
        w_max = max(w_max, w)
    buf = np.empty(size, np.complex128)
    worst = np.empty(m_max, np.float64)
    col = np.empty(m_max, np.int64)
    band_sum = np.empty(w_max, np.complex128)
    raw = np.zeros(w_max, np.complex128)
    for u in range(n_unit):
        c = unit_chain[u]
        q = unit_case[u]
        n0 = chain_first_node[c]
        s0 = chain_start[c]
        m = chain_nodes[c]
        w = n_pos[q] + 1
        x = buf[:m * w].reshape((m, w))
        x[:, :] = 0
        band_sum[:w] = 0
        p0 = unit_ptr[u]
        p1 = unit_ptr[u + 1]
        # right-hand sides: a unit EMF in each band is a Norton current out of its
        # segment's start node into its end node
        for p in range(p0, p1):
            s = sec_seg[p]
            b = sec_band[p]
            e = sec_emf[p]
            j = inj[s] * e
            x[s - s0, b] -= j
            x[s - s0 + 1, b] += j
            band_sum[b] += e
        # forward elimination, then back substitution, every band column at once
        for n in range(1, m):
            o = off[n0 + n - 1]
            if o != 0:
                f = o / piv[n0 + n - 1]
                for k in range(w):
                    x[n, k] -= f * x[n - 1, k]
        # back substitution, node by node from the chain's end; each node's row is then
        # summed over bands and evaluated while it is in cache:
        # V(k) = (I_A + I_B)(k)·Σ_{b ≤ k} V_b − I_B(k)·Σ_b V_b
        u_best = -1.0
        u_node = 0
        for n in range(m - 1, -1, -1):
            d = 1.0 / piv[n0 + n]
            acc = 0j
            # ``raw`` holds the solved row of node n + 1 before its sums over bands
            if n == m - 1:
                for k in range(w):
                    v = x[n, k] * d
                    raw[k] = v
                    acc += v
                    x[n, k] = acc
            else:
                o = off[n0 + n]
                for k in range(w):
                    v = (x[n, k] - o * raw[k]) * d
                    raw[k] = v
                    acc += v
                    x[n, k] = acc
            best = -1.0
            bk = 0
            for k in range(w):
                a = _mag2(w_ab[q, k] * x[n, k] - w_b[q, k] * acc)
                if a > best:
                    best = a
                    bk = k
            mag = abs(w_ab[q, bk] * x[n, bk] - w_b[q, bk] * acc)
            worst[n] = mag
            col[n] = bk
            if mag >= u_best:  # nodes go backwards: ties keep the first node
                u_best = mag
                u_node = n
            if mag > node_worst[n0 + n]:
                node_worst[n0 + n] = mag
        # segments: the worse of their two nodes, in that node's governing position
        p = p0
        for ls in range(m - 1):
            s = s0 + ls
            if worst[ls + 1] > worst[ls]:
                kc = col[ls + 1]
                sw = worst[ls + 1]
            else:
                kc = col[ls]
                sw = worst[ls]
            e_cum, e_tot, p = _segment_emf(sec_seg, sec_band, sec_emf, p, p1, s, kc)
            if sw > seg_v[s]:
                e_best = w_ab[q, kc] * e_cum - w_b[q, kc] * e_tot
                v1 = w_ab[q, kc] * x[ls, kc] - w_b[q, kc] * x[ls, w - 1]
                v2 = w_ab[q, kc] * x[ls + 1, kc] - w_b[q, kc] * x[ls + 1, w - 1]
                through = (v1 - v2) * y_series[s] + e_best * inj[s]
                seg_v[s] = sw
                seg_i[s] = max(abs(y_half[s] * v1 + through), abs(through - y_half[s] * v2))
                seg_case[s] = q
                seg_pos[s] = kc
                seg_worst_emf[s] = e_best
        # the copy's longitudinal EMF between the chain's ends, worst over positions
        tot = 0j
        for k in range(w):
            tot += band_sum[k]
        acc = 0j
        for k in range(w):
            acc += band_sum[k]
            a = abs(w_ab[q, k] * acc - w_b[q, k] * tot)
            if a > chain_emf[c]:
                chain_emf[c] = a
        # the chain's governing copy and position: its profile and segment EMFs
        if u_best > peak[c]:
            peak[c] = u_best
            kc = col[u_node]
            chain_case[c] = q
            chain_pos[c] = kc
            for n in range(m):
                chain_node_v[n0 + n] = w_ab[q, kc] * x[n, kc] - w_b[q, kc] * x[n, w - 1]
            p = p0
            for ls in range(m - 1):
                s = s0 + ls
                e_cum, e_tot, p = _segment_emf(sec_seg, sec_band, sec_emf, p, p1, s, kc)
                seg_emf[s] = w_ab[q, kc] * e_cum - w_b[q, kc] * e_tot
