"""Stage helpers shared by the stages and the grounding design.

Turning the response into segment-table columns, the per-segment categories
a limit set selects by, and the run's limit set. What applies to which
segment follows the asset kinds' capabilities (:class:`corridor.kinds.AssetKind`),
never their names.
"""

from __future__ import annotations

import numpy as np

from corridor.limits.limit_sets import DEFAULT_SEARCH_DIR, load_limit_set
from corridor.registry import registry


def kinds_with(kind: np.ndarray, capability: str) -> np.ndarray:
    """Per row: does the asset kind in ``kind`` have the (boolean) ``capability``?"""
    out = np.zeros(len(kind), bool)
    for k in registry.kinds():
        if getattr(k, capability):
            out |= kind == k.name
    return out


def response_columns(run, rs, t) -> None:
    """Write the response (and coupling) results into segment table ``t``.

    ``t`` holds the rows of ``rs.segments`` (all segments, or the segments of
    the assets a partial re-solve covered), in that order.
    """
    cp = run.coupling
    sel = rs.segments
    length_km = t["length_m"].to_numpy(float) / 1000.0
    emf_n = np.abs(rs.segment_emf_normal_v)
    emf_f = rs.emf_fault_v
    lines = run.inputs.lines
    case = rs.fault_case_of_segment
    has = case >= 0
    cs = np.where(has, case, 0)
    line_ids = lines["line_id"].to_numpy(dtype=object)
    n_case = len(cp.fault_case_line)

    def by_case(values, fill):
        if n_case == 0:
            return np.full(len(t), fill)
        return np.where(has, np.asarray(values)[cs], fill)

    kind = t["asset_kind"].to_numpy(dtype=object)
    coated = kinds_with(kind, "coated")
    section = kinds_with(kind, "section_emf")
    t["emf_normal_v_per_km"] = emf_n / length_km
    t["emf_fault_v_per_km"] = emf_f / length_km
    t["emf_normal_v"] = emf_n
    # the normal-load loading that governs the worst case (docs/methods.md §8)
    governing = getattr(cp, "normal_governing", None)
    t["normal_scenario"] = (np.asarray(governing, dtype=object)[sel] if governing is not None
                            else np.full(len(t), "as given", dtype=object))
    t["emf_fault_v"] = emf_f
    t["v_normal_v"] = rs.v_normal_v
    t["i_normal_a"] = rs.i_normal_a
    t["normal_source_impedance_ohm"] = rs.normal_source_impedance_ohm
    t["i_normal_body_ma"] = rs.i_normal_body_ma
    t["v_fault_v"] = rs.v_fault_v
    t["i_fault_a"] = rs.i_fault_a
    t["fault_source_impedance_ohm"] = rs.fault_source_impedance_ohm
    t["fault_line_id"] = by_case(line_ids[cp.fault_case_line] if n_case else [], "")
    t["fault_position_m"] = rs.fault_position_m
    t["fault_phase"] = by_case(cp.fault_case_phase, "")
    t["clearing_time_s"] = by_case(cp.fault_case_clearing_s, np.nan).astype(float)
    sub_clear = getattr(cp, "substation_clearing_s", None)
    if sub_clear is not None:  # a substation's earth potential governs: the longer time
        sc = np.asarray(sub_clear, float)[sel]
        ct = t["clearing_time_s"].to_numpy(float)
        t["clearing_time_s"] = np.where(np.isfinite(sc), np.fmax(ct, sc), ct)
    t["high_reliability"] = by_case(cp.fault_case_high_reliability, False).astype(bool)
    t["screening_factor"] = by_case(np.abs(cp.fault_case_screening), np.nan).astype(float)
    t["fault_current_ka"] = cp.segment_fault_current_a[sel] / 1000.0
    epr = cp.earth_potential_fault_v[sel]
    t["earth_potential_fault_v"] = epr
    # touch during a fault: induced voltage plus earth potential rise (conservative
    # sum), loaded by a 1000 ohm body through the asset's source impedance
    t["v_touch_fault_v"] = (rs.v_fault_v + epr) * rs.touch_loading
    t["v_coating_stress_v"] = np.where(coated, rs.v_fault_v + epr, np.nan)
    t["v_step_fault_v"] = cp.step_voltage_fault_v[sel]
    # electric-field coupling: a kind carried above ground, or any asset above ground
    above = kinds_with(kind, "above_ground") | (
        run.inputs.assets["height_m"].to_numpy(float)[run.geometry.segments.feature[sel]] > 0)
    t["v_capacitive_open_v"] = np.where(above, rs.v_capacitive_open_v, 0.0)
    t["i_capacitive_short_ma"] = np.where(above, rs.i_capacitive_short_ma, 0.0)
    t["i_capacitive_body_ma"] = np.where(above, rs.i_capacitive_body_ma, 0.0)
    t["capacitive_source_impedance_ohm"] = np.where(above, rs.capacitive_source_impedance_ohm,
                                                    np.nan)
    # DC (cathodic-protection) current density where the operator gives it, for ISO 18086's
    # combined criteria (corridor.steps.assess)
    assets = run.inputs.assets
    if "dc_current_density_a_per_m2" in assets:
        j_dc = assets["dc_current_density_a_per_m2"].to_numpy(float)
        t["dc_current_density_a_per_m2"] = np.where(
            coated, j_dc[run.geometry.segments.feature[sel]], np.nan)
    t["emf_section_normal_v"] = np.where(section, rs.emf_section_normal_v, np.nan)
    # in a fault: the longitudinal EMF plus the local earth potential of a faulted tower
    # (conductive coupling; magnitudes added, conservative; docs/methods.md §4.2)
    t["emf_section_fault_v"] = np.where(section, rs.emf_section_fault_v + epr, np.nan)


def load_config_limit_set(cfg):
    """The limit set a configuration names, with its ``[limits]`` overrides.

    The registered asset kinds are handed to the loader, so that a plugin's
    limit set may name its own kind in ``applies_to``.
    """
    return load_limit_set(cfg.run.limit_set, dict(cfg.limit_overrides) or None,
                          search_dir=DEFAULT_SEARCH_DIR, asset_kinds=registry.kind_names())


def load_run_limit_set(run):
    """The run's limit set (loaded once and kept on the run)."""
    if run.limit_set is None:
        run.limit_set = load_config_limit_set(run.config)
    return run.limit_set


def categories(run, sel=None) -> dict:
    """Per-segment labels the limit set may select values by (segments ``sel``)."""
    cat = {}
    feat = run.geometry.segments.feature
    if sel is not None:
        feat = feat[sel]
    if "coating_type" in run.inputs.assets:
        cat["coating_type"] = run.inputs.assets["coating_type"].to_numpy(dtype=object)[
            feat].astype(str)
    return cat
