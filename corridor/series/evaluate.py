"""Streaming evaluation of a load series on every asset, by superposition.

Node voltages are linear in the circuits' current phasors m_g(t). Per asset,
each (circuit, part) that reaches it gets one column of unit EMF; all columns
of all assets are solved in one call on the response stage's factorised
system (:meth:`corridor.network.response.ChainSystem.solve`), never once per
step. A step is then, per asset and per component k of unknown relative
angle (docs/methods.md §8), V_k(t) = U_k · m_k(t), a matrix product, and

    |V(node, t)| = Σ_k |V_k(node, t)|,   v_seg(t) = max(|V| at its two nodes).

The time axis is streamed in blocks of ``block_steps``, one asset at a time,
so memory holds one asset's nodes × one block, never segments × hours
(docs/methods.md §15).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field

import numpy as np

log = logging.getLogger(__name__)

__all__ = ["SeriesInputs", "SeriesResult", "unit_columns", "evaluate_series"]


@dataclass
class SeriesInputs:
    """Per-segment thresholds and the phasors for :func:`evaluate_series`.

    Attributes
    ----------
    threshold_v : ndarray, shape (n_segments, n_criteria)
        Voltage at which each time-varying steady-state criterion is reached
        on each segment [V] (inf where it does not apply).
    constant_exceeds : ndarray of bool, shape (n_segments,)
        A criterion that does not vary with load (capacitive current) is
        exceeded: every step counts.
    coated : ndarray of bool, per segment
        Segments whose ISO 18086 mean is wanted.
    phasors_a : ndarray of complex, shape (n_circuits, n_steps)
    window_steps : int
        Steps in the representative period.
    rolling : bool
        Rolling windows (else back-to-back windows).
    block_steps : int
    curve_assets : ndarray of int
        Assets whose per-step peak voltage is kept (duration curves).
    """

    threshold_v: np.ndarray
    constant_exceeds: np.ndarray
    coated: np.ndarray
    phasors_a: np.ndarray
    window_steps: int
    rolling: bool = True
    block_steps: int = 2048
    curve_assets: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    curve_points: int = 101
    #: Voltage of the ISO 18086 mean limit per segment [V] (inf: not coated).
    mean_threshold_v: np.ndarray | None = None
    #: Segments whose bound stays below this fraction of their thresholds are not stepped.
    screen_below: float = 0.0

    def __post_init__(self):
        if self.mean_threshold_v is None:
            self.mean_threshold_v = np.full(self.threshold_v.shape[0], np.inf)


@dataclass
class SeriesResult:
    """Per-segment and per-asset results of :func:`evaluate_series`.

    Attributes
    ----------
    steps_above : ndarray of int, shape (n_segments, n_criteria)
    steps_above_any : ndarray of int, per segment
    peak_v : ndarray, per segment
        Largest |V| over the series [V].
    peak_step : ndarray of int, per segment
    mean_max_v : ndarray, per segment
        Largest mean of v over a representative period [V] (NaN: not coated).
    mean_end_step : ndarray of int, per segment
        Last step of that window (-1: none).
    asset_steps_above : ndarray of int, per asset (of the model)
        Steps where any segment of the asset is above a limit.
    bounded : ndarray of bool, per segment
        Not stepped: the screen proved it below every limit; ``peak_v`` and
        ``mean_max_v`` are upper bounds there and the steps are -1.
    asset_peak_v : dict
        asset -> ndarray (curve_points,): the duration curve of the asset's
        peak voltage, the value exceeded during a fraction 0, 1/(points − 1),
        …, 1 of the steps [V], for the curve assets.
    """

    steps_above: np.ndarray
    steps_above_any: np.ndarray
    peak_v: np.ndarray
    peak_step: np.ndarray
    mean_max_v: np.ndarray
    mean_end_step: np.ndarray
    asset_steps_above: np.ndarray
    asset_peak_v: dict
    bounded: np.ndarray = field(default_factory=lambda: np.zeros(0, bool))


def unit_columns(feature, ue, slot_of_entry, emf_scale):
    """Per-asset columns of unit EMF: the right-hand sides of one solve.

    Parameters
    ----------
    feature : ndarray of int, per segment
        Asset of each segment.
    ue : corridor.series.unit_emf.UnitEmf
    slot_of_entry : ndarray of int, per entry of ``ue``
        Component key of each entry (entries with the same key add as phasors).
    emf_scale : ndarray, per segment
        EMF factor of the asset kind (telecom sheath screening factor), as the
        response stage applies it.

    Returns
    -------
    rhs : ndarray of complex, shape (n_segments, n_columns)
    col_circuit, col_slot : ndarray of int, shape (n_assets, n_columns)
        Circuit and local component of each asset's column (-1: unused).
    """
    n_seg = len(feature)
    n_assets = int(feature.max()) + 1 if n_seg else 0
    asset = feature[ue.segment]
    ckey = ue.circuit * 2 + ue.part
    pair_key = asset.astype(np.int64) * (int(ckey.max()) + 1 if ckey.size else 1) + ckey
    pairs, pair_of = np.unique(pair_key, return_inverse=True)
    pair_of = pair_of.ravel()
    pair_asset = pairs // (int(ckey.max()) + 1 if ckey.size else 1)
    first = np.searchsorted(pair_asset, pair_asset, side="left")
    col_of_pair = np.arange(pairs.size) - first
    n_col = int(col_of_pair.max()) + 1 if pairs.size else 0
    rhs = np.zeros((n_seg, n_col), complex)
    col = col_of_pair[pair_of]
    np.add.at(rhs, (ue.segment, col), ue.emf_v_per_a * emf_scale[ue.segment])
    col_circuit = np.full((n_assets, n_col), -1, np.int64)
    col_slot = np.full((n_assets, n_col), -1, np.int64)
    col_circuit[pair_asset, col_of_pair] = (pairs % (int(ckey.max()) + 1 if ckey.size else 1)) // 2
    # local component of each column: rank of its key within the asset
    s_key = asset.astype(np.int64) * (int(slot_of_entry.max()) + 1 if slot_of_entry.size else 1) \
        + slot_of_entry
    s_uniq, s_of = np.unique(s_key, return_inverse=True)
    s_asset = s_uniq // (int(slot_of_entry.max()) + 1 if slot_of_entry.size else 1)
    s_local = np.arange(s_uniq.size) - np.searchsorted(s_asset, s_asset, side="left")
    col_slot[asset, col] = s_local[s_of.ravel()]
    return rhs, col_circuit, col_slot


def _windows(tail, block, t0, w, rolling, best, best_end):
    """Update the best window mean with the windows ending in this block.

    ``tail`` holds the last ``w − 1`` values before the block (fewer at the start);
    window sums are differences of one cumulative sum, taken on slices.
    """
    n_tail = tail.shape[1]
    ext = np.concatenate([tail, block], axis=1) if n_tail else block
    cs = np.empty((ext.shape[0], ext.shape[1] + 1))
    cs[:, 0] = 0.0
    np.cumsum(ext, axis=1, out=cs[:, 1:])
    start = t0 - n_tail  # global step of ext[:, 0]
    j0 = max(w - 1 - start, n_tail)  # first ext index ending a full window in this block
    if j0 < ext.shape[1]:
        sums = cs[:, j0 + 1:] - cs[:, j0 + 1 - w:ext.shape[1] + 1 - w]
        ends = start + np.arange(j0, ext.shape[1])
        if not rolling:
            pick = np.flatnonzero((ends + 1) % w == 0)
            sums, ends = sums[:, pick], ends[pick]
        if ends.size:
            k = np.argmax(sums, axis=1)
            m = sums[np.arange(sums.shape[0]), k] / w
            better = m > best
            best[better] = m[better]
            best_end[better] = ends[k[better]]
    keep = min(w - 1, ext.shape[1])
    return ext[:, ext.shape[1] - keep:].copy() if keep else ext[:, :0]


def _asset_blocks(u, circ, slots, phasors, abs_phasors, same, nodes_sel, first_pos, n_t,
                  block):
    """Yield (t0, v) per block: v = segment |V| of the selected segments over the block.

    A component with one column is |U|·|m| (a real product, no complex modulus per
    step); the others are summed as phasors, then taken in magnitude.
    """
    uu = u[nodes_sel]
    contiguous = first_pos.size == uu.shape[0] - 1 and bool(
        np.array_equal(first_pos, np.arange(first_pos.size)))
    # columns of one component whose circuits carry the same phasor at every step add
    # before the modulus: one column (a real product) instead of several
    keys = np.unique(np.stack([slots, same[circ]]), axis=1)
    merged = np.stack([uu[:, (slots == k0) & (same[circ] == k1)].sum(axis=1)
                       for k0, k1 in keys.T], axis=1) if keys.size else uu[:, :0]
    uu, slots, circ = merged, keys[0], keys[1]
    single: list[np.ndarray] = []
    multi: list[np.ndarray] = []
    for s in np.unique(slots):
        cols = np.flatnonzero(slots == s)
        (single if cols.size == 1 else multi).append(cols)
    single_cols = np.concatenate(single) if single else np.zeros(0, np.int64)
    u_abs = np.abs(uu[:, single_cols]) if single_cols.size else None
    for t0 in range(0, n_t, block):
        t1 = min(n_t, t0 + block)
        if u_abs is not None:
            mag = u_abs @ abs_phasors[circ[single_cols], t0:t1]
        else:
            mag = np.zeros((uu.shape[0], t1 - t0))
        for cols in multi:
            w = uu[:, cols] @ phasors[circ[cols], t0:t1]
            mag += np.sqrt(w.real * w.real + w.imag * w.imag)
        pair = np.maximum(mag[:-1], mag[1:])  # node k and k + 1
        yield t0, (pair if contiguous else pair[first_pos])


def evaluate_series(system, feature, chain_of_segment, rhs, col_circuit, col_slot,
                    inp: SeriesInputs) -> SeriesResult:
    """Every step of the series on every segment, streamed.

    Parameters
    ----------
    system : corridor.network.response.ChainSystem
        The factorised system of the response stage (all chains of the run).
    feature, chain_of_segment : ndarray of int, per segment
    rhs, col_circuit, col_slot
        From :func:`unit_columns`.
    inp : SeriesInputs

    Returns
    -------
    SeriesResult

    Notes
    -----
    Screen (``inp.screen_below`` > 0): a segment's voltage can never exceed
    the bound B = max over its nodes of Σ_j |U_j|·max_t |m_j(t)|. Where B is
    below ``screen_below`` times every threshold that applies to the segment
    (its steady-state thresholds and, coated, the voltage of the ISO 18086
    mean limit), no step can reach a limit: its hours above are 0 (exact), and
    its peak and mean are reported as B, an upper bound (``bounded``), without
    stepping it.
    """
    n_seg = len(feature)
    n_assets = col_circuit.shape[0]
    n_crit = inp.threshold_v.shape[1]
    n_t = inp.phasors_a.shape[1]
    w = int(inp.window_steps)
    res = SeriesResult(np.zeros((n_seg, n_crit), np.int64), np.zeros(n_seg, np.int64),
                       np.zeros(n_seg), np.zeros(n_seg, np.int64), np.full(n_seg, np.nan),
                       np.full(n_seg, -1, np.int64), np.zeros(n_assets, np.int64), {},
                       np.zeros(n_seg, bool))
    if n_seg == 0 or n_t == 0:
        return res
    if rhs.shape[1]:
        unit = system.solve(rhs, current_cases=[]).node_voltage_v
        if unit.ndim == 1:
            unit = unit[:, None]
    else:
        unit = np.zeros((n_seg + int(chain_of_segment.max()) + 1, 0), complex)
    seg_first_node = np.arange(n_seg) + chain_of_segment
    thr_any = np.min(inp.threshold_v, axis=1) if n_crit else np.full(n_seg, np.inf)
    mean_thr = (inp.mean_threshold_v if inp.mean_threshold_v is not None
                else np.full(n_seg, np.inf))
    screen_v = np.minimum(thr_any, np.where(inp.coated, mean_thr, np.inf))
    abs_phasors = np.abs(inp.phasors_a)
    max_phasor = abs_phasors.max(axis=1) if abs_phasors.size else np.zeros(0)
    const_steps = np.where(inp.constant_exceeds, n_t, 0)
    # circuits whose phasors are equal at every step share a representative
    _, first_same, same = np.unique(inp.phasors_a, axis=0, return_index=True,
                                    return_inverse=True)
    same = first_same[same.ravel()]
    res.steps_above_any[:] = const_steps
    curve = set(int(a) for a in inp.curve_assets)
    bounds = np.searchsorted(feature, np.arange(n_assets + 1))
    frac = np.linspace(0.0, 1.0, int(inp.curve_points))
    for a in range(n_assets):
        s0, s1 = int(bounds[a]), int(bounds[a + 1])
        if s1 <= s0:
            continue
        n0 = int(seg_first_node[s0])
        n1 = int(seg_first_node[s1 - 1]) + 2
        first = seg_first_node[s0:s1] - n0
        cols = np.flatnonzero(col_circuit[a] >= 0)
        u = unit[n0:n1, cols]
        circ = col_circuit[a, cols]
        slots = col_slot[a, cols]
        # upper bound of every segment's voltage over the whole series
        b_node = np.abs(u) @ max_phasor[circ]
        bound = np.maximum(b_node[first], b_node[first + 1])
        step = (bound >= inp.screen_below * screen_v[s0:s1]) if inp.screen_below > 0 else \
            np.ones(s1 - s0, bool)
        res.bounded[s0:s1] = ~step
        res.peak_v[s0:s1] = bound
        res.peak_step[s0:s1] = -1
        coated_all = inp.coated[s0:s1]
        res.mean_max_v[s0:s1] = np.where(coated_all, bound, np.nan)
        const_any = bool(inp.constant_exceeds[s0:s1].any())
        if const_any:
            res.asset_steps_above[a] = n_t
        keep_curve = a in curve
        sel = np.flatnonzero(step)
        if not sel.size:
            if keep_curve:
                res.asset_peak_v[a] = np.full(frac.size, bound.max())
            continue
        nodes_sel, inv = np.unique(np.concatenate([first[sel], first[sel] + 1]),
                                   return_inverse=True)
        first_pos = inv.ravel()[:sel.size]
        glob = s0 + sel
        thr = inp.threshold_v[glob]
        t_any = thr_any[glob]
        coated = np.flatnonzero(inp.coated[glob])
        tail = np.zeros((coated.size, 0))
        best = np.full(coated.size, -np.inf)
        best_end = np.full(coated.size, -1, np.int64)
        peak = np.full(sel.size, -1.0)
        peak_step = np.zeros(sel.size, np.int64)
        counts = np.zeros((sel.size, n_crit), np.int64)
        any_count = np.zeros(sel.size, np.int64)
        asset_over = 0
        asset_curve = np.zeros(n_t) if keep_curve else None
        # block length: about 256 k node-steps per block at most (stays in cache)
        block = max(1, min(int(inp.block_steps), 262_144 // max(nodes_sel.size, 1)))
        rows = np.arange(sel.size)
        for t0, v in _asset_blocks(u, circ, slots, inp.phasors_a, abs_phasors, same, nodes_sel,
                                   first_pos, n_t, block):
            k = np.argmax(v, axis=1)
            vk = v[rows, k]
            better = vk > peak
            peak[better] = vk[better]
            peak_step[better] = k[better] + t0
            hot = np.flatnonzero(vk >= t_any)  # only rows that reach a limit in the block
            if hot.size:
                vh = v[hot]
                for c in range(n_crit):
                    counts[hot, c] += np.count_nonzero(vh >= thr[hot, c, None], axis=1)
                over = vh >= t_any[hot, None]
                any_count[hot] += np.count_nonzero(over, axis=1)
                asset_over += int(np.count_nonzero(over.any(axis=0)))
            if asset_curve is not None:
                asset_curve[t0:t0 + v.shape[1]] = v.max(axis=0)
            if coated.size:
                tail = _windows(tail, v[coated], t0, min(w, n_t), inp.rolling or w > n_t,
                                best, best_end)
        res.peak_v[glob] = peak
        res.peak_step[glob] = peak_step
        res.steps_above[glob] = counts
        res.steps_above_any[glob] = np.where(inp.constant_exceeds[glob], n_t, any_count)
        if not const_any:
            res.asset_steps_above[a] = asset_over
        if coated.size:
            res.mean_max_v[glob[coated]] = best
            res.mean_end_step[glob[coated]] = best_end
        if asset_curve is not None:  # exact above the screen level (bounded rows stay below)
            pos = np.minimum((frac * n_t).astype(np.int64), n_t - 1)
            res.asset_peak_v[a] = np.sort(asset_curve)[::-1][pos]
    return res
