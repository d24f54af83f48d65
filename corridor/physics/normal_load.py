"""Normal load: per-circuit phase currents, outage scenarios, worst case over unknowns.

The load side of inductive coupling (docs/methods.md): the currents of each
circuit of a line on its own (:func:`circuit_phase_currents`), the weights of
the circuit-outage scenarios (:func:`outage_weights`) and the worst normal-load
EMF over the unknown flow directions and outages (:func:`worst_normal_emf`).
Called by :mod:`corridor.steps.couple`; the names are importable from
:mod:`corridor.physics.induction` too.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from corridor.physics._arrays import PHASE_ANGLE_RAD, complex_bincount

__all__ = [
    "CircuitCurrents",
    "WorstNormalEmf",
    "circuit_phase_currents",
    "outage_weights",
    "worst_normal_emf",
]



class CircuitCurrents(NamedTuple):
    """Result of :func:`circuit_phase_currents`: one row per circuit."""

    #: Positive-sequence load currents of each circuit alone, shape
    #: (n_circuits, 3·n_circuits) [A]; the other circuits' conductors carry 0.
    balanced_a: np.ndarray
    #: Residual (earth-return) current of each circuit alone, I_r/3 on each of
    #: its conductors, same shape [A].
    residual_a: np.ndarray


def circuit_phase_currents(load_current_a_per_circuit, phasing, residual_current_pct=0.0,
                            flow_direction=1.0, phase_offset_deg=0.0):
    """Phase currents of each circuit of a line on its own, balanced and residual parts.

    Parameters
    ----------
    load_current_a_per_circuit : array_like, shape (n_circuits,)
        rms load current of each circuit [A].
    phasing : sequence of str
        Per circuit, the phases of its three conductors in conductor order
        (``"ABC"``, ``"CBA"``, ...).
    residual_current_pct : array_like
        Residual current in percent of each circuit's load [%], scalar or per circuit.
    flow_direction : array_like
        +1 where the circuit's power flows in the line's digitised direction,
        −1 against it; scalar or per circuit.
    phase_offset_deg : array_like
        Phase-angle offset of the circuit's phase A against the common
        reference [deg] (for example 30° across a transformer); scalar or per
        circuit.

    Returns
    -------
    CircuitCurrents
        Balanced and residual conductor currents of each circuit alone [A].

    Notes
    -----
    I_k = s·I_L·e^{j(φ_k + δ)} (balanced, φ = 0°, −120°, +120° for A, B, C)
    and s·(I_r/3)·e^{jδ} (residual, I_r = pct/100·I_L), with s the flow
    direction and δ the offset (docs/methods.md §2.3). The EMF is linear in
    these currents, so any loading of the line (an outage, another split of
    the load) is a weighted sum of the rows.

    References
    ----------
    .. [1] ITU-T Directives concerning the protection of telecommunication
       lines against harmful effects from electric power lines, vol. II
       (residual current of unbalanced load; from memory).
    """
    load = np.atleast_1d(np.asarray(load_current_a_per_circuit, float))
    if isinstance(phasing, str):
        phasing = [phasing]
    n = load.size
    if len(phasing) != n:
        raise ValueError("one phasing string per circuit is required")
    pct = np.broadcast_to(np.asarray(residual_current_pct, float), load.shape)
    sign = np.broadcast_to(np.asarray(flow_direction, float), load.shape)
    shift = np.exp(1j * np.deg2rad(np.broadcast_to(np.asarray(phase_offset_deg, float),
                                                   load.shape)))
    balanced = np.zeros((n, 3 * n), complex)
    residual = np.zeros((n, 3 * n), complex)
    for c, code in enumerate(phasing):
        code = code.upper()
        if sorted(code) != ["A", "B", "C"]:
            raise ValueError(f"phasing {code!r} must be a permutation of 'ABC'")
        factor = sign[c] * shift[c]
        for i, ph in enumerate(code):
            balanced[c, 3 * c + i] = factor * load[c] * np.exp(1j * PHASE_ANGLE_RAD[ph])
            residual[c, 3 * c + i] = factor * pct[c] / 100.0 * load[c] / 3.0
    return CircuitCurrents(balanced, residual)


def outage_weights(load_current_a_per_circuit):
    """Loading scenarios of a line: as given, and each circuit out of service in turn.

    Parameters
    ----------
    load_current_a_per_circuit : array_like, shape (n_circuits,)
        rms load current of each circuit [A].

    Returns
    -------
    ndarray, shape (n_scenarios, n_circuits)
        Weight of each circuit's current in each scenario [-]. Row 0 is the
        loading as given (all ones). For a line of two or more circuits, row
        1 + c has circuit c out of service and the others carrying the line's
        total load, shared in proportion to their own loads.

    Notes
    -----
    With one circuit out, the line's total current I_tot = Σ I_c flows in the
    others: weight I_tot/(I_tot − I_c) on each remaining circuit. A single
    circuit line has only row 0.
    """
    load = np.atleast_1d(np.asarray(load_current_a_per_circuit, float))
    n = load.size
    rows = [np.ones(n)]
    total = load.sum()
    if n > 1:
        for c in range(n):
            rest = total - load[c]
            w = np.full(n, total / rest if rest > 0 else 0.0)
            w[c] = 0.0
            rows.append(w)
    return np.array(rows)


class WorstNormalEmf(NamedTuple):
    """Result of :func:`worst_normal_emf`."""

    #: Worst-case |EMF| of each segment over the unknowns [V].
    emf_v: np.ndarray
    #: Entry (row of the input) whose outage scenario governs each segment,
    #: −1 where the loading as given governs.
    governing_entry: np.ndarray
    #: Scenario column of that entry (0: as given).
    governing_scenario: np.ndarray


def worst_normal_emf(segment, line, group, emf_v, residual_emf_v, n_segments):
    """Worst-case normal-load EMF per segment over unknown directions, angles and outages.

    Parameters
    ----------
    segment, line : array_like of int, shape (n_entries,)
        Segment and line of each entry; entries of the same (segment, line)
        are summed first (for example the sections of a segment).
    group : array_like of int, shape (n_entries,)
        Phase group of the entry's line. Lines of one group have known
        relative flow directions and phase angles: their EMFs add as phasors.
        Different groups have unknown relative direction and angle.
    emf_v : array_like of complex, shape (n_entries,) or (n_entries, n_scenarios)
        EMF of the balanced load currents (earth-wire currents included) [V];
        column 0 is the loading as given, further columns the line's outage
        scenarios (repeat column 0 where a line has fewer scenarios).
    residual_emf_v : array_like of complex, same shape as ``emf_v``
        EMF of the line's residual current (earth-wire share included) [V];
        its angle is unknown.
    n_segments : int
        Number of segments.

    Returns
    -------
    WorstNormalEmf
        Worst |EMF| per segment and the scenario that governs it.

    Notes
    -----
    For phasors with unknown relative angles, max over the angles of
    |Σ_g e^{jψ_g}·G_g| = Σ_g |G_g| (all aligned; the triangle inequality is
    then an equality). An unknown flow direction is the special case ψ = π.
    The residual currents' angles are unknown too, so they add Σ_k |R_k|:

        |E|_worst = Σ_groups |Σ_{k∈g} E_k| + Σ_lines |R_k|        (docs/methods.md §8)

    Outages (N−1: one circuit of one line at a time): replacing line k's
    (E_k, R_k) by its scenario c changes the total by
    Δ = |G_g − E_k + E_k^c| − |G_g| + |R_k^c| − |R_k|; the worst scenario is
    the largest Δ > 0 of the segment. No enumeration over angles is needed.
    """
    seg = np.asarray(segment, np.int64)
    lin = np.asarray(line, np.int64)
    grp = np.asarray(group, np.int64)
    e = np.asarray(emf_v, complex)
    r = np.asarray(residual_emf_v, complex)
    if e.ndim == 1:
        e = e[:, None]
        r = r[:, None]
    n_scen = e.shape[1]
    out = np.zeros(n_segments)
    gov_entry = np.full(n_segments, -1, np.int64)
    gov_scen = np.zeros(n_segments, np.int64)
    if len(seg) == 0:
        return WorstNormalEmf(out, gov_entry, gov_scen)
    # one entry per (segment, line)
    n_line = int(lin.max()) + 1
    key = seg * n_line + lin
    uniq, first, inv = np.unique(key, return_index=True, return_inverse=True)
    inv = inv.ravel()
    n_u = len(uniq)
    eu = np.zeros((n_u, n_scen), complex)
    ru = np.zeros((n_u, n_scen), complex)
    for s in range(n_scen):
        eu[:, s] = complex_bincount(inv, e[:, s], n_u)
        ru[:, s] = complex_bincount(inv, r[:, s], n_u)
    useg = uniq // n_line
    ugrp = grp[first]
    # group phasor sums per (segment, group), as given
    n_grp = int(ugrp.max()) + 1
    g_uniq, g_inv = np.unique(useg * n_grp + ugrp, return_inverse=True)
    g_inv = g_inv.ravel()
    n_g = len(g_uniq)
    g_sum = complex_bincount(g_inv, eu[:, 0], n_g)
    out = (np.bincount(g_uniq // n_grp, weights=np.abs(g_sum), minlength=n_segments)
           + np.bincount(useg, weights=np.abs(ru[:, 0]), minlength=n_segments))
    if n_scen > 1:
        gs = g_sum[g_inv][:, None]
        delta = (np.abs(gs - eu[:, :1] + eu) - np.abs(gs)
                 + np.abs(ru) - np.abs(ru[:, :1]))
        delta[:, 0] = 0.0
        best_col = np.argmax(delta, axis=1)
        best = delta[np.arange(n_u), best_col]
        seg_best = np.zeros(n_segments)
        np.maximum.at(seg_best, useg, best)
        out = out + seg_best
        # the entry that attains it (any one where ties)
        hit = (best > 0) & (best >= seg_best[useg])
        rows = np.flatnonzero(hit)
        gov_entry[useg[rows]] = first[rows]
        gov_scen[useg[rows]] = best_col[rows]
    return WorstNormalEmf(out, gov_entry, gov_scen)
