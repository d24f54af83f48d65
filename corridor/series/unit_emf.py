"""Each circuit's EMF per ampere on every segment, and the circuit phasors of every step.

The normal-load EMF along an asset is linear in the circuits' current phasors
m = I·s·e^{jδ} (rms current I, flow direction s, phase offset δ;
:func:`corridor.physics.induction.circuit_phase_currents`). This module
computes the EMF of every segment for m = 1 A on one circuit at a time, split
like the snapshot's components (docs/methods.md §8): the balanced part, which
adds with the other lines of the circuit's phase group, and the residual
part, which adds only within its own line. The coupling stage
(:mod:`corridor.steps.couple`) evaluates the same physics once at the loads
of the layer; a constant series reproduces it (docs/methods.md §15).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from corridor.physics import induction

__all__ = ["UnitEmf", "unit_emf", "circuit_phasors"]


@dataclass
class UnitEmf:
    """Sparse per-(segment, circuit, part) EMF per ampere.

    Attributes
    ----------
    segment : ndarray of int
        Segment of each entry.
    circuit : ndarray of int
        Global circuit index (``circuit_offset[line] + c``).
    part : ndarray of int
        0 balanced, 1 residual.
    emf_v_per_a : ndarray of complex
        Segment EMF along the chain per ampere of the circuit's phasor [V/A]
        (telecom sheath factor not yet applied).
    line_of_circuit : ndarray of int
        Power line of every global circuit.
    circuit_offset : ndarray of int, per line
        Index of the line's first circuit.
    """

    segment: np.ndarray
    circuit: np.ndarray
    part: np.ndarray
    emf_v_per_a: np.ndarray
    line_of_circuit: np.ndarray
    circuit_offset: np.ndarray


def _circuit_layout(cfg, lines):
    arr_names = lines["arrangement"].to_numpy(dtype=object)
    n_circ = np.array([cfg.arrangements[a].n_circuits for a in arr_names], np.int64)
    offset = np.cumsum(n_circ) - n_circ
    return n_circ, offset


def unit_emf(cfg, inputs, geo) -> UnitEmf:
    """EMF per ampere of every circuit on every segment within its reach.

    Mirrors the normal-load part of :func:`corridor.steps.couple.couple`
    (same soils, mutual impedances and earth-wire reduction) with a unit
    phasor on each circuit.
    """
    from corridor.steps.couple import arrangement_arrays, section_soil

    f = cfg.run.frequency_hz
    pairs, sec, lines = geo.pairs, geo.sections, inputs.lines
    sec_seg = pairs.segment[sec.pair]
    sec_line = pairs.line[sec.pair]
    sec_asset = geo.segments.feature[sec_seg]
    rho, rho2, t_top, layered = section_soil(geo, sec_seg)
    asset_h = inputs.assets["height_m"].to_numpy(float)[sec_asset]
    resid = lines["residual_current_pct"].to_numpy(float)
    arr_names = lines["arrangement"].to_numpy(dtype=object)
    n_circ, c_off = _circuit_layout(cfg, lines)
    segs, circs, parts, vals = [], [], [], []
    for name in sorted(set(arr_names)):
        arr = cfg.arrangements[name]
        x, h, _r, gmr, res, p_idx, s_idx, phasing = arrangement_arrays(arr)
        line_rows = np.flatnonzero(arr_names == name)
        idx = np.flatnonzero(np.isin(sec_line, line_rows))
        if not idx.size:
            continue
        if layered:
            soil_key = np.stack([rho[idx], np.nan_to_num(rho2[idx], nan=-1.0),
                                 np.nan_to_num(t_top[idx], nan=-1.0)])
            soils, inv = np.unique(soil_key, axis=1, return_inverse=True)
            soil_layers = {"bottom_resistivity_ohm_m": np.where(soils[1] > 0, soils[1], np.nan),
                           "top_thickness_m": np.where(soils[2] > 0, soils[2], np.nan)}
        else:
            rhos, inv = np.unique(rho[idx], return_inverse=True)
            soils = rhos[None, :]
            soil_layers = {}
        inv = inv.ravel()
        nc = arr.n_circuits
        line_local = {li: i for i, li in enumerate(line_rows)}
        cases = []
        for li in line_rows:
            cc = induction.circuit_phase_currents(np.ones(nc), phasing, resid[li], 1.0, 0.0)
            cases.append(np.vstack([cc.balanced_a, cc.residual_a]))
        currents = induction.conductor_currents(x, h, gmr, res, p_idx, s_idx, np.vstack(cases),
                                                soils[0], f, **soil_layers)
        li_local = np.array([line_local[v] for v in sec_line[idx]])
        sec_layers = ({"bottom_resistivity_ohm_m": rho2[idx], "top_thickness_m": t_top[idx]}
                      if layered else {})
        zma = induction.asset_mutual_impedance(x, h, sec.offset_m[idx], asset_h[idx], rho[idx],
                                               f, **sec_layers)
        rows = li_local[:, None] * 2 * nc + np.arange(2 * nc)[None, :]
        e = induction.emf_per_m(zma, currents.normal_a[inv[:, None], rows])
        e = e * sec.projected_length_m[idx, None]  # (n_idx, 2·nc) [V/A]
        for part in (0, 1):
            for c in range(nc):
                segs.append(sec_seg[idx])
                circs.append(c_off[sec_line[idx]] + c)
                parts.append(np.full(idx.size, part, np.int64))
                vals.append(e[:, part * nc + c])
    if segs:
        seg_a, circ_a = np.concatenate(segs), np.concatenate(circs)
        part_a, val_a = np.concatenate(parts), np.concatenate(vals)
        n_c = int(n_circ.sum())
        key = (seg_a.astype(np.int64) * max(n_c, 1) + circ_a) * 2 + part_a
        uniq, inv2 = np.unique(key, return_inverse=True)
        inv2 = inv2.ravel()
        val = (np.bincount(inv2, weights=val_a.real, minlength=uniq.size)
               + 1j * np.bincount(inv2, weights=val_a.imag, minlength=uniq.size))
        part_u = uniq % 2
        circ_u = (uniq // 2) % max(n_c, 1)
        seg_u = (uniq // 2) // max(n_c, 1)
    else:
        seg_u = circ_u = part_u = np.zeros(0, np.int64)
        val = np.zeros(0, complex)
    return UnitEmf(seg_u.astype(np.int64), circ_u.astype(np.int64), part_u.astype(np.int64),
                   val, np.repeat(np.arange(len(lines)), n_circ), c_off)


def circuit_phasors(cfg, lines, series, steps: slice | None = None) -> np.ndarray:
    """Phasor m = I·s·e^{jδ} of every circuit at every step [A], shape (n_circuits, n_steps).

    Lines the series does not name keep the layer's loading at every step; a
    series row without a circuit number sets every circuit of its line, a row
    with one overrides that circuit. Direction and offset come from the
    series where given, else from the layer (line and circuit values folded,
    :func:`corridor.steps.couple.line_loading`).
    """
    from corridor.steps.couple import line_loading

    loading = line_loading(cfg, lines, {n: a.n_circuits for n, a in cfg.arrangements.items()})
    n_circ, c_off = _circuit_layout(cfg, lines)
    sl = steps if steps is not None else slice(None)
    n_t = len(range(*sl.indices(series.n_steps)))
    total = int(n_circ.sum())
    cur = np.empty((total, n_t))
    dirn = np.empty((total, n_t))
    off = np.empty((total, n_t))
    for li in range(len(lines)):
        for c in range(n_circ[li]):
            g = c_off[li] + c
            cur[g] = loading.circuit_load_a[li][c]
            dirn[g] = loading.circuit_direction[li][c]
            off[g] = loading.circuit_offset_deg[li][c]
    index = {v: i for i, v in enumerate(lines["line_id"].astype(str))}
    # line-wide rows first, then circuit rows override them
    for k in sorted(range(len(series.keys)), key=lambda k: series.keys[k][1] > 0):
        line, c = series.keys[k]
        if line not in index:
            continue
        li = index[line]
        targets = [c_off[li] + c - 1] if c > 0 else list(c_off[li] + np.arange(n_circ[li]))
        for g in targets:
            cur[g] = series.current_a[k, sl]
            d = series.flow_direction[k, sl]
            o = series.phase_offset_deg[k, sl]
            dirn[g] = np.where(np.isnan(d), dirn[g], d)
            off[g] = np.where(np.isnan(o), off[g], o)
    return cur * dirn * np.exp(1j * np.deg2rad(off))
