"""Earth potential rise around substations (issue 14 §3; docs/methods.md §18.4).

A production run with a substation layer, checked against the hemisphere electrode
of equal resistance (IEEE Std 80; docs/methods.md §4.1, §4.6):

- beyond the equivalent radius r0 = ρ/(2πR_g), V(r) = ρI/(2πr), and the 1 m step
  voltage is ρI/(2π)·(1/r − 1/(r + 1));
- within r0 the potential is the grid's own rise, I·R_g;
- the zone of influence ends where V falls to the threshold, r = ρI/(2πV) (§4.5);
- the step voltage is assessed, with the substation's clearing time, and a grounding
  site proposed in the zone is flagged, its after-voltage including the earth
  potential there (grounding the asset cannot remove it);
- a substation with a bad value is rejected by its FID, never used or filled.
"""

import geopandas as gpd
import numpy as np
import pytest
from shapely.geometry import LineString, Point

from corridor.config import load_config
from corridor.io.layers import read_inputs
from corridor.pipeline import run_screening
from corridor.steps import asset_stages, run_stages
from tests.conftest import PROJECTED_CRS, X0_M, Y0_M

RHO_OHM_M = 100.0
THRESHOLD_V = 50.0  # run.tower_zone_threshold_v default


def _config(scenario, offset_m, current_ka, r_grid_ohm, extra=None, fence_end_m=1_000.0):
    # the line 20 km away: the fence sees the substation alone
    lines = gpd.GeoDataFrame(
        {"LINE_ID": ["L1"], "KV": [138.0], "TOWER": [scenario.arrangement]},
        geometry=[LineString([(X0_M, Y0_M - 20_000.0), (X0_M + 5_000.0, Y0_M - 20_000.0)])],
        crs=PROJECTED_CRS)
    assets = gpd.GeoDataFrame(
        {"AID": ["F1"], "KIND": ["fence"], "POST_OHM": [100.0]},
        geometry=[LineString([(X0_M - 1_000.0, Y0_M + offset_m),
                              (X0_M + fence_end_m, Y0_M + offset_m)])], crs=PROJECTED_CRS)
    rows = {"SUB": ["S1"], "IF_KA": [current_ka], "RG": [r_grid_ohm], "TCLR": [0.3]}
    geoms = [Point(X0_M, Y0_M)]
    for k, v in (extra or {}).items():
        rows[k].append(v) if k in rows else None
    if extra:
        geoms.append(Point(X0_M + 50_000.0, Y0_M))
    subs = gpd.GeoDataFrame(rows, geometry=geoms, crs=PROJECTED_CRS)
    cfg = scenario.build(lines=lines, assets=assets)
    path = scenario.write_layer(subs, "substations")
    cfg["layers"]["substations"] = {
        "path": path.name, "layer": "substations",
        "fields": {"substation_id": "SUB", "fault_current_ka": "IF_KA",
                   "grid_resistance_ohm": "RG", "clearing_time_s": "TCLR"}}
    cfg["run"].update({"limit_set": "ieee_na", "frequency_hz": 60.0, "crs": PROJECTED_CRS,
                       "default_soil_resistivity_ohm_m": RHO_OHM_M})
    cfg["line_defaults"] = {"load_current_a": 400.0, "residual_current_pct": 5.0,
                            "fault_current_start_ka": 10.0, "fault_current_end_ka": 10.0,
                            "clearing_time_s": 0.5}
    return load_config(scenario.write_config(cfg))


def _segment_at(t, chainage_m):
    """Segment starting at a node (the last segment for the asset's end node)."""
    return int(np.searchsorted(t["chainage_m"].to_numpy(), chainage_m, side="right") - 1)


def _run(scenario, offset_m, current_ka, r_grid_ohm, **kw):
    return run_screening(_config(scenario, offset_m, current_ka, r_grid_ohm, **kw),
                         asset_stages(), run_stages())


def test_earth_potential_and_step_beyond_the_grid_match_the_hemisphere(scenario):
    # 2 kA into a 2 Ω grid (r0 = 100/(2π·2) = 8.0 m); the fence passes 40 m from it.
    i_a, offset = 2_000.0, 40.0
    run = _run(scenario, offset, i_a / 1000.0, 2.0)
    t = run.segment_table.sort_values("chainage_m").reset_index(drop=True)
    mid = t["chainage_m"].to_numpy() + 0.5 * t["length_m"].to_numpy()
    # the segment passing closest: its closest point is at r = offset
    k = int(np.argmin(np.abs(mid - 1_000.0)))
    lo = t["chainage_m"].iloc[k]
    hi = lo + t["length_m"].iloc[k]
    dx = 0.0 if lo <= 1_000.0 <= hi else min(abs(lo - 1_000.0), abs(hi - 1_000.0))
    r = np.hypot(offset, dx)
    assert t["earth_potential_fault_v"].iloc[k] == pytest.approx(
        RHO_OHM_M * i_a / (2 * np.pi * r), rel=1e-9)
    assert t["v_step_fault_v"].iloc[k] == pytest.approx(
        RHO_OHM_M * i_a / (2 * np.pi) * (1 / r - 1 / (r + 1)), rel=1e-9)
    # assessed with the substation's clearing time
    assert t["clearing_time_s"].iloc[k] == pytest.approx(0.3)
    assert np.isfinite(t["ratio_step_fault"].iloc[k])
    # zone of influence: r = ρI/(2πV) = 637 m; segments wholly beyond it see nothing
    zone = RHO_OHM_M * i_a / (2 * np.pi * THRESHOLD_V)
    lo_all = t["chainage_m"].to_numpy() - 1_000.0
    hi_all = lo_all + t["length_m"].to_numpy()
    closest = np.hypot(offset, np.where((lo_all <= 0) & (hi_all >= 0), 0.0,
                                        np.minimum(np.abs(lo_all), np.abs(hi_all))))
    epr = t["earth_potential_fault_v"].to_numpy()
    assert (epr[closest > zone] == 0.0).all()
    assert (epr[closest <= zone] >= THRESHOLD_V - 1e-9).all()
    # a grounding site is flagged exactly where it stands in a zone of influence
    sites = run.sites
    assert len(sites) >= 1
    for _, site in sites.iterrows():
        j = _segment_at(t, site["chainage_m"])
        assert bool(site["in_tower_zone"]) == bool(epr[j] > 0)


def test_grounding_site_in_the_zone_is_flagged(scenario):
    # The fence ends 64 m from the grid (within its 637 m zone): the grounding loop's
    # sites there are flagged as standing in a zone of influence, and their
    # after-voltage includes the local earth potential, so they stay above it.
    run = _run(scenario, 40.0, 2.0, 2.0, fence_end_m=50.0)
    sites = run.sites
    t = run.segment_table.sort_values("chainage_m").reset_index(drop=True)
    flagged = sites[sites["in_tower_zone"]]
    assert len(flagged) >= 1
    for _, site in flagged.iterrows():
        e_site = t["earth_potential_fault_v"].iloc[_segment_at(t, site["chainage_m"])]
        assert e_site > THRESHOLD_V
        assert site["v_after_v"] >= e_site * (1 - 1e-9)


def test_within_the_grid_the_potential_is_the_grid_rise(scenario):
    # 1 kA into a 0.2 Ω grid: r0 = 100/(2π·0.2) = 79.6 m > 30 m, so the fence's closest
    # segment stands at the grid's own potential I·R_g = 200 V.
    run = _run(scenario, 30.0, 1.0, 0.2)
    t = run.segment_table
    assert t["earth_potential_fault_v"].max() == pytest.approx(1_000.0 * 0.2, rel=1e-9)


def test_substation_with_a_bad_value_is_rejected_by_fid(scenario):
    # The second substation has a negative grid resistance: rejected (GeoPackage FID 2),
    # named with the user's field; the first is read.
    cfg = _config(scenario, 40.0, 2.0, 2.0, extra={"SUB": None, "IF_KA": 5.0, "RG": -1.0,
                                                    "TCLR": 0.3})
    inputs = read_inputs(cfg)
    rows = inputs.rejected.by_role("substations")
    assert [(r["feature_id"], r["field"]) for r in rows] == [("fid:2", "RG")]
    assert list(inputs.substations["feature_id"]) == ["S1"]
