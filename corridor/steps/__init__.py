"""Computing stages after the exposure geometry, in run order.

Each stage is ``fn(run)``: it reads what earlier stages left on the
:class:`corridor.pipeline.Run` and adds its own results and columns.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd

log = logging.getLogger(__name__)

LIMITS_DIR = Path(__file__).resolve().parents[2] / "config" / "limits"


def stage_couple(run) -> None:
    """Induced EMF, capacitive pickup and earth potential per segment."""
    from corridor.steps.couple import couple

    run.coupling = couple(run.config, run.inputs, run.geometry)


def stage_respond(run) -> None:
    """Voltages and currents along every asset."""
    from corridor.steps.respond import respond

    rs = respond(run.config, run.inputs, run.geometry, run.coupling)
    run.response = rs
    for fid, fld, reason in rs.rejected:
        run.inputs.rejected.add(run.config.grounds.label, fid, fld, reason)
    run.counts["grounds_rejected"] = len(rs.rejected)
    response_columns(run, rs, run.segment_table)


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
    t["emf_normal_v_per_km"] = emf_n / length_km
    t["emf_fault_v_per_km"] = emf_f / length_km
    t["emf_normal_v"] = emf_n
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
    t["high_reliability"] = by_case(cp.fault_case_high_reliability, False).astype(bool)
    t["screening_factor"] = by_case(np.abs(cp.fault_case_screening), np.nan).astype(float)
    t["fault_current_ka"] = cp.segment_fault_current_a[sel] / 1000.0
    epr = cp.earth_potential_fault_v[sel]
    t["earth_potential_fault_v"] = epr
    # touch during a fault: induced voltage plus earth potential rise (conservative
    # sum), loaded by a 1000 ohm body through the asset's source impedance
    t["v_touch_fault_v"] = (rs.v_fault_v + epr) * rs.touch_loading
    t["v_coating_stress_v"] = np.where(kind == "pipeline", rs.v_fault_v + epr, np.nan)
    t["v_step_fault_v"] = cp.step_voltage_fault_v[sel]
    above = (kind == "fence") | (
        run.inputs.assets["height_m"].to_numpy(float)[run.geometry.segments.feature[sel]] > 0)
    t["v_capacitive_open_v"] = np.where(above, rs.v_capacitive_open_v, 0.0)
    t["i_capacitive_short_ma"] = np.where(above, rs.i_capacitive_short_ma, 0.0)
    t["i_capacitive_body_ma"] = np.where(above, rs.i_capacitive_body_ma, 0.0)
    t["capacitive_source_impedance_ohm"] = np.where(above, rs.capacitive_source_impedance_ohm,
                                                    np.nan)
    t["emf_section_normal_v"] = np.where(kind == "telecom", rs.emf_section_normal_v, np.nan)
    # telecom in a fault: the longitudinal EMF plus the local earth potential of a faulted
    # tower (conductive coupling; magnitudes added, conservative; docs/methods.md §4.2)
    t["emf_section_fault_v"] = np.where(kind == "telecom", rs.emf_section_fault_v + epr, np.nan)


def load_run_limit_set(run):
    """The run's limit set (loaded once and kept on the run)."""
    from corridor.limits.limit_sets import load_limit_set

    if run.limit_set is None:
        cfg = run.config
        run.limit_set = load_limit_set(cfg.run["limit_set"], dict(cfg.limit_overrides) or None,
                                       search_dir=LIMITS_DIR)
    return run.limit_set


def stage_assess(run) -> None:
    """Ratios to the limit set, utilization, governing criterion, class."""
    from corridor.steps.assess import assess

    limit_set = load_run_limit_set(run)
    t = run.segment_table
    res = assess(limit_set, t, categories(run))
    run.assessment = res
    q = res["quantities"]
    t["ac_density_a_per_m2"] = q["ac_density_a_per_m2"]
    for name, ratio in res["ratios"].items():
        t[f"ratio_{name}"] = ratio
    t["utilization"] = res["utilization"]
    t["governing"] = res["governing"]
    t["hazard_class"] = res["hazard_class"]


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


def stage_rank(run) -> None:
    """Rank 1 is the worst segment of the run; ties by asset id, then chainage."""
    load_run_limit_set(run)  # merged (cached) runs did not assess in this process
    t = run.segment_table
    order = np.lexsort((t["chainage_m"].to_numpy(), id_order_key(t["asset_id"]),
                        -t["utilization"].to_numpy(float)))
    rank = np.empty(len(t), np.int64)
    rank[order] = np.arange(1, len(t) + 1)
    t["rank"] = rank
    run.counts["segments_exceeding"] = int((t["utilization"] >= 1.0).sum())


def id_order_key(ids) -> np.ndarray:
    """Integer keys that sort like the ids themselves (code-point order of ``str``).

    Sorting a few thousand distinct ids and keying millions of rows by them is
    much faster than a sort on the strings of every row."""
    codes, uniques = pd.factorize(pd.Series(ids), sort=False)
    rank = np.empty(len(uniques), np.int64)
    rank[np.argsort(np.asarray(uniques, dtype=str), kind="stable")] = np.arange(len(uniques))
    return rank[codes]


def asset_stages() -> dict:
    """Per-asset stages after ``expose``: name -> function(run)."""
    from corridor.steps.ground import stage_ground

    return {"couple": stage_couple, "respond": stage_respond, "assess": stage_assess,
            "ground": stage_ground}


def run_stages() -> dict:
    """Run-wide stages on the merged per-asset results."""
    from corridor.steps.report_tables import stage_tables

    return {"rank": stage_rank, "tables": stage_tables}
