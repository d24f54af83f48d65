"""Coupling stage: induced EMF, capacitive pickup and earth potential per segment.

Turns the exposure tables into arrays for :mod:`corridor.physics` and writes
the answers back per section, pair and segment.

Rules (documented in the README, Method):

- Mutual impedances between a line's conductors and an asset section use the
  *segment's own soil* (the soil polygon under the segment's midpoint); the
  line's own matrix (for the earth-wire currents) uses the same soil.
- Normal load: every line within reach contributes, with its phasing; all
  lines share one phase reference (phase A at 0°), the usual assumption for
  one synchronous network.
- Earth fault: one faulted line at a time; for each (asset, line) the faulted
  phase is the one giving the largest total EMF on the asset; the fault
  current flows through the whole exposure in one direction (conservative).
  The fault current at a section is interpolated linearly between the line's
  end values by the section's position along the line.
- Earth-wire currents: earth wires grounded at every tower, so
  Z_sp I_p + Z_ss I_s = 0 (multiconductor reduction) both in normal load and
  in a fault; this is where the screening factor k comes from.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from corridor.kinds import DEFAULT_RADIUS_M
from corridor.physics import capacitive, conductive, induction
from corridor.registry import registry

log = logging.getLogger(__name__)


@dataclass
class Coupling:
    """Coupling results.

    Attributes
    ----------
    section_emf_normal_v : complex, per section
        EMF of the section along the asset's direction, normal load [V].
    segment_emf_normal_v : complex, per segment
    fault_case_asset, fault_case_line : int, per fault case
        One case per (asset, line within reach).
    segment_emf_fault_v : complex, shape (n_segments,) per case, stored sparse
        ``fault_seg`` (segment index) and ``fault_emf_v`` per (case, segment).
    fault_phase : str, per case
        The faulted phase chosen.
    capacitive_current_a : complex, per segment
        Current the segment would drive to earth if grounded [A].
    earth_potential_fault_v : float, per segment
        Largest earth potential at the segment from a tower footing in a fault [V].
    screening_factor : complex, per fault case
        |E with earth wires| / |E without| for the chosen phase.
    """

    segment_emf_normal_v: np.ndarray
    fault_case_asset: np.ndarray
    fault_case_line: np.ndarray
    fault_case_phase: np.ndarray
    fault_case_clearing_s: np.ndarray
    fault_case_high_reliability: np.ndarray
    fault_case_screening: np.ndarray
    fault_seg: np.ndarray
    fault_case_of_entry: np.ndarray
    fault_emf_v: np.ndarray
    capacitive_current_a: np.ndarray
    earth_potential_fault_v: np.ndarray
    segment_fault_current_a: np.ndarray  # largest fault current of a line in reach


def _complex_bincount(index, values, n):
    return (np.bincount(index, weights=values.real, minlength=n)
            + 1j * np.bincount(index, weights=values.imag, minlength=n))


def _arrangement_arrays(arr):
    cond = arr.conductors
    x = np.array([c.x_m for c in cond])
    h = np.array([c.height_m for c in cond])
    r = np.array([c.radius_m for c in cond])
    gmr = np.array([c.gmr_m for c in cond])
    res = np.array([c.resistance_ohm_per_km for c in cond]) / 1000.0
    phase_idx = np.array([i for i, c in enumerate(cond) if c.circuit >= 0])
    ew_idx = np.array([i for i, c in enumerate(cond) if c.circuit < 0], dtype=int)
    phasing = []
    for ci in range(arr.n_circuits):
        phasing.append("".join(c.phase for c in cond if c.circuit == ci))
    return x, h, r, gmr, res, phase_idx, ew_idx, phasing


def couple(cfg, inputs, geo) -> Coupling:
    """Compute the coupling quantities of every asset segment.

    Parameters
    ----------
    cfg : corridor.config.Config
    inputs : corridor.io.layers.Inputs
    geo : corridor.pipeline.Geometry
    """
    f = cfg.run.frequency_hz
    seg = geo.segments
    n_seg = len(seg)
    pairs = geo.pairs
    sec = geo.sections
    lines = inputs.lines
    assets = inputs.assets
    sec_seg = pairs.segment[sec.pair]
    sec_line = pairs.line[sec.pair]
    sec_asset = seg.feature[sec_seg]
    rho = geo.soil_resistivity_ohm_m[sec_seg]
    asset_h = assets["height_m"].to_numpy(float)[sec_asset]
    # position along the line and fault current at each section
    line_len = geo.edges.line_length_m
    total_len = np.zeros(len(lines))
    if len(line_len):
        total_len[geo.edges.segments.feature] = line_len
    frac = np.clip(pairs.line_position_m[sec.pair] / np.maximum(total_len[sec_line], 1e-9),
                   0.0, 1.0)
    if_start = lines["fault_current_start_ka"].to_numpy(float) * 1000.0
    if_end = lines["fault_current_end_ka"].to_numpy(float) * 1000.0
    i_fault = if_start[sec_line] + (if_end[sec_line] - if_start[sec_line]) * frac

    emf_normal_sec = np.zeros(len(sec), complex)
    cap_sec = np.zeros(len(sec), complex)
    # fault EMF per section per candidate phase (up to 6 phases per arrangement)
    max_phases = max((len(_arrangement_arrays(a)[5]) for a in cfg.arrangements.values()),
                     default=3)
    fault_sec = np.zeros((len(sec), max_phases), complex)
    fault_unscreened = np.zeros((len(sec), max_phases), complex)
    phase_labels = np.full((len(lines), max_phases), "", dtype=object)
    load = lines["load_current_a"].to_numpy(float)
    resid = lines["residual_current_pct"].to_numpy(float)
    kv = lines["voltage_kv"].to_numpy(float)
    arr_names = lines["arrangement"].to_numpy(dtype=object)
    is_above = asset_h > 0.0
    asset_radius = _asset_radius(assets)[sec_asset]

    for name in sorted(set(arr_names)):
        arr = cfg.arrangements[name]
        x, h, r, gmr, res, p_idx, s_idx, phasing = _arrangement_arrays(arr)
        conductor_phase = [c.phase if c.circuit >= 0 else "" for c in arr.conductors]
        line_rows = np.flatnonzero(arr_names == name)
        for li in line_rows:
            for j, k in enumerate(p_idx):
                ckt = arr.conductors[k].circuit + 1
                phase_labels[li, j] = f"{arr.conductors[k].phase}{ckt}"
        in_arr = np.isin(sec_line, line_rows)
        if not in_arr.any():
            continue
        idx = np.flatnonzero(in_arr)
        # conductor currents per unique soil: normal load per line, unit faults
        rhos, inv = np.unique(rho[idx], return_inverse=True)
        line_local = {li: i for i, li in enumerate(line_rows)}
        ip_all = np.array([
            induction.normal_phase_currents(np.full(arr.n_circuits, load[li]), phasing,
                                            resid[li]) for li in line_rows])
        currents = induction.conductor_currents(x, h, gmr, res, p_idx, s_idx, ip_all, rhos, f)
        li_local = np.array([line_local[v] for v in sec_line[idx]])
        zma = induction.asset_mutual_impedance(x, h, sec.offset_m[idx], asset_h[idx], rho[idx], f)
        e_normal = induction.emf_per_m(zma, currents.normal_a[inv, li_local])
        emf_normal_sec[idx] = e_normal * sec.projected_length_m[idx]
        fe = induction.fault_emf_per_m(zma, currents.fault_per_unit[inv], p_idx, i_fault[idx])
        fault_sec[idx, :len(p_idx)] = fe.emf_v_per_m * sec.projected_length_m[idx, None]
        fault_unscreened[idx, :len(p_idx)] = (fe.unscreened_emf_v_per_m
                                              * sec.projected_length_m[idx, None])
        # electric field: above-ground assets only
        above = idx[is_above[idx]]
        if len(above):
            for li in np.unique(sec_line[above]):
                sel = above[sec_line[above] == li]
                v_ph = capacitive.phase_to_earth_voltages(kv[li], conductor_phase)
                cc = capacitive.capacitive_coupling(
                    x, h, r, v_ph, sec.offset_m[sel], asset_h[sel], asset_radius[sel], f)
                # the current a section drives scales with its length along the line
                seg_len = seg.length_m[sec_seg[sel]]
                pair_proj = np.abs(pairs.projected_length_m[sec.pair[sel]])
                share = np.abs(sec.projected_length_m[sel]) / np.where(pair_proj > 0, pair_proj,
                                                                       1.0)
                cap_sec[sel] = cc.short_circuit_current_a_per_m * seg_len * share

    segment_emf_normal = _complex_bincount(sec_seg, emf_normal_sec, n_seg)
    cap_seg = _complex_bincount(sec_seg, cap_sec, n_seg)

    # fault cases: one per (asset, line) pair with any exposure
    key_asset = sec_asset
    case_key = key_asset.astype(np.int64) * (len(lines) + 1) + sec_line
    case_ids, case_of_sec = np.unique(case_key, return_inverse=True)
    n_case = len(case_ids)
    case_asset = case_ids // (len(lines) + 1)
    case_line = case_ids % (len(lines) + 1)
    exposure = induction.exposure_fault_emf(fault_sec, fault_unscreened, case_of_sec, n_case)
    worst = exposure.worst_phase
    sec_emf = exposure.section_emf_v
    # per (case, segment)
    entry_key = case_of_sec.astype(np.int64) * n_seg + sec_seg
    entries, entry_of_sec = np.unique(entry_key, return_inverse=True)
    fault_emf = _complex_bincount(entry_of_sec, sec_emf, len(entries))
    clearing = lines["clearing_time_s"].to_numpy(float)
    hirel = lines["high_reliability"].to_numpy(bool)

    seg_fault_current = np.zeros(n_seg)
    np.maximum.at(seg_fault_current, sec_seg, np.abs(i_fault))

    epr = earth_potential(cfg, inputs, geo, total_len)
    return Coupling(
        segment_emf_normal_v=segment_emf_normal,
        fault_case_asset=case_asset,
        fault_case_line=case_line,
        fault_case_phase=phase_labels[case_line, worst] if n_case else np.zeros(0, object),
        fault_case_clearing_s=clearing[case_line],
        fault_case_high_reliability=hirel[case_line],
        fault_case_screening=exposure.screening_factor,
        fault_seg=(entries % n_seg).astype(np.int64),
        fault_case_of_entry=(entries // n_seg).astype(np.int64),
        fault_emf_v=fault_emf,
        capacitive_current_a=cap_seg,
        earth_potential_fault_v=epr,
        segment_fault_current_a=seg_fault_current,
    )


def _asset_radius(assets) -> np.ndarray:
    """Equivalent radius of each asset for the electric-field coupling [m].

    From the attribute its kind declares (:attr:`corridor.kinds.AssetKind.radius`);
    :data:`corridor.kinds.DEFAULT_RADIUS_M` for a kind that declares none.
    """
    kind = assets["asset_kind"].to_numpy(dtype=object)
    out = np.full(len(assets), DEFAULT_RADIUS_M)
    for k in registry.kinds():
        if k.radius is None or k.radius.column not in assets:
            continue
        values = assets[k.radius.column].to_numpy(float)
        out = np.where(kind == k.name, np.nan_to_num(values, nan=k.radius.missing)
                       * k.radius.factor, out)
    return out


def tower_positions(cfg, inputs, total_len: np.ndarray):
    """Towers as (line index, position along the line [m]), sorted.

    From the tower layer where given (each tower projected onto its line),
    otherwise one every ``run.tower_span_m`` from each line's start.
    """
    lines = inputs.lines
    if inputs.towers is not None and len(inputs.towers):
        import shapely

        ids = {v: i for i, v in enumerate(lines["line_id"])}
        t = inputs.towers
        li = np.array([ids.get(v, -1) for v in t["line_id"]], dtype=np.int64)
        ok = li >= 0
        pos = shapely.line_locate_point(lines.geometry.to_numpy()[li[ok]],
                                        t.geometry.to_numpy()[ok])
        li = li[ok]
    else:
        span = cfg.run.tower_span_m
        counts = np.floor(total_len / span).astype(np.int64) + 1
        li = np.repeat(np.arange(len(lines)), counts)
        pos = (np.arange(len(li)) - np.repeat(np.cumsum(counts) - counts, counts)) * span
    order = np.lexsort((pos, li))
    return li[order], np.asarray(pos, float)[order]


def earth_potential(cfg, inputs, geo, total_len: np.ndarray) -> np.ndarray:
    """Largest earth potential at each segment from a faulted tower's footing [V].

    The tower nearest along the line to the segment's projection (and its two
    neighbours) is taken; distance is √(separation² + Δs²). Each faulted
    tower discharges ``run.tower_current_share`` of the local fault current
    (hemisphere approximation V = ρI/(2πr); IEEE Std 80, Sunde 1968).
    """
    seg = geo.segments
    out = np.zeros(len(seg))
    pairs = geo.pairs
    if len(pairs) == 0:
        return out
    zone = cfg.run.tower_zone_m
    near = pairs.min_separation_m <= zone
    if not near.any():
        return out
    t_line, t_pos = tower_positions(cfg, inputs, total_len)
    if len(t_line) == 0:
        return out
    lines = inputs.lines
    p_line = pairs.line[near]
    p_pos = pairs.line_position_m[near]
    p_sep = pairs.separation_m[near]
    p_seg = pairs.segment[near]
    key_t = t_line * 1e9 + t_pos
    key_p = p_line * 1e9 + p_pos
    base = np.searchsorted(key_t, key_p)
    frac = np.clip(p_pos / np.maximum(total_len[p_line], 1e-9), 0, 1)
    if_s = lines["fault_current_start_ka"].to_numpy(float)[p_line] * 1000.0
    if_e = lines["fault_current_end_ka"].to_numpy(float)[p_line] * 1000.0
    i_tower = cfg.run.tower_current_share * (if_s + (if_e - if_s) * frac)
    rho = geo.soil_resistivity_ohm_m[p_seg]
    best = np.zeros(len(p_seg))
    for off in (-1, 0):
        k = np.clip(base + off, 0, len(t_line) - 1)
        same = t_line[k] == p_line
        ds = t_pos[k] - p_pos
        r = np.hypot(p_sep, ds)
        v = conductive.earth_potential_hemisphere(i_tower, rho, r, cfg.run.footing_radius_m)
        v = np.where(same & (r <= zone), np.abs(v), 0.0)
        best = np.maximum(best, v)
    np.maximum.at(out, p_seg, best)
    return out
