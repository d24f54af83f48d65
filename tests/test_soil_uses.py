"""Deep and local soil: the earth return and the local quantities use different values.

Issue 15 / docs/methods.md §9: the earth-return impedances sense the soil hundreds of
metres deep (two-layer kernel), while the holiday current density (J = 8V/(ρπd),
ISO 18086), the IEEE Std 80 foot resistance in the touch limit and the electrode length
(Dwight) sense the top metres. Changing only ``local_resistivity_ohm_m`` therefore leaves
every EMF column unchanged and moves those three with it.
"""

import geopandas as gpd
import numpy as np
import pytest
from shapely.geometry import LineString, box

from corridor.config import load_config
from corridor.pipeline import run_screening
from corridor.steps import asset_stages, run_stages
from corridor.steps.assess import derived_quantities
from tests.conftest import PROJECTED_CRS, X0_M, Y0_M


def _run(scenario, local_ohm_m, bottom_ohm_m=1000.0, name=""):
    pipe = gpd.GeoDataFrame(
        {"AID": ["P1"], "KIND": ["pipeline"], "POST_OHM": [np.nan]},
        geometry=[LineString([(X0_M + 300, Y0_M + 15.0), (X0_M + 3700, Y0_M + 15.0)])],
        crs=PROJECTED_CRS)
    cfg = scenario.build(assets=pipe)
    soil = gpd.GeoDataFrame(
        {"RHO": [100.0], "TOP": [100.0], "BOTTOM": [bottom_ohm_m], "THICK": [5.0],
         "LOCAL": [local_ohm_m]},
        geometry=[box(X0_M - 5000, Y0_M - 5000, X0_M + 9000, Y0_M + 5000)], crs=PROJECTED_CRS)
    scenario.write_layer(soil, f"soil{name}")
    cfg["layers"]["soil"] = {"path": f"soil{name}.gpkg", "layer": f"soil{name}", "fields": {
        "soil_resistivity_ohm_m": "RHO", "top_resistivity_ohm_m": "TOP",
        "bottom_resistivity_ohm_m": "BOTTOM", "top_thickness_m": "THICK",
        "local_resistivity_ohm_m": "LOCAL"}}
    cfg["run"].update({"limit_set": "ieee_na", "frequency_hz": 60.0, "crs": PROJECTED_CRS})
    cfg["line_defaults"] = {"load_current_a": 900.0, "residual_current_pct": 8.0,
                            "fault_current_start_ka": 20.0, "fault_current_end_ka": 20.0,
                            "clearing_time_s": 0.5}
    path = scenario.write_config(cfg, f"run_{int(local_ohm_m)}{name}.toml")
    return run_screening(load_config(path), asset_stages(), run_stages())


def test_local_resistivity_moves_only_the_local_quantities(scenario):
    low, high = _run(scenario, 30.0), _run(scenario, 300.0)
    a, b = low.segment_table, high.segment_table
    for col in ("emf_normal_v", "emf_fault_v", "v_normal_v", "v_fault_v"):
        np.testing.assert_allclose(a[col].to_numpy(float), b[col].to_numpy(float), rtol=1e-12,
                                   err_msg=col)
    assert (a["soil_resistivity_ohm_m"] == 30.0).all() and (b["soil_resistivity_ohm_m"] == 300.0
                                                             ).all()
    assert (a["bottom_resistivity_ohm_m"] == 1000.0).all()
    # J = 8V/(ρπd): with V unchanged, the density scales as 1/ρ_local
    ja = derived_quantities(a)["ac_density_a_per_m2"]
    jb = derived_quantities(b)["ac_density_a_per_m2"]
    np.testing.assert_allclose(ja, 10.0 * jb, rtol=1e-12)
    # IEEE Std 80 touch limit (1000 Ω + 1.5·ρ)·I_B rises with the local resistivity
    pa = low.assessment["permitted"]["touch_fault"]
    pb = high.assessment["permitted"]["touch_fault"]
    assert np.all(pb > pa)
    assert np.nanmax(pb / pa) == pytest.approx((1000 + 1.5 * 300) / (1000 + 1.5 * 30), rel=1e-9)
    # the electrode for a given resistance is longer in more resistive ground (Dwight)
    from corridor.steps.ground import horizontal_electrode_length_m

    sa = low.sites
    sb = high.sites
    if sa is not None and sb is not None and len(sa) and len(sb):
        for sites, rho in ((sa, 30.0), (sb, 300.0)):
            r = sites["ground_resistance_ohm"].to_numpy(float)
            ok = np.isfinite(r)
            np.testing.assert_allclose(sites["electrode_length_m"].to_numpy(float)[ok],
                                       horizontal_electrode_length_m(r[ok], rho), rtol=1e-9)
    else:  # no site proposed: check the function the design uses
        assert horizontal_electrode_length_m(10.0, 300.0) > horizontal_electrode_length_m(
            10.0, 30.0)


def test_two_layer_soil_changes_the_emf_but_not_the_local_soil(scenario):
    # 5 m of 100 Ω·m over 1000 Ω·m against homogeneous 100 Ω·m: the earth return feels the
    # deep layer (the residual current's EMF grows with the equivalent earth depth), while the
    # local quantities keep the top layer's 100 Ω·m.
    layered = _run(scenario, 100.0, 1000.0, "_layered").segment_table
    hom = _run(scenario, 100.0, np.nan, "_hom").segment_table
    assert np.isfinite(layered["bottom_resistivity_ohm_m"]).all()
    assert np.isnan(hom["bottom_resistivity_ohm_m"]).all()
    ratio = layered["emf_normal_v"].to_numpy(float) / hom["emf_normal_v"].to_numpy(float)
    assert np.nanmax(np.abs(ratio - 1.0)) > 0.01
    assert (layered["soil_resistivity_ohm_m"] == hom["soil_resistivity_ohm_m"]).all()
