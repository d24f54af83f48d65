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

In an earth fault the voltages are the worst over the scanned fault
positions (docs/methods.md §8.2): a site's before and after values, and every
re-assessment, use that worst; a site in a faulted tower's zone of influence
is flagged (``in_tower_zone``) and, for the criteria that add it, its values
include the local earth potential.

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

from corridor.physics.conductive import horizontal_electrode_length_m

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
    from corridor.steps.assess import assess
    from corridor.steps.columns import categories, kinds_with, response_columns
    from corridor.steps.respond import solve_model

    cfg = run.config
    seg = run.geometry.segments
    rs = run.response
    model = rs.model
    menu = sorted(cfg.run.grounding_menu_ohm, reverse=True)
    max_sites = cfg.run.max_sites_per_asset
    assets = run.inputs.assets
    n_assets = len(assets)
    feat = seg.feature
    node_ch, node_x, node_y = _node_positions(seg, model.chain_of_segment)
    n_nodes = len(node_ch)
    start_node = np.arange(len(seg)) + model.chain_of_segment
    node_asset = np.zeros(n_nodes, np.int64)
    node_asset[start_node] = feat
    node_asset[start_node + 1] = feat
    cp_asset = assets.get("cathodic_protection")
    cathodic = (cp_asset.fillna(False).astype(bool).to_numpy() if cp_asset is not None
                else np.zeros(n_assets, bool))
    kinds = assets["asset_kind"].to_numpy(dtype=object)
    # a ground on a cathodically protected coated pipe goes through a DC decoupler
    decouple = kinds_with(kinds, "coated") & cathodic
    ids = assets["asset_id"].to_numpy(dtype=object)
    responsible = _lines_per_asset(run.segment_table, feat, n_assets)
    # an asset's nodes are contiguous: its chains follow each other
    node_lo = np.searchsorted(node_asset, np.arange(n_assets), side="left")
    node_hi = np.searchsorted(node_asset, np.arange(n_assets), side="right")
    current = rs  # the solution whose system holds the current grounds
    # working state as plain arrays (pandas per-row updates are slow)
    base = pd.DataFrame({c: run.segment_table[c].to_numpy(dtype=object if c == "asset_kind"
                                                          else None)
                         for c in ("asset_kind", "length_m", "soil_resistivity_ohm_m")})
    state = {c: run.segment_table[c].to_numpy().copy() for c in STATE_COLUMNS}
    state["governing"] = state["governing"].astype(object)
    soil = state["soil_resistivity_ohm_m"]
    node_v = rs.node_voltage_all_v.copy()  # global nodes: normal, capacitive, worst fault
    # a segment next to each node (for the earth potential of a faulted tower there)
    node_seg = np.zeros(n_nodes, np.int64)
    node_seg[start_node + 1] = np.arange(len(seg))
    node_seg[start_node] = np.arange(len(seg))
    extra = np.zeros(n_nodes, complex)
    has_site = rs.node_shunt_s != 0  # existing grounds are not proposed again
    sites: list[dict] = []
    n_sites = np.zeros(n_assets, np.int64)
    done = np.zeros(n_assets, bool)
    for _ in range(max_sites):
        util = state["utilization"]
        worst_seg = _worst_segment_per_asset(util, feat, n_assets)
        worst_u = np.where(worst_seg >= 0, util[np.maximum(worst_seg, 0)], 0.0)
        active = np.flatnonzero((worst_u >= 1.0) & ~done & (n_sites < max_sites))
        if not len(active):
            break
        gov = state["governing"]
        epr = state["earth_potential_fault_v"]
        v_fault = state["v_fault_v"]
        new_nodes = []
        for a in active:
            s = worst_seg[a]
            crit, _, case = str(gov[s]).partition(":")
            remedy = None
            if crit in NOT_GROUNDABLE:
                remedy = REMEDY_TELECOM
            elif crit in ("coating_stress", "touch_fault", "step_fault") and epr[s] > v_fault[s]:
                remedy = REMEDY_SEPARATION if crit == "coating_stress" else REMEDY_TOWER
            column = _case_column(case)
            mine = node_lo[a] + np.flatnonzero(~has_site[node_lo[a]:node_hi[a]])
            if len(mine) == 0:
                done[a] = True
                continue
            k = mine[np.argmax(np.abs(node_v[mine, column]))]
            if remedy in (REMEDY_TOWER, REMEDY_SEPARATION):
                # an earth-potential hazard is reported where it is: at the worst segment
                k = start_node[s] + int(abs(node_v[start_node[s] + 1, column])
                                        > abs(node_v[start_node[s], column]))
            v0 = abs(node_v[k, column])
            if remedy is not None:
                local = _local_earth_potential(crit, epr[node_seg[k]])
                sites.append(_site(ids[a], kinds[a], node_ch[k], node_x[k], node_y[k], gov[s],
                                   v0 + local, v0 + local, np.nan, remedy, responsible[a],
                                   worst_u[a], soil[s], len(sites), epr[node_seg[k]] > 0))
                done[a] = True
                continue
            new_nodes.append((a, k, column, gov[s], v0, worst_u[a], s))
        if not new_nodes:
            break
        solve_assets = np.array(sorted({n[0] for n in new_nodes}))
        # Thevenin impedance at the chosen nodes, in the current state: the last
        # solution covers every asset still active (the active set only shrinks)
        local = np.searchsorted(current.nodes, [n[1] for n in new_nodes])
        zth = current.system.thevenin_impedance(local)
        chosen = []
        for (a, k, _c, _g, v0, u, _s), z in zip(new_nodes, zth, strict=True):
            target = v0 / u * MARGIN
            r_pick = menu[-1]
            for r in menu:
                if v0 * r / abs(r + z) <= target:
                    r_pick = r
                    break
            extra[k] += 1.0 / r_pick
            # no second site within SITE_SPACING_NODES nodes of this one on the same asset
            lo, hi = max(k - SITE_SPACING_NODES, 0), min(k + SITE_SPACING_NODES + 1, n_nodes)
            has_site[lo:hi] |= node_asset[lo:hi] == a
            chosen.append(r_pick)
        after = solve_model(model, solve_assets, extra)
        current = after
        node_v[after.nodes] = after.node_voltage_all_v
        rows = base.iloc[after.segments].reset_index(drop=True)
        response_columns(run, after, rows)
        result = assess(run.limit_set, rows, categories(run, after.segments))
        _apply_assessment(rows, result)
        for c in STATE_COLUMNS:
            state[c][after.segments] = rows[c].to_numpy()
        util_after = _max_per_asset(rows["utilization"].to_numpy(float), feat[after.segments],
                                    n_assets)
        for (a, k, column, g, v0, _u, s), r_pick in zip(new_nodes, chosen, strict=True):
            remedy = REMEDY_DECOUPLED if decouple[a] else REMEDY_GROUND
            # in a fault the site's voltage is the worst over fault positions (the scan),
            # plus the earth potential of a faulted tower there for the criteria that add it
            e_site = state["earth_potential_fault_v"][node_seg[k]]
            local = _local_earth_potential(str(g).partition(":")[0], e_site)
            sites.append(_site(ids[a], kinds[a], node_ch[k], node_x[k], node_y[k], g,
                               v0 + local, abs(node_v[k, column]) + local, r_pick, remedy,
                               responsible[a], util_after[a], soil[s], len(sites), e_site > 0))
            n_sites[a] += 1
    still = _max_per_asset(state["utilization"], feat, n_assets) >= 1.0
    frame = pd.DataFrame(sites, columns=SITE_COLUMNS)
    r = frame["ground_resistance_ohm"].to_numpy(float)
    ok = np.isfinite(r)
    length = np.full(len(frame), np.nan)
    length[ok] = horizontal_electrode_length_m(r[ok], frame["soil_ohm_m"].to_numpy(float)[ok])
    frame["electrode_length_m"] = length
    frame = frame.drop(columns=["soil_ohm_m"])
    if len(frame):
        frame["unresolved"] = False
        last = frame.groupby("asset_id").tail(1).index
        aid_to_idx = {v: i for i, v in enumerate(ids)}
        frame.loc[last, "unresolved"] = [bool(still[aid_to_idx[v]])
                                         for v in frame.loc[last, "asset_id"]]
        frame = frame.sort_values(["asset_id", "site_order"], kind="stable").reset_index(
            drop=True)
        frame.insert(0, "site_id", site_ids(frame["asset_id"], frame["chainage_m"]))
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
    run.sites = gdf
    run.grounding_sites = pd.DataFrame(frame)
    # each count agrees with the table it names: grounding_sites = rows of
    # grounding_sites.csv (and of the sites layer), grounds_proposed = those rows
    # whose remedy is a ground (a resistance is given)
    run.counts["grounding_sites"] = len(frame)
    run.counts["grounds_proposed"] = int((frame["ground_resistance_ohm"].notna()).sum())
    run.counts["assets_unresolved"] = int(frame["unresolved"].sum()) if len(frame) else 0
    # a light table: the columns grounding changed, for the report's profiles
    after = pd.DataFrame({c: run.segment_table[c].to_numpy()
                          for c in ("asset_id", "segment_index", "chainage_m")})
    for c in STATE_COLUMNS:
        after[c] = state[c]
    run.segment_table_after_grounding = after


def site_ids(asset_ids, chainage_m) -> list[str]:
    """Ids of grounding sites that depend only on each site's asset and position.

    Parameters
    ----------
    asset_ids : array_like of str
        Asset of each site.
    chainage_m : array_like of float
        Chainage of each site along its asset [m].

    Returns
    -------
    list of str
        ``"<asset_id>@<chainage rounded to the metre>"``, e.g. ``"MBL-12@1250"``.
        Adding, removing or editing another asset never changes them. Two sites
        of one asset within the same metre (possible only at very short
        segments) are told apart by ``/2``, ``/3``… in the order given.
    """
    ch = np.floor(np.asarray(chainage_m, float) + 0.5)
    out: list[str] = []
    seen: dict[str, int] = {}
    for aid, c in zip(asset_ids, ch, strict=True):
        base = f"{aid}@{int(c)}" if np.isfinite(c) else f"{aid}@?"
        k = seen.get(base, 0) + 1
        seen[base] = k
        out.append(base if k == 1 else f"{base}/{k}")
    return out


def _lines_per_asset(t, feat, n_assets) -> list[str]:
    """';'-joined ids of the lines in reach of, or faulting onto, each asset."""
    out: list[set[str]] = [set() for _ in range(n_assets)]
    for col in ("line_id", "fault_line_id"):
        v = t[col].to_numpy(dtype=object)
        has = v != ""
        pairs = pd.DataFrame({"a": feat[has], "l": v[has]}).drop_duplicates()
        for a, line in zip(pairs["a"], pairs["l"], strict=True):
            out[a].add(line)
    return [";".join(sorted(x)) for x in out]


def _max_per_asset(values, feat, n_assets):
    out = np.full(n_assets, -np.inf)
    np.fmax.at(out, feat, values)  # a segment no criterion judged (NaN) is skipped
    return out


SITE_COLUMNS = ["asset_id", "asset_kind", "chainage_m", "x", "y", "governing", "v_before_v",
                "v_after_v", "ground_resistance_ohm", "electrode_length_m", "remedy",
                "line_ids", "utilization_after", "in_tower_zone", "site_order", "soil_ohm_m"]

#: Criteria whose quantity adds the earth potential of a faulted tower (steps/assess.py).
WITH_EARTH_POTENTIAL = ("touch_fault", "coating_stress", "step_fault")


def _local_earth_potential(criterion, earth_potential_v):
    """Earth potential a site's value includes for its governing criterion [V]."""
    return float(earth_potential_v) if criterion in WITH_EARTH_POTENTIAL else 0.0

#: Segment columns the grounding loop tracks while it re-solves.
STATE_COLUMNS = ("utilization", "governing", "hazard_class", "v_normal_v", "v_fault_v",
                 "v_touch_fault_v", "earth_potential_fault_v", "soil_resistivity_ohm_m",
                 # the other judged quantities, for the report's after-grounding values
                 "v_step_fault_v", "v_coating_stress_v", "i_normal_body_ma",
                 "i_capacitive_body_ma", "emf_section_normal_v", "emf_section_fault_v",
                 "ac_density_a_per_m2")


def _site(asset_id, kind, chainage_m, x, y, governing, v0, v1, r, remedy, line_ids,
          utilization_after, soil_ohm_m, order, in_tower_zone=False):
    return {
        "asset_id": asset_id, "asset_kind": kind,
        "chainage_m": float(chainage_m), "x": float(x), "y": float(y),
        "governing": str(governing), "v_before_v": float(v0), "v_after_v": float(v1),
        "ground_resistance_ohm": float(r), "electrode_length_m": np.nan,
        "remedy": remedy, "line_ids": line_ids,
        "utilization_after": float(utilization_after),
        "in_tower_zone": bool(in_tower_zone),
        "site_order": order, "soil_ohm_m": float(soil_ohm_m),
    }


def _worst_segment_per_asset(util, feat, n_assets):
    """First segment of highest utilization of each asset (segments grouped by asset)."""
    out = np.full(n_assets, -1, np.int64)
    if len(util) == 0:
        return out
    u = np.nan_to_num(np.asarray(util, float), nan=-np.inf)
    starts = np.flatnonzero(np.r_[True, feat[1:] != feat[:-1]])
    group = np.cumsum(np.r_[True, feat[1:] != feat[:-1]]) - 1
    umax = np.maximum.reduceat(u, starts)
    pos = np.where(u == umax[group], np.arange(len(u)), len(u))
    out[feat[starts]] = np.minimum.reduceat(pos, starts)
    return out


def _case_column(case):
    """Column of the governing case: 0 normal, 1 capacitive, 2 the worst earth fault."""
    if case == "normal":
        return 0
    if case == "capacitive":
        return 1
    return 2


def _apply_assessment(table, result):
    for name, ratio in result["ratios"].items():
        table[f"ratio_{name}"] = ratio
    table["ac_density_a_per_m2"] = result["quantities"]["ac_density_a_per_m2"]
    table["utilization"] = result["utilization"]
    table["governing"] = result["governing"]
    table["hazard_class"] = result["hazard_class"]
