"""A power line drawn as several features is one electrical line (issue 14 §1).

Invariance checks against the same line drawn as one feature (the production run on
both inputs; a split moves no conductor, so every result must agree), and closed forms:

- a split line's fault currents at its two ends are the given terminal currents, and
  at the middle of a line with equal terminals the two ends feed equal currents
  (symmetrical-component network of a single line-to-earth fault between two sources,
  e.g. P. M. Anderson, *Analysis of Faulted Power Systems*; docs/methods.md §8.1);
- features of one line that disagree on an electrical field are rejected, naming the
  layer, the features' FIDs and the field (the behaviour rule of the project).
"""

import geopandas as gpd
import numpy as np
import pytest
import shapely.affinity
from shapely.geometry import LineString, Point

from corridor.config import load_config
from corridor.io.layers import read_inputs
from corridor.pipeline import run_screening
from corridor.steps import asset_stages, run_stages
from tests.conftest import PROJECTED_CRS, X0_M, Y0_M

LENGTH_M = 20_000.0
SPLIT_M = 8_000.0  # a multiple of the tower span: generated towers fall alike

COMPARED = ["v_normal_v", "v_fault_v", "emf_section_fault_v", "earth_potential_fault_v",
            "v_step_fault_v", "fault_position_m", "i_capacitive_short_ma"]


def _lines(parts):
    """A line layer: ``parts`` is a list of (line_id, x0, x1, extra attributes)."""
    rows = {"LINE_ID": [], "KV": [], "TOWER": []}
    geoms = []
    for lid, x0, x1, extra in parts:
        rows["LINE_ID"].append(lid)
        rows["KV"].append(extra.get("kv", 138.0))
        rows["TOWER"].append(extra.get("arrangement"))
        geoms.append(LineString([(X0_M + x0, Y0_M), (X0_M + x1, Y0_M)]))
    return gpd.GeoDataFrame(rows, geometry=geoms, crs=PROJECTED_CRS)


def _assets(rows=None):
    rows = rows or [("P1", "pipeline", 5_000.0, 15_000.0, 100.0),
                    ("F1", "fence", 7_000.0, 9_500.0, -40.0)]
    geoms, attrs = [], {"AID": [], "KIND": [], "POST_OHM": []}
    for aid, kind, x0, x1, off in rows:
        geoms.append(LineString([(X0_M + x0, Y0_M + off), (X0_M + x1, Y0_M + off)]))
        attrs["AID"].append(aid)
        attrs["KIND"].append(kind)
        attrs["POST_OHM"].append(100.0)
    return gpd.GeoDataFrame(attrs, geometry=geoms, crs=PROJECTED_CRS)


def _config(scenario, lines, assets=None, **line_defaults):
    for i, a in enumerate(lines["TOWER"]):
        if a is None:
            lines.loc[i, "TOWER"] = scenario.arrangement
    cfg = scenario.build(lines=lines, assets=_assets() if assets is None else assets)
    cfg["run"].update({"limit_set": "ieee_na", "frequency_hz": 60.0, "crs": PROJECTED_CRS,
                       "tower_span_m": 500.0, "default_soil_resistivity_ohm_m": 100.0})
    cfg["line_defaults"] = {"load_current_a": 600.0, "residual_current_pct": 5.0,
                            "fault_current_start_ka": 12.0, "fault_current_end_ka": 7.0,
                            "clearing_time_s": 0.5, **line_defaults}
    return load_config(scenario.write_config(cfg))


def _run(scenario, parts):
    return run_screening(_config(scenario, _lines(parts)), asset_stages(), run_stages())


def _table(run):
    t = run.segment_table
    return t.sort_values(["asset_id", "chainage_m"]).reset_index(drop=True)


@pytest.fixture
def whole(scenario):
    return _run(scenario, [("L1", 0.0, LENGTH_M, {})])


@pytest.mark.parametrize("layout", ["in order", "listed backwards"])
def test_split_line_gives_the_results_of_the_whole_line(scenario, tmp_path, whole, layout):
    # The same conductors drawn as two features sharing line_id "L1": the normal-load EMF
    # (one line: its parts add as phasors, one residual), the scanned fault (one route fed
    # from its two terminals, not two fault cases with divided EMF), the earth potential
    # and the capacitive pickup all equal the one-feature run's.
    parts = {"in order": [("L1", 0.0, SPLIT_M, {}), ("L1", SPLIT_M, LENGTH_M, {})],
             "listed backwards": [("L1", SPLIT_M, LENGTH_M, {}), ("L1", 0.0, SPLIT_M, {})]}
    (tmp_path / "split").mkdir()
    sub = scenario.__class__(tmp_path / "split")
    run = _run(sub, parts[layout])
    a, b = _table(whole), _table(run)
    assert len(a) == len(b)
    for col in COMPARED:
        np.testing.assert_allclose(b[col].to_numpy(float), a[col].to_numpy(float),
                                   rtol=1e-6, atol=1e-9, err_msg=col)
    # exposures: the parallel length is counted once (the split may cut a run in two)
    ex_a, ex_b = whole.exposure_table, run.exposure_table
    for aid in ("P1", "F1"):
        assert ex_b.loc[ex_b["asset_id"] == aid, "parallel_length_m"].sum() == pytest.approx(
            ex_a.loc[ex_a["asset_id"] == aid, "parallel_length_m"].sum(), rel=1e-9)
    assert set(ex_b["line_id"]) == {"L1"}


@pytest.mark.parametrize("second", ["with the first", "against the first"])
def test_split_line_is_fed_from_its_own_two_terminals(scenario, second):
    # One route fed from the line's two ends: a fault at either end draws that end's
    # given current (12 kA at the first vertex, 7 kA at the last; docs/methods.md §8.1),
    # however the second feature is digitised, and the scan runs over the whole route.
    tail = (SPLIT_M, LENGTH_M) if second == "with the first" else (LENGTH_M, SPLIT_M)
    run = _run(scenario, [("L1", 0.0, SPLIT_M, {}), ("L1", *tail, {})])
    pos = run.coupling.fault_positions
    cp = run.coupling
    # one route: per asset one case per faulted phase, each phase once, all on L1's route
    for a in np.unique(cp.fault_case_asset):
        phases = list(cp.fault_case_phase[cp.fault_case_asset == a])
        assert len(phases) == len(set(phases))
    assert set(run.inputs.lines["line_id"].to_numpy()[cp.fault_case_line]) == {"L1"}
    for c in range(pos.position_m.shape[0]):
        x = pos.position_m[c]
        ok = np.isfinite(x)
        assert x[ok].min() == 0.0 and x[ok].max() == pytest.approx(LENGTH_M, abs=1e-6)
        i_f = np.abs(pos.fault_current_a[c][ok])
        assert i_f[0] == pytest.approx(12_000.0, rel=1e-6)
        assert i_f[ok.sum() - 1] == pytest.approx(7_000.0, rel=1e-6)


def test_split_line_with_equal_terminals_feeds_the_middle_equally(scenario):
    # Equal terminals, fault at the middle of the route: I_A = I_B (symmetry of the
    # two-source network, docs/methods.md §8.1), the joint at 8 km notwithstanding.
    cfg = _config(scenario, _lines([("L1", 0.0, SPLIT_M, {}), ("L1", LENGTH_M, SPLIT_M, {})]),
                  fault_current_end_ka=12.0)
    run = run_screening(cfg, asset_stages(), run_stages())
    pos = run.coupling.fault_positions
    c, k = np.argwhere(pos.position_m == LENGTH_M / 2)[0]
    assert abs(pos.current_start_a[c, k]) == pytest.approx(abs(pos.current_end_a[c, k]),
                                                            rel=1e-9)


def test_features_of_one_line_that_disagree_are_rejected_by_fid(scenario):
    # The two features of L1 give different voltages: the line is rejected whole, one row
    # per feature naming the layer, the field and both features' FIDs (GeoPackage FIDs
    # from 1, as GDAL reports them); L2, drawn in two agreeing features, is kept.
    lines = _lines([("L1", 0.0, SPLIT_M, {}), ("L1", SPLIT_M, LENGTH_M, {"kv": 230.0}),
                    ("L2", 0.0, 5_000.0, {}), ("L2", 5_000.0, 9_000.0, {})])
    lines = lines.set_geometry([g if i < 2 else shapely.affinity.translate(g, 0.0, 3_000.0)
                                for i, g in enumerate(lines.geometry)])
    inputs = read_inputs(_config(scenario, lines))
    rows = inputs.rejected.by_role("power_lines")
    assert [r["feature_id"] for r in rows] == ["L1", "L1"]
    assert {r["field"] for r in rows} == {"KV"}
    for r, fid in zip(rows, ("fid:1", "fid:2"), strict=True):
        assert r["reason"].startswith(f"feature {fid} is one of 2 features of line 'L1'")
        assert "fid:1: 138.0" in r["reason"] and "fid:2: 230.0" in r["reason"]
        assert r["layer"].endswith("power_lines")
    assert list(inputs.lines["line_id"]) == ["L2", "L2"]


def test_line_with_a_rejected_feature_is_rejected_whole(scenario):
    # A zero-length feature of L1 is rejected; its other feature is rejected with it,
    # pointing to that row (every feature is in rejected.csv, none screened half).
    lines = _lines([("L1", 0.0, SPLIT_M, {}), ("L1", SPLIT_M, SPLIT_M, {})])
    inputs = read_inputs(_config(scenario, lines))
    rows = inputs.rejected.by_role("power_lines")
    assert len(rows) == 2 and len(inputs.lines) == 0
    assert "zero-length" in rows[0]["reason"]
    assert "fid:1" in rows[1]["reason"] and "another feature of line 'L1'" in rows[1]["reason"]


def _towers(spacing_m=500.0):
    xs = np.arange(0.0, LENGTH_M + 1.0, spacing_m)
    return gpd.GeoDataFrame({"line_id": ["L1"] * len(xs)},
                            geometry=[Point(X0_M + x, Y0_M) for x in xs], crs=PROJECTED_CRS)


def test_tower_layer_on_a_split_line_gives_the_whole_line_results(scenario, tmp_path, whole):
    # The same tower layer (one tower every 500 m, all naming L1) with the line drawn as
    # one feature or as two: each tower stands on the part it is nearest to, so the
    # tower earth potential and the scanned fault agree.
    def run(root, parts):
        lines = _lines(parts)
        lines["TOWER"] = root.arrangement
        cfg = root.build(lines=lines, assets=_assets())
        cfg["run"].update({"limit_set": "ieee_na", "frequency_hz": 60.0,
                           "crs": PROJECTED_CRS, "tower_span_m": 500.0,
                           "default_soil_resistivity_ohm_m": 100.0})
        cfg["line_defaults"] = {"load_current_a": 600.0, "residual_current_pct": 5.0,
                                "fault_current_start_ka": 12.0, "fault_current_end_ka": 7.0,
                                "clearing_time_s": 0.5}
        path = root.write_layer(_towers(), "towers")
        cfg["layers"]["towers"] = {"path": path.name, "layer": "towers"}
        return run_screening(load_config(root.write_config(cfg)), asset_stages(),
                             run_stages())

    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    one = _table(run(scenario.__class__(tmp_path / "a"), [("L1", 0.0, LENGTH_M, {})]))
    two = _table(run(scenario.__class__(tmp_path / "b"),
                     [("L1", SPLIT_M, LENGTH_M, {}), ("L1", 0.0, SPLIT_M, {})]))
    for col in ("earth_potential_fault_v", "v_step_fault_v", "v_fault_v", "fault_position_m"):
        np.testing.assert_allclose(two[col].to_numpy(float), one[col].to_numpy(float),
                                   rtol=1e-6, atol=1e-9, err_msg=col)
    assert (one["earth_potential_fault_v"] > 0).any()


def test_cache_key_of_an_asset_covers_every_part_of_its_line(scenario, tmp_path):
    # An asset near the second part only: lengthening the first part changes the fault
    # currents along the whole line (one route, fed from its two ends), so the asset's
    # cache key must change with it.
    from corridor.keys import asset_keys

    far = _assets([("Q1", "pipeline", 16_000.0, 19_000.0, 100.0)])

    def key(root, first_start_m):
        cfg = _config(root, _lines([("L1", first_start_m, SPLIT_M, {}),
                                    ("L1", SPLIT_M, LENGTH_M, {})]), assets=far)
        inputs = read_inputs(cfg)
        keys = asset_keys(cfg, inputs)
        # Q1 is within reach of the second part only
        assert list(keys.lines_of(0)) == [1]
        return keys.table.set_index("asset_id").loc["Q1", "lines"]

    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    assert key(scenario.__class__(tmp_path / "a"), 0.0) != key(
        scenario.__class__(tmp_path / "b"), -3_000.0)
