"""The load-series stages: per asset (hours above limit, ISO 18086 mean) and run-wide (record).

:func:`stage_series` runs after the assess stage on the same assets (a whole
run, a partition or the assets the cache recomputes) and adds per-segment
columns; :func:`stage_series_record` runs after the merge and lists the
series' problems in run.json and the report. Both do nothing when the config
has no ``[load_series]`` section (docs/methods.md §15).
"""

from __future__ import annotations

import functools
import logging

import numpy as np
import pandas as pd

from corridor.series.table import LoadSeries, read_load_series

log = logging.getLogger(__name__)

__all__ = ["stage_series", "stage_series_record", "load_series_of", "SERIES_COLUMNS",
           "ISO18086_CLAUSE", "asset_series_columns", "TIME_VARYING_QUANTITIES"]

#: Clause the averaged AC current density is assessed by.
ISO18086_CLAUSE = ("ISO 18086:2019 clause 7: the AC corrosion risk is acceptable where, over a"
                   " representative period (for example 24 h), the mean AC current density is"
                   " below 30 A/m², or the DC density is below 1 A/m², or their ratio is below"
                   " 3 (values from memory; check the edition in use)")
#: Steady-state quantities that follow the normal-load voltage of a segment in proportion.
TIME_VARYING_QUANTITIES = ("v_normal_v", "i_normal_body_ma", "ac_density_a_per_m2")
#: Per-segment columns the stage adds (``hours_above_<criterion>_h`` come on top).
SERIES_COLUMNS = ("hours_above_limit_h", "fraction_above_limit", "asset_hours_above_limit_h",
                  "v_normal_peak_v", "v_normal_peak_utc", "ac_density_mean_max_a_per_m2",
                  "ac_density_mean_end_utc", "iso18086_mean_ratio", "series_bounded")
CURVE_POINTS = 101
CURVES_CSV = "csv:load_series_curves.csv"


def _line_circuits(cfg, lines) -> dict[str, int]:
    arr = lines["arrangement"].to_numpy(dtype=object)
    return {str(i): int(cfg.arrangements[a].n_circuits)
            for i, a in zip(lines["line_id"].astype(str), arr, strict=True)}


@functools.lru_cache(maxsize=4)
def _cached(settings, circuits: tuple) -> LoadSeries:
    return read_load_series(settings, dict(circuits))


def load_series_of(cfg, lines) -> LoadSeries:
    """The run's checked load series (read once per process and file)."""
    return _cached(cfg.load_series, tuple(sorted(_line_circuits(cfg, lines).items())))


def _criteria(limit_set):
    """Steady-state criteria of the limit set: (time-varying, constant-in-load)."""
    varying, constant = [], []
    for c in getattr(limit_set, "criteria", ()):
        if c.case == "normal" and c.quantity in TIME_VARYING_QUANTITIES:
            varying.append(c)
        elif c.case == "capacitive":
            constant.append(c)
    return varying, constant


def stage_series(run) -> None:
    """Evaluate the load series on the run's assets; per-segment columns."""
    cfg = run.config
    if getattr(cfg, "load_series", None) is None:
        return
    from corridor.limits.ac_corrosion import iso18086_utilization
    from corridor.limits.criteria import ac_current_density_a_per_m2
    from corridor.series.evaluate import SeriesInputs, evaluate_series, unit_columns
    from corridor.series.unit_emf import circuit_phasors, unit_emf
    from corridor.steps.columns import kinds_with
    from corridor.steps.couple import line_loading

    st = cfg.load_series
    inputs, t, rs = run.inputs, run.segment_table, run.response
    series = load_series_of(cfg, inputs.lines)
    model = rs.model
    n_seg = len(t)
    lines = inputs.lines
    ue = unit_emf(cfg, inputs, run.geometry)
    group = line_loading(cfg, lines, {n: a.n_circuits for n, a in cfg.arrangements.items()}).group
    line = ue.line_of_circuit[ue.circuit]
    slot = np.where(ue.part == 0, group[line], len(lines) + 1 + line)
    scale = model.emf_scale if model.emf_scale is not None else np.ones(n_seg)
    rhs, col_circuit, col_slot = unit_columns(model.feature, ue, slot, scale)
    varying, constant = _criteria(run.limit_set)
    permitted = (run.assessment or {}).get("permitted", {})
    v_snap = t["v_normal_v"].to_numpy(float)
    rho = t["soil_resistivity_ohm_m"].to_numpy(float)
    per_volt = {"v_normal_v": np.ones(n_seg),
                "ac_density_a_per_m2": ac_current_density_a_per_m2(1.0, rho),
                "i_normal_body_ma": np.where(
                    v_snap > 0, t["i_normal_body_ma"].to_numpy(float) / np.where(
                        v_snap > 0, v_snap, 1.0),
                    1000.0 / (1000.0 + t["normal_source_impedance_ohm"].to_numpy(float)))}
    thr = np.full((n_seg, len(varying)), np.inf)
    for i, c in enumerate(varying):
        p = np.asarray(permitted.get(c.name, np.full(n_seg, np.nan)), float)
        k = per_volt[c.quantity]
        ok = np.isfinite(p) & (k > 0)
        thr[ok, i] = p[ok] / k[ok]
    const = np.zeros(n_seg, bool)
    for c in constant:
        r = t.get(f"ratio_{c.name}")
        if r is not None:
            const |= np.nan_to_num(r.to_numpy(float), nan=0.0) >= 1.0
    kind = t["asset_kind"].to_numpy(dtype=object)
    coated = kinds_with(kind, "coated")
    window = max(1, int(round(st.period_h / series.step_h)))
    phasors = circuit_phasors(cfg, lines, series)
    iso = [c for c in getattr(run.limit_set, "criteria", ())
           if c.quantity == "iso18086_density_ratio"]
    p_iso = (np.asarray(permitted.get(iso[0].name, np.full(n_seg, np.nan)), float) if iso
             else np.ones(n_seg))
    p_iso = np.where(np.isfinite(p_iso) & (p_iso > 0), p_iso, 1.0)
    # voltage whose mean reaches the ISO 18086 limit: J_ac = 30 A/m² × permitted ratio
    j_per_v = per_volt["ac_density_a_per_m2"]
    mean_thr = np.where(coated & (j_per_v > 0), 30.0 * p_iso / np.where(j_per_v > 0, j_per_v,
                                                                        1.0), np.inf)
    inp = SeriesInputs(thr, const, coated, phasors, window, st.averaging == "rolling",
                       st.block_steps, np.arange(int(model.feature.max()) + 1 if n_seg else 0),
                       CURVE_POINTS, mean_thr, float(getattr(st, "screen_below", 0.0)))
    res = evaluate_series(rs.system, model.feature, model.chain_of_segment, rhs, col_circuit,
                          col_slot, inp)
    h = series.step_h
    judged = np.isfinite(thr).any(axis=1)
    for c in constant:
        judged |= np.isfinite(np.asarray(permitted.get(c.name, np.full(n_seg, np.nan)), float))
    for i, c in enumerate(varying):
        t[f"hours_above_{c.name}_h"] = np.where(np.isfinite(thr[:, i]),
                                                res.steps_above[:, i] * h, np.nan)
    for c in constant:
        p = np.asarray(permitted.get(c.name, np.full(n_seg, np.nan)), float)
        r = t.get(f"ratio_{c.name}")
        over = (np.nan_to_num(r.to_numpy(float), nan=0.0) >= 1.0) if r is not None else \
            np.zeros(n_seg, bool)
        t[f"hours_above_{c.name}_h"] = np.where(np.isfinite(p), over * series.n_steps * h,
                                                np.nan)
    t["hours_above_limit_h"] = np.where(judged, res.steps_above_any * h, np.nan)
    t["fraction_above_limit"] = np.where(judged, res.steps_above_any / series.n_steps, np.nan)
    t["asset_hours_above_limit_h"] = np.where(judged, res.asset_steps_above[model.feature] * h,
                                              np.nan)
    t["v_normal_peak_v"] = res.peak_v
    t["v_normal_peak_utc"] = series.time_text(res.peak_step)
    j_mean = np.where(coated, ac_current_density_a_per_m2(res.mean_max_v, rho), np.nan)
    t["ac_density_mean_max_a_per_m2"] = j_mean
    t["ac_density_mean_end_utc"] = np.where(coated, series.time_text(res.mean_end_step), "")
    j_dc = (t["dc_current_density_a_per_m2"].to_numpy(float)
            if "dc_current_density_a_per_m2" in t else np.full(n_seg, np.nan))
    strict = np.where(coated, iso18086_utilization(j_mean, j_dc), np.nan)
    ratio = np.where(np.isnan(strict) & coated, j_mean / 30.0, strict)
    t["iso18086_mean_ratio"] = ratio / p_iso
    t["series_bounded"] = res.bounded
    # duration curve of each asset's peak voltage, a few points (the report draws the worst)
    rows = []
    ids = inputs.assets["asset_id"].to_numpy(dtype=object)
    frac = np.linspace(0.0, 1.0, CURVE_POINTS)
    for a, curve in res.asset_peak_v.items():
        rows.append(pd.DataFrame({"asset_id": ids[a], "hours_exceeded_h": frac * series.n_steps
                                  * h, "v_normal_peak_v": curve}))
    run.extra_tables[CURVES_CSV] = (pd.concat(rows, ignore_index=True) if rows else
                                    pd.DataFrame({"asset_id": [], "hours_exceeded_h": [],
                                                  "v_normal_peak_v": []}))
    run.counts["series_steps"] = series.n_steps


def asset_series_columns(out: pd.DataFrame, t: pd.DataFrame) -> None:
    """Per-asset load-series columns of the assets layer, from the segment table.

    ``hours_above_limit_h``: steps where any segment of the asset is above a
    steady-state limit × step; ``v_normal_peak_v`` and its time; the worst
    ISO 18086 mean ratio and density. Does nothing without the series columns.
    """
    if "asset_hours_above_limit_h" not in t.columns:
        return
    g = t.groupby("asset_id", sort=False)
    hours = g["asset_hours_above_limit_h"].max()
    ids = out["asset_id"]
    out["hours_above_limit_h"] = ids.map(hours).to_numpy(float)
    idx = g["v_normal_peak_v"].idxmax()
    peak = t.loc[idx.dropna().astype(int), ["asset_id", "v_normal_peak_v", "v_normal_peak_utc"]]
    peak = peak.set_index("asset_id")
    out["v_normal_peak_v"] = ids.map(peak["v_normal_peak_v"]).to_numpy(float)
    out["v_normal_peak_utc"] = ids.map(peak["v_normal_peak_utc"]).fillna("").to_numpy(object)
    out["ac_density_mean_max_a_per_m2"] = ids.map(
        g["ac_density_mean_max_a_per_m2"].max()).to_numpy(float)
    out["iso18086_mean_ratio"] = ids.map(g["iso18086_mean_ratio"].max()).to_numpy(float)


def stage_series_record(run) -> None:
    """run.json's ``load_series`` entry: the file, its grid, problems; the worst curves only."""
    cfg = run.config
    if getattr(cfg, "load_series", None) is None:
        return
    st = cfg.load_series
    series = load_series_of(cfg, run.inputs.lines)
    varying, constant = _criteria(run.limit_set)
    not_timed = sorted({c.name for c in getattr(run.limit_set, "criteria", ())
                        if c.case == "normal" and c not in varying
                        and c.quantity not in ("iso18086_density_ratio",
                                               "iso18086_density_ratio_with_dc")})
    run.record["load_series"] = {
        "path": str(st.path), "sha256": st.sha256,
        "start_utc": str(series.time_text([0])[0]),
        "end_utc": str(series.time_text([series.n_steps - 1])[0]),
        "steps": series.n_steps, "step_h": series.step_h,
        "period_h": st.period_h, "averaging": st.averaging,
        "rows_read": series.rows_read, "rows_used": series.rows_used,
        "criteria_over_time": [c.name for c in varying + constant],
        "criteria_not_over_time": not_timed,
        "iso18086": ISO18086_CLAUSE,
        "problems": series.problems,
    }
    if not_timed:
        log.warning("load series: criteria %s are judged on the snapshot only, not step by"
                    " step", ", ".join(not_timed))
    curves = run.extra_tables.get(CURVES_CSV)
    if curves is not None and run.assets is not None and "hours_above_limit_h" in run.assets:
        a = run.assets
        order = np.lexsort((a["asset_id"].to_numpy(dtype=str),
                            -np.nan_to_num(a["v_normal_peak_v"].to_numpy(float), nan=-1.0),
                            -np.nan_to_num(a["hours_above_limit_h"].to_numpy(float), nan=-1.0)))
        worst = a["asset_id"].to_numpy(dtype=object)[order[:st.curve_assets]]
        keep = curves[curves["asset_id"].isin(worst)].copy()
        keep["asset_id"] = pd.Categorical(keep["asset_id"], categories=list(worst),
                                          ordered=True)
        keep = keep.sort_values(["asset_id", "hours_exceeded_h"], kind="stable")
        keep["asset_id"] = keep["asset_id"].astype(str)
        run.extra_tables[CURVES_CSV] = keep.reset_index(drop=True)
