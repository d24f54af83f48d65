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
- Earth fault: one faulted electrical line at a time (the features sharing a
  ``line_id``), and every phase of it in turn: one fault case per (asset, line,
  phase) (:mod:`corridor.steps.fault_cases`), so the response stage keeps the worst
  over fault positions and faulted phases. The fault is fed from both ends
  of the line (two-terminal source model, docs/methods.md §8.1): this stage
  gives each section its EMF per ampere and its position along the line, and
  each case its fault positions with the currents from either end; the
  response stage scans the positions (§8.2).
- Earth-wire currents: earth wires grounded at every tower, so
  Z_sp I_p + Z_ss I_s = 0 (multiconductor reduction) both in normal load and
  in a fault; this is where the screening factor k comes from.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from corridor.kinds import DEFAULT_RADIUS_M
from corridor.physics import capacitive, induction
from corridor.physics._arrays import complex_bincount
from corridor.registry import registry
from corridor.steps import fault_cases, faultscan, substations
from corridor.steps.normal_load import (  # noqa: F401  (public names of this stage)
    LineLoading,
    WorstNormal,
    line_loading,
    normal_load_assumption,
    worst_case_normal,
)

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
        One case per (asset, line within reach, faulted phase).
    fault_seg, fault_case_of_entry, fault_emf_v : per (case, segment)
        The segment's EMF per case with the largest current either end feeds
        for any scanned position [V] (the scan itself is in the response stage).
    fault_case_phase : str, per case
        The case's faulted phase (``A1``: phase A of circuit 1).
    capacitive_current_a : complex, per segment
        Current the segment would drive to earth if grounded [A].
    earth_potential_fault_v : float, per segment
        Largest earth potential at the segment from a tower footing in a fault [V].
    fault_case_screening : complex, per fault case
        Σ E with earth wires / Σ E without, over the case's sections, for its phase.
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
    step_voltage_fault_v: np.ndarray  # per segment, 1 m step beside a faulted tower [V]
    # fault-position scan inputs (docs/methods.md §8.2)
    fault_section_segment: np.ndarray  # per section near a faulted line
    fault_section_case: np.ndarray
    fault_section_position_m: np.ndarray  # chainage along the electrical line
    fault_section_emf_v_per_a: np.ndarray  # EMF per ampere flowing from terminal A to B
    fault_positions: faultscan.FaultPositions  # per case
    #: Normal-load scenario that governs each segment: "as given" or "outage <line> circuit <n>".
    normal_governing: np.ndarray | None = None
    #: Components of the normal-load EMF whose relative angles are unknown, sparse per
    #: (component, segment): segment, slot (component's column, per asset) and EMF [V].
    normal_component_segment: np.ndarray | None = None
    normal_component_slot: np.ndarray | None = None
    normal_component_emf_v: np.ndarray | None = None
    #: Per segment: clearing time of the substation whose earth potential governs
    #: earth_potential_fault_v (NaN: a tower's, or none; docs/methods.md §18.4).
    substation_clearing_s: np.ndarray | None = None


def arrangement_arrays(arr):
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
    rho, rho2, t_top, layered = section_soil(geo, sec_seg)
    asset_h = assets["height_m"].to_numpy(float)[sec_asset]
    # electrical lines, their fault sources, and each section's place along its line
    line_len = geo.edges.line_length_m
    total_len = np.zeros(len(lines))
    if len(line_len):
        total_len[geo.edges.segments.feature] = line_len
    sources = faultscan.line_sources(cfg, inputs, total_len)
    sec_x = sources.route_position(sec_line, pairs.line_position_m[sec.pair])
    sec_route = sources.route[sec_line]
    sec_dir = sources.direction[sec_line]
    unit = np.ones(len(sec))

    emf_normal_sec = np.zeros(len(sec), complex)
    loading = line_loading(cfg, lines, {n: a.n_circuits for n, a in cfg.arrangements.items()},
                           sources.route, sources.direction)
    n_scen = loading.n_scenarios
    # per section: balanced and residual EMF of its line in each loading scenario [V]
    bal_sec = np.zeros((len(sec), n_scen), complex)
    res_sec = np.zeros((len(sec), n_scen), complex)
    cap_sec = np.zeros(len(sec), complex)
    # fault EMF per section per phase label (A1, B1, ..., matched across arrangements)
    labels, label_cols = fault_cases.phase_columns(cfg.arrangements)
    fault_sec = np.zeros((len(sec), len(labels)), complex)
    fault_unscreened = np.zeros((len(sec), len(labels)), complex)
    phase_present = np.zeros((len(sec), len(labels)), bool)
    resid = lines["residual_current_pct"].to_numpy(float)
    kv = lines["voltage_kv"].to_numpy(float)
    arr_names = lines["arrangement"].to_numpy(dtype=object)
    is_above = asset_h > 0.0
    asset_radius = _asset_radius(assets)[sec_asset]
    wire_count = _bonded_wire_count(assets)[sec_asset]
    share = section_share(pairs, sec) * _alongside(pairs, seg, geo.edges)[sec.pair]

    for name in sorted(set(arr_names)):
        arr = cfg.arrangements[name]
        x, h, r, gmr, res, p_idx, s_idx, phasing = arrangement_arrays(arr)
        conductor_phase = [c.phase if c.circuit >= 0 else "" for c in arr.conductors]
        line_rows = np.flatnonzero(arr_names == name)
        cols = label_cols[name]
        in_arr = np.isin(sec_line, line_rows)
        if not in_arr.any():
            continue
        idx = np.flatnonzero(in_arr)
        # conductor currents per unique soil: each circuit's balanced and residual load
        # currents on their own (the EMF is linear in them), unit faults
        if layered:
            soil_key = np.stack([rho[idx], np.nan_to_num(rho2[idx], nan=-1.0),
                                 np.nan_to_num(t_top[idx], nan=-1.0)])
            soils, inv = np.unique(soil_key, axis=1, return_inverse=True)
        else:  # homogeneous soils: a 1-D unique is much faster
            rhos, inv = np.unique(rho[idx], return_inverse=True)
            soils = rhos[None, :]
        inv = inv.ravel()
        soil_layers = {}
        if layered:
            soil_layers = {"bottom_resistivity_ohm_m": np.where(soils[1] > 0, soils[1], np.nan),
                           "top_thickness_m": np.where(soils[2] > 0, soils[2], np.nan)}
        line_local = {li: i for i, li in enumerate(line_rows)}
        nc = arr.n_circuits
        cases = []
        for li in line_rows:
            cc = induction.circuit_phase_currents(
                loading.circuit_load_a[li][:nc], phasing, resid[li],
                loading.circuit_direction[li][:nc], loading.circuit_offset_deg[li][:nc])
            cases.append(np.vstack([cc.balanced_a, cc.residual_a]))
        ip_all = np.vstack(cases)  # (n_lines·2·nc, n_phase)
        currents = induction.conductor_currents(x, h, gmr, res, p_idx, s_idx, ip_all, soils[0],
                                                f, **soil_layers)
        li_local = np.array([line_local[v] for v in sec_line[idx]])
        sec_layers = ({"bottom_resistivity_ohm_m": rho2[idx], "top_thickness_m": t_top[idx]}
                      if layered else {})
        zma = induction.asset_mutual_impedance(x, h, sec.offset_m[idx], asset_h[idx], rho[idx], f,
                                               **sec_layers)
        rows = li_local[:, None] * 2 * nc + np.arange(2 * nc)[None, :]
        e_cases = induction.emf_per_m(zma, currents.normal_a[inv[:, None], rows])
        e_cases = e_cases * sec.projected_length_m[idx, None]  # (n_idx, 2·nc) [V]
        weights = loading.weights[sec_line[idx]][:, :, :nc]  # (n_idx, n_scen, nc)
        bal_sec[idx] = np.einsum("psc,pc->ps", weights, e_cases[:, :nc])
        res_sec[idx] = np.einsum("psc,pc->ps", weights, e_cases[:, nc:])
        emf_normal_sec[idx] = bal_sec[idx, 0] + res_sec[idx, 0]
        # per ampere flowing along the electrical line from its terminal A to B
        fe = induction.fault_emf_per_m(zma, currents.fault_per_unit[inv], p_idx, unit[idx])
        along = (sec.projected_length_m[idx] * sec_dir[idx])[:, None]
        fault_sec[np.ix_(idx, cols)] = fe.emf_v_per_m * along
        fault_unscreened[np.ix_(idx, cols)] = fe.unscreened_emf_v_per_m * along
        phase_present[np.ix_(idx, cols)] = True
        # electric field: above-ground assets only
        above = idx[is_above[idx]]
        if len(above):
            for li in np.unique(sec_line[above]):
                sel = above[sec_line[above] == li]
                v_ph = capacitive.phase_to_earth_voltages(kv[li], conductor_phase)
                cc = capacitive.capacitive_coupling(
                    x, h, r, v_ph, sec.offset_m[sel], asset_h[sel], asset_radius[sel], f,
                    asset_wire_count=wire_count[sel], asset_wire_spacing_m=FENCE_WIRE_SPACING_M)
                # the current a section drives scales with its share of the segment
                seg_len = seg.length_m[sec_seg[sel]]
                cap_sec[sel] = cc.short_circuit_current_a_per_m * seg_len * share[sel]

    segment_emf_normal = complex_bincount(sec_seg, emf_normal_sec, n_seg)
    normal = worst_case_normal(sec_seg, sec_line, sec_asset, bal_sec, res_sec, loading, n_seg,
                               lines["line_id"].to_numpy(dtype=object), sources.route)
    # the EMF columns carry the worst case over the unknowns, with the phase of the loading
    # as given (the response solves the components separately: Coupling.normal_*)
    as_given = np.abs(segment_emf_normal)
    segment_emf_normal = np.where(as_given > 0, segment_emf_normal / np.where(
        as_given > 0, as_given, 1.0), 1.0) * normal.emf_v
    cap_seg = complex_bincount(sec_seg, cap_sec, n_seg)

    # fault cases: one per (asset, electrical line, faulted phase) with any exposure; the
    # scan keeps the worst over positions and phases (docs/methods.md §18.3)
    n_route = len(sources.route_length_m)
    fc = fault_cases.fault_cases(sec_asset, sec_route, fault_sec, fault_unscreened,
                                    phase_present, n_route)
    n_case = len(fc)
    n_base = int(fc.case_base.max()) + 1 if n_case else 0
    base_route = np.zeros(n_base, np.int64)
    base_route[fc.case_base] = fc.case_route
    case_line = sources.route_feature[fc.case_route] if n_case else np.zeros(0, np.int64)
    entry_sec = fc.section
    entry_case = fc.case_of_entry
    entry_emf = fc.emf_v_per_a  # per ampere
    # fault positions of each (asset, line) and the currents fed from either end
    base_of_entry = fc.case_base[entry_case]
    case_min = np.full(n_base, np.inf)
    case_max = np.full(n_base, -np.inf)
    np.minimum.at(case_min, base_of_entry, sec_x[entry_sec])
    np.maximum.at(case_max, base_of_entry, sec_x[entry_sec])
    t_line, t_pos = tower_positions(cfg, inputs, total_len)
    t_route, t_x = faultscan.route_towers(sources, t_line, t_pos)
    base_positions = faultscan.fault_positions(sources, base_route, case_min, case_max, t_route,
                                               t_x)
    positions = fault_cases.expand_positions(base_positions, fc.case_base)
    side_max = np.maximum(np.abs(positions.current_start_a), np.abs(positions.current_end_a))
    case_current = side_max.max(axis=1) if n_case else np.zeros(0)
    # per (case, segment): the EMF with the largest current either end feeds
    entry_seg = sec_seg[entry_sec]
    entry_key = entry_case.astype(np.int64) * n_seg + entry_seg
    entries, entry_of = np.unique(entry_key, return_inverse=True)
    fault_emf = complex_bincount(entry_of.ravel(), entry_emf * case_current[entry_case],
                                  len(entries))
    clearing = lines["clearing_time_s"].to_numpy(float)
    hirel = lines["high_reliability"].to_numpy(bool)

    # fault current at each segment's place along the line (largest over lines in reach)
    seg_fault_current = np.zeros(n_seg)
    if len(sec):
        np.maximum.at(seg_fault_current, sec_seg,
                      np.abs(sources.currents(sec_route, sec_x).fault_a))

    epr, step = faultscan.tower_earth_potential(cfg, geo, sources, t_route, t_x)
    # substations: a fault there is an event of its own; the larger earth potential counts
    sub = substations.substation_earth_potential(cfg, inputs, geo)
    sub_governs = sub.earth_potential_v > epr
    epr = np.maximum(epr, sub.earth_potential_v)
    step = np.maximum(step, sub.step_voltage_v)
    return Coupling(
        segment_emf_normal_v=segment_emf_normal,
        fault_case_asset=fc.case_asset,
        fault_case_line=case_line,
        fault_case_phase=np.asarray(labels, dtype=object)[fc.case_label] if n_case
        else np.zeros(0, object),
        fault_case_clearing_s=clearing[case_line],
        fault_case_high_reliability=hirel[case_line],
        fault_case_screening=fc.screening,
        fault_seg=(entries % n_seg).astype(np.int64),
        fault_case_of_entry=(entries // n_seg).astype(np.int64),
        fault_emf_v=fault_emf,
        capacitive_current_a=cap_seg,
        earth_potential_fault_v=epr,
        segment_fault_current_a=seg_fault_current,
        normal_governing=normal.governing,
        normal_component_segment=normal.component_segment,
        normal_component_slot=normal.component_slot,
        normal_component_emf_v=normal.component_emf_v,
        step_voltage_fault_v=step,
        fault_section_segment=entry_seg.astype(np.int64),
        fault_section_case=entry_case,
        fault_section_position_m=sec_x[entry_sec],
        fault_section_emf_v_per_a=entry_emf,
        fault_positions=positions,
        substation_clearing_s=np.where(sub_governs, sub.clearing_time_s, np.nan),
    )


def section_soil(geo, sec_seg: np.ndarray):
    """The soil under each section: ``(rho, rho2, t_top, layered)``.

    ``rho`` is the (top-layer) resistivity [Ω·m]; ``rho2`` and ``t_top`` the bottom-layer
    resistivity [Ω·m] and top-layer thickness [m] of a two-layer soil, NaN where the soil
    is homogeneous (all NaN, ``layered`` False, when no segment has two layers).
    """
    rho = geo.soil_resistivity_ohm_m[sec_seg]
    rho2_seg = getattr(geo, "soil_bottom_resistivity_ohm_m", None)
    t_seg = getattr(geo, "soil_top_thickness_m", None)
    layered = (rho2_seg is not None and t_seg is not None
               and bool(np.any(np.isfinite(rho2_seg) & np.isfinite(t_seg))))
    n = len(sec_seg)
    rho2 = np.asarray(rho2_seg, float)[sec_seg] if layered else np.full(n, np.nan)
    t_top = np.asarray(t_seg, float)[sec_seg] if layered else np.full(n, np.nan)
    return rho, rho2, t_top, layered


def section_share(pairs, sec) -> np.ndarray:
    """Each section's share of its segment's length, continuous in the crossing angle.

    A section's share is its part of the pair's projected length; a segment at exactly
    90° to the line projects to nothing, and there the share is the section's part of
    the separation range the segment spans (the limit of the projected share as the
    angle tends to 90°, up to the separation floor near a crossing), so the capacitive
    pickup of a perpendicular segment does not drop to zero (issue 15).
    """
    n_pairs = len(pairs)
    pair_proj = np.abs(pairs.projected_length_m[sec.pair])
    dsep = np.abs(sec.separation_end_m - sec.separation_start_m)
    tot = np.bincount(sec.pair, weights=dsep, minlength=n_pairs)[sec.pair]
    count = np.bincount(sec.pair, minlength=n_pairs)[sec.pair]
    by_sep = np.where(tot > 0, dsep / np.where(tot > 0, tot, 1.0), 1.0 / np.maximum(count, 1))
    projects = pair_proj > 1e-9
    return np.where(projects, np.abs(sec.projected_length_m) / np.where(projects, pair_proj,
                                                                         1.0), by_sep)


def _alongside(pairs, segments, edges) -> np.ndarray:
    """Fraction of each pair's segment that lies alongside the line feature, 0-1.

    The segment's projection on its edge clipped at the feature's ends, over the
    unclipped one: 1 beside the line, 0 for a segment wholly beyond an end, the
    part alongside for one straddling an end. A segment at 90° counts whole where
    its foot lies on the feature. The electric field of a line (two-dimensional
    model, docs/methods.md §3) acts only alongside it, so a segment beyond a line's
    end picks up nothing from it, and a line drawn as several features gives the
    pickup of the line as one feature (no segment counted twice at a joint;
    docs/methods.md §18).
    """
    n = len(pairs)
    if n == 0:
        return np.ones(0)
    e = edges.segments
    ej = pairs.edge
    si = pairs.segment
    elen = np.where(e.length_m[ej] > 0, e.length_m[ej], 1.0)
    tx = (e.x1_m[ej] - e.x0_m[ej]) / elen
    ty = (e.y1_m[ej] - e.y0_m[ej]) / elen
    sa = (segments.x0_m[si] - e.x0_m[ej]) * tx + (segments.y0_m[si] - e.y0_m[ej]) * ty
    sb = (segments.x1_m[si] - e.x0_m[ej]) * tx + (segments.y1_m[si] - e.y0_m[ej]) * ty
    lo = np.where(edges.is_first[ej], 0.0, -np.inf)
    hi = np.where(edges.is_last[ej], e.length_m[ej], np.inf)
    raw = np.abs(sb - sa)
    clipped = np.abs(np.clip(sb, lo, hi) - np.clip(sa, lo, hi))
    tiny = raw <= 1e-9 * np.maximum(segments.length_m[si], 1e-9)
    foot = 0.5 * (sa + sb)
    inside = ((foot >= lo) & (foot <= hi)).astype(float)
    return np.where(tiny, inside, np.minimum(clipped / np.where(tiny, 1.0, raw), 1.0))


#: Vertical spacing of bonded fence wires for the electric-field bundle [m] (common
#: practice; the induction model uses the same, asset_models.FENCE_WIRE_SPACING_M).
FENCE_WIRE_SPACING_M = 0.3


def _bonded_wire_count(assets) -> np.ndarray:
    """Bonded wires of each asset for the electric-field coupling (fences: wire_count)."""
    kind = assets["asset_kind"].to_numpy(dtype=object)
    out = np.ones(len(assets), np.int64)
    if "wire_count" in assets:
        wc = assets["wire_count"].to_numpy(float)
        out = np.where((kind == "fence") & np.isfinite(wc) & (wc >= 1),
                       np.nan_to_num(wc, nan=1.0), 1).astype(np.int64)
    return out


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


def _tower_feature(lines, towers) -> np.ndarray:
    """Feature each tower stands on: the nearest feature of its line (-1: unknown line).

    A line drawn in several features (one ``line_id``) gets each tower on the feature
    it is nearest to (docs/methods.md §18).
    """
    import shapely

    parts: dict[str, list[int]] = {}
    for i, v in enumerate(lines["line_id"].astype(str)):
        parts.setdefault(v, []).append(i)
    geoms = lines.geometry.to_numpy()
    out = np.full(len(towers), -1, np.int64)
    for k, (v, pt) in enumerate(zip(towers["line_id"].astype(str), towers.geometry,
                                    strict=True)):
        cand = parts.get(v)
        if not cand:
            continue
        out[k] = cand[int(np.argmin(shapely.distance(geoms[cand], pt)))] if len(cand) > 1 \
            else cand[0]
    return out


def tower_positions(cfg, inputs, total_len: np.ndarray):
    """Towers as (line index, position along the line [m]), sorted.

    From the tower layer where given (each tower projected onto its line),
    otherwise one every ``run.tower_span_m`` from each line's start.
    """
    lines = inputs.lines
    if inputs.towers is not None and len(inputs.towers):
        import shapely

        t = inputs.towers
        li = _tower_feature(lines, t)
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
