"""Grounding design: where to put grounds, and what each one buys.

For every asset with utilization ≥ 1, sites are proposed one at a time:

1. a ground goes at the governing voltage peak (the node of largest |V| in
   the governing case); on a cathodically protected pipeline it connects
   through a DC decoupling device so the cathodic protection is not drained;
2. its resistance is the easiest one on the configured menu (largest R) whose
   Thevenin prediction V·R/|R + Z_th| brings the peak down to the limit with
   a 10 % margin (common practice), else the lowest on the menu;
3. every asset is re-solved with the asset-response solver and re-assessed;
4. the loop repeats at the new peak until every criterion holds or
   ``run.max_sites_per_asset`` is reached. What still fails is reported.

Where grounding is not the usual remedy a site row still names the place,
with ``remedy`` saying what is: longitudinal EMF on telecom cables
(protectors or isolation); coating stress dominated by the earth potential
near towers (separation or a shield); touch voltage dominated by the earth
potential near a tower (separation, an insulating section, gradient control).
A node gets at most one proposed site; later sites go to the highest peak
without one.
"""

from __future__ import annotations

import logging

import geopandas as gpd
import numpy as np
import pandas as pd
from pyproj import Transformer

log = logging.getLogger(__name__)

MARGIN = 0.9  # aim 10 % below the limit (common practice)
#: Proposed sites on one asset stay at least this many nodes apart (5 x 50 m by
#: default): a second ground next to the first buys little (common practice).
SITE_SPACING_NODES = 5

REMEDY_GROUND = "ground"
REMEDY_DECOUPLED = "ground through DC decoupler"
REMEDY_TELECOM = "fit protectors or isolate the pair"
REMEDY_SEPARATION = "increase separation or fit a shield wire"
REMEDY_TOWER = "keep clear of the tower footing: separation, insulating section or gradient control"

#: Criteria that grounding the asset cannot lower.
NOT_GROUNDABLE = ("telecom_long_term", "telecom_fault")


def horizontal_electrode_length_m(resistance_ohm, soil_resistivity_ohm_m, depth_m=0.8,
                                  radius_m=0.005):
    """Length of a buried horizontal conductor with resistance ``resistance_ohm`` [m].

    Notes
    -----
    R = ρ/(πL)·[ln(2L/√(2·a·s)) − 1] for a horizontal wire of radius a at
    depth s (Dwight's formula, as reproduced in IEEE Std 80 practice; from
    memory). Solved for L by fixed-point iteration.
    """
    r = np.asarray(resistance_ohm, float)
    rho = np.asarray(soil_resistivity_ohm_m, float)
    length = rho / (np.pi * r) * 5.0
    for _ in range(60):
        length = rho / (np.pi * r) * (np.log(2 * length / np.sqrt(2 * radius_m * depth_m)) - 1)
        length = np.maximum(length, 1.0)
    return length


def _node_positions(seg, chain_of_seg):
    """Chainage, x, y of every node (start of each segment, plus chain ends)."""
    n_chain = int(chain_of_seg.max()) + 1 if len(chain_of_seg) else 0
    n_nodes = len(seg) + n_chain
    ch = np.zeros(n_nodes)
    x = np.zeros(n_nodes)
    y = np.zeros(n_nodes)
    start = np.arange(len(seg)) + chain_of_seg
    ch[start + 1] = seg.chainage_m + seg.length_m
    x[start + 1] = seg.x1_m
    y[start + 1] = seg.y1_m
    # a segment's start node is the previous segment's end node: same values
    ch[start] = seg.chainage_m
    x[start] = seg.x0_m
    y[start] = seg.y0_m
    return ch, x, y


def stage_ground(run) -> None:
    """Propose grounding sites and write ``layer:sites`` / ``csv:grounding_sites.csv``."""
    from corridor.steps import categories, response_columns
    from corridor.steps.assess import assess
    from corridor.steps.respond import respond

    cfg = run.config
    t = run.segment_table
    seg = run.geometry.segments
    rs = run.response
    menu = sorted(cfg.run["grounding_menu_ohm"], reverse=True)
    max_sites = cfg.run["max_sites_per_asset"]
    assets = run.inputs.assets
    n_assets = len(assets)
    feat = seg.feature
    chain_of_seg = rs.chain_of_segment
    node_ch, node_x, node_y = _node_positions(seg, chain_of_seg)
    n_nodes = len(node_ch)
    start_node = np.arange(len(seg)) + chain_of_seg
    node_asset = np.zeros(n_nodes, np.int64)
    node_asset[start_node] = feat
    node_asset[start_node + 1] = feat
    cp_asset = assets.get("cathodic_protection")
    cathodic = (cp_asset.fillna(False).astype(bool).to_numpy() if cp_asset is not None
                else np.zeros(n_assets, bool))

    extra = np.zeros(n_nodes, complex)
    has_site = rs.node_shunt_s != 0  # existing grounds are not proposed again
    sites: list[dict] = []
    n_sites = np.zeros(n_assets, np.int64)
    table = t
    response = rs
    result = run.assessment
    done = np.zeros(n_assets, bool)
    for _ in range(max_sites):
        util = table["utilization"].to_numpy(float)
        worst_seg = _worst_segment_per_asset(util, feat, n_assets)
        worst_u = np.where(worst_seg >= 0, util[np.maximum(worst_seg, 0)], 0.0)
        active = (worst_u >= 1.0) & ~done & (n_sites < max_sites)
        if not active.any():
            break
        gov = table["governing"].to_numpy(dtype=object)
        new_nodes = []
        for a in np.flatnonzero(active):
            s = worst_seg[a]
            crit, _, case = str(gov[s]).partition(":")
            remedy = None
            epr_dominates = (table["earth_potential_fault_v"].iat[s] >
                             table["v_fault_v"].iat[s])
            if crit in NOT_GROUNDABLE:
                remedy = REMEDY_TELECOM
            elif crit in ("coating_stress", "touch_fault", "step_fault") and epr_dominates:
                remedy = REMEDY_SEPARATION if crit == "coating_stress" else REMEDY_TOWER
            column = _case_column(case, s, response)
            v_nodes = np.abs(response.node_voltage_all_v[:, column])
            mine = np.flatnonzero((node_asset == a) & ~has_site)
            if len(mine) == 0:
                done[a] = True
                continue
            k = mine[np.argmax(v_nodes[mine])]
            if remedy is not None:
                sites.append(_site(run, a, k, node_ch, node_x, node_y, gov[s], v_nodes[k],
                                   v_nodes[k], np.nan, remedy, table, s, len(sites)))
                done[a] = True
                continue
            new_nodes.append((a, k, s, column, gov[s], v_nodes[k], worst_u[a]))
        if not new_nodes:
            break
        nodes = np.array([n[1] for n in new_nodes])
        zth = response.system.thevenin_impedance(nodes)
        chosen = []
        for (a, k, _s, _col, _g, v0, u), z in zip(new_nodes, zth, strict=True):
            # no second site within SITE_SPACING_NODES nodes of this one on the same asset
            lo, hi = max(k - SITE_SPACING_NODES, 0), min(k + SITE_SPACING_NODES + 1, n_nodes)
            has_site[lo:hi] |= node_asset[lo:hi] == a
            target = v0 / u * MARGIN
            r_pick = menu[-1]
            for r in menu:
                if v0 * r / abs(r + z) <= target:
                    r_pick = r
                    break
            extra[k] += 1.0 / r_pick
            chosen.append(r_pick)
        response = respond(cfg, run.inputs, run.geometry, run.coupling, extra_node_shunt_s=extra)
        table = table.copy()
        response_columns(run, response, table)
        result = assess(run.limit_set, table, categories(run))
        _apply_assessment(table, result)
        for (a, k, s, column, g, v0, _u), r_pick in zip(new_nodes, chosen, strict=True):
            v_after = abs(response.node_voltage_all_v[k, column])
            remedy = REMEDY_DECOUPLED if (assets["asset_kind"].iat[a] == "pipeline"
                                          and cathodic[a]) else REMEDY_GROUND
            sites.append(_site(run, a, k, node_ch, node_x, node_y, g, v0, v_after, r_pick,
                               remedy, table, s, len(sites)))
            n_sites[a] += 1
    # final state of every asset that had sites
    util = table["utilization"].to_numpy(float)
    worst_seg = _worst_segment_per_asset(util, feat, n_assets)
    still = np.where(worst_seg >= 0, util[np.maximum(worst_seg, 0)], 0.0) >= 1.0
    frame = pd.DataFrame(sites, columns=SITE_COLUMNS)
    if len(frame):
        frame["unresolved"] = False
        last = frame.groupby("asset_id").tail(1).index
        aid_to_idx = {v: i for i, v in enumerate(assets["asset_id"])}
        frame.loc[last, "unresolved"] = [bool(still[aid_to_idx[v]])
                                         for v in frame.loc[last, "asset_id"]]
        frame = frame.sort_values(["asset_id", "site_order"], kind="stable").reset_index(
            drop=True)
        frame.insert(0, "site_id", [f"S{i + 1:04d}" for i in range(len(frame))])
    else:
        frame.insert(0, "site_id", pd.Series([], dtype=object))
        frame["unresolved"] = pd.Series([], dtype=bool)
    frame = frame.drop(columns=["site_order"])
    if len(frame):
        lon, lat = Transformer.from_crs(run.inputs.crs, 4326, always_xy=True).transform(
            frame["x"].to_numpy(float), frame["y"].to_numpy(float))
    else:
        lon = lat = np.zeros(0)
    frame.insert(frame.columns.get_loc("y") + 1, "lon", lon)
    frame.insert(frame.columns.get_loc("lon") + 1, "lat", lat)
    gdf = gpd.GeoDataFrame(frame, geometry=gpd.points_from_xy(frame["x"], frame["y"]),
                           crs=run.inputs.crs)
    run.extra_tables["layer:sites"] = gdf
    run.extra_tables["csv:grounding_sites.csv"] = pd.DataFrame(frame)
    run.counts["grounding_sites"] = int((frame["ground_resistance_ohm"].notna()).sum())
    run.counts["assets_unresolved"] = int(frame["unresolved"].sum()) if len(frame) else 0
    run.segment_table_after_grounding = table


SITE_COLUMNS = ["asset_id", "asset_kind", "chainage_m", "x", "y", "governing", "v_before_v",
                "v_after_v", "ground_resistance_ohm", "electrode_length_m", "remedy",
                "line_ids", "utilization_after", "site_order"]


def _site(run, a, k, node_ch, node_x, node_y, governing, v0, v1, r, remedy, table, s,
          order):
    assets = run.inputs.assets
    rows = table[table["asset_id"] == assets["asset_id"].iat[a]]
    lines = sorted(set(rows["line_id"][rows["line_id"] != ""]) |
                   set(rows["fault_line_id"][rows["fault_line_id"] != ""]))
    rho = float(table["soil_resistivity_ohm_m"].iat[s])
    return {
        "asset_id": assets["asset_id"].iat[a], "asset_kind": assets["asset_kind"].iat[a],
        "chainage_m": float(node_ch[k]), "x": float(node_x[k]), "y": float(node_y[k]),
        "governing": str(governing), "v_before_v": float(v0), "v_after_v": float(v1),
        "ground_resistance_ohm": float(r),
        "electrode_length_m": (float(horizontal_electrode_length_m(r, rho))
                               if np.isfinite(r) else np.nan),
        "remedy": remedy, "line_ids": ";".join(lines),
        "utilization_after": float(rows["utilization"].max()),
        "site_order": order,
    }


def _worst_segment_per_asset(util, feat, n_assets):
    out = np.full(n_assets, -1, np.int64)
    if len(util) == 0:
        return out
    order = np.lexsort((np.arange(len(util)), -util, feat))
    f = feat[order]
    first = np.r_[True, f[1:] != f[:-1]]
    out[f[first]] = order[first]
    return out


def _case_column(case, s, response):
    """Solution column of the governing case at segment ``s``."""
    if case == "normal":
        return 0
    if case == "capacitive":
        return 1
    c = response.fault_case_of_segment[s]
    if c < 0:
        return 0
    cols = response.fault_column_case
    a_rows = np.flatnonzero((cols == c).any(axis=1))
    col = int(np.flatnonzero(cols[a_rows[0]] == c)[0]) if len(a_rows) else 0
    return 2 + col


def _apply_assessment(table, result):
    for name, ratio in result["ratios"].items():
        table[f"ratio_{name}"] = ratio
    table["ac_density_a_per_m2"] = result["quantities"]["ac_density_a_per_m2"]
    table["utilization"] = result["utilization"]
    table["governing"] = result["governing"]
    table["hazard_class"] = result["hazard_class"]
