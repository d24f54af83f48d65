"""The demo corridor end to end: the findings the screen exists for.

Expected behaviour comes from transmission-line theory of earth-return
circuits (Sunde, Earth Conduction Effects in Transmission Systems, 1968):
the voltage of an induced buried conductor peaks at the ends of its exposure
and on both sides of an insulating joint; and from the limit sets' sources.
"""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from corridor.config import load_config
from corridor.pipeline import run_screening
from corridor.steps import asset_stages, run_stages

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def demo():
    cfg = load_config(ROOT / "config" / "demo.toml")
    return run_screening(cfg, asset_stages(), run_stages())


def _asset(run, asset_id):
    t = run.segment_table
    return t[t["asset_id"] == asset_id].sort_values("chainage_m")


def test_every_segment_carries_voltages(demo):
    t = demo.segment_table
    for col in ("v_normal_v", "v_fault_v", "i_normal_a", "i_fault_a", "emf_normal_v_per_km",
                "emf_fault_v_per_km", "utilization", "rank"):
        assert col in t and np.isfinite(t[col].to_numpy(float)).all(), col
    assert (t["v_fault_v"] > t["v_normal_v"]).mean() > 0.5  # faults dominate (trade fact)


def test_pipeline_peaks_at_joint_and_exposure_ends(demo):
    # Sunde: a buried conductor's voltage peaks where the EMF distribution changes
    # abruptly - the ends of the exposure and both sides of an insulating joint.
    p = _asset(demo, "MBL-12")
    ch = (p["chainage_m"] + p["length_m"] / 2).to_numpy()
    v = p["v_normal_v"].to_numpy()
    joint_m = np.hypot(5000, 1730) + 4500  # IJ1 at (4500, -70) in the demo generator
    assert abs(ch[np.argmax(v)] - joint_m) <= 60.0
    # the 70 m parallel run begins at chainage 5291 m and ends near 14.3 km
    peaks = [ch[i] for i in range(1, len(v) - 1) if v[i] >= v[i - 1] and v[i] >= v[i + 1]]
    for end_m in (np.hypot(5000, 1730), np.hypot(5000, 1730) + 9000):
        assert min(abs(np.array(peaks) - end_m)) < 1200.0
    # between the joint and the end of the run the profile passes through a low
    # (the induced voltage is odd about the middle of a uniform exposure)
    between = (ch > joint_m) & (ch < np.hypot(5000, 1730) + 9000)
    assert v[between].min() < 0.5 * v.max()


def test_demo_findings(demo):
    a = demo.assets.set_index("asset_id")
    t = demo.segment_table
    # a pipeline under fault
    assert a.loc["MBL-12", "worst_utilization"] >= 1
    assert t.loc[t["asset_id"] == "MBL-12", "ratio_touch_fault"].max() >= 1
    # a fence under normal load (NACE-style 15 V steady state in the ieee_na set)
    assert t.loc[t["asset_id"] == "FN-MILL-3", "ratio_steady_state_voltage"].max() >= 1
    # a telecom cable under fault (ITU-T 430/650 V)
    assert t.loc[t["asset_id"] == "TC-VALE-3", "ratio_telecom_fault"].max() >= 1
    # an insulated fence with capacitive pickup: high open-circuit voltage, little current
    ridge = t[t["asset_id"] == "FN-RIDGE-2"]
    assert ridge["v_capacitive_open_v"].max() > 100.0
    assert ridge["i_capacitive_short_ma"].max() < 5.0
    assert ridge["capacitive_source_impedance_ohm"].min() > 1e4
    assert a.loc["FN-RIDGE-2", "hazard_class"] != "exceeds"
    # a metal-post fence is grounded at every post: almost no capacitive voltage
    assert t.loc[t["asset_id"] == "FN-HOLLOW-1", "v_capacitive_open_v"].max() < 1.0


def test_buried_assets_get_no_capacitive_pickup(demo):
    t = demo.segment_table
    buried = t["asset_kind"].isin(["pipeline", "telecom"])
    assert (t.loc[buried, "v_capacitive_open_v"] == 0).all()
    assert (t.loc[buried, "i_capacitive_short_ma"] == 0).all()


def test_ranks_are_a_permutation_and_ordered(demo):
    t = demo.segment_table
    assert sorted(t["rank"]) == list(range(1, len(t) + 1))
    h = demo.hazards
    assert (np.diff(h["utilization"].to_numpy()) <= 0).all()


def test_screening_factor_in_practice_range(demo):
    # ITU-T Directives practice (from memory): earth wires screen a fault by
    # |k| about 0.6-0.7 (ACSR/OPGW) to 0.95 (steel).
    t = demo.segment_table
    k345 = t.loc[t["fault_line_id"] == "VPC-345-A", "screening_factor"].dropna()
    k138 = t.loc[t["fault_line_id"] == "VPC-138-B", "screening_factor"].dropna()
    assert 0.4 < k345.median() < 0.8  # OPGW
    assert 0.85 < k138.median() <= 1.0  # steel


def test_no_feature_lost(demo):
    # every input feature is in the outputs or in the rejected list
    import geopandas as gpd

    src = ROOT / "sample_layers" / "brackenford_vale.gpkg"
    n_in = sum(len(gpd.read_file(src, layer=name)) for name in
               ("pipelines", "rails", "fences", "telecom"))
    a = demo.assets
    rejected = pd.DataFrame(demo.inputs.rejected.rows)
    assert len(a) + (len(rejected[rejected["layer"].str.contains("pipelines|rails|fences|"
                                                                   "telecom")])
                     if len(rejected) else 0) == n_in


def test_determinism(demo):
    cfg = load_config(ROOT / "config" / "demo.toml")
    again = run_screening(cfg, asset_stages(), run_stages())
    pd.testing.assert_frame_equal(demo.segment_table.drop(columns="geometry"),
                                  again.segment_table.drop(columns="geometry"))
    pd.testing.assert_frame_equal(
        pd.DataFrame(demo.sites.drop(columns="geometry")),
        pd.DataFrame(again.sites.drop(columns="geometry")))
