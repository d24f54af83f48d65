"""Input rules of issue 12: rejected power lines, defaults only for missing values,
references between layers, folder datasets and bounded coordinates.

References outside corridor: GDAL (through pyogrio) writes every layer, including
Esri File Geodatabases (its OpenFileGDB driver writes them since GDAL 3.6) and
folders of Shapefiles; PROJ (through pyproj) gives each CRS's area of use and
unit; the schema's ranges (corridor.schema) are facts of the trade (fault currents
above 300 kA do not occur on public networks, common practice).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest
from shapely.geometry import LineString, Point

from corridor.config import load_config
from corridor.errors import InputError
from corridor.io.layers import REJECT_COLUMNS, REJECT_ROLES, Rejected, read_inputs, run_extent
from tests.conftest import PROJECTED_CRS, X0_M, Y0_M

EXIT_OK, EXIT_INPUT = 0, 2
GROUND_FIELDS = {"ground_id": "GID", "asset_id": "AID", "item": "ITEM", "resistance_ohm": "R"}


def _read(scenario, cfg):
    return read_inputs(load_config(scenario.write_config(cfg)))


def _roles(inputs, role):
    return {r["feature_id"]: r for r in inputs.rejected.by_role(role)}


# --- Rejected rows carry a role ---------------------------------------------------------------

def test_rejected_rows_carry_a_role():
    rej = Rejected()
    rej.add("lines.gpkg:lines", "L1", "KV", "missing", role="power_lines")
    rej.add("assets.gpkg:assets", 7, "POST_OHM", "missing")  # default role: an asset
    assert [r["role"] for r in rej.rows] == ["power_lines", "assets"]
    assert rej.by_role("power_lines") == [rej.rows[0]]
    assert rej.by_role("assets")[0]["feature_id"] == "7"  # ids are text
    assert rej.by_role("towers") == []
    assert list(rej.frame().columns) == REJECT_COLUMNS
    assert list(Rejected().frame().columns) == REJECT_COLUMNS  # empty, same columns
    with pytest.raises(ValueError, match="unknown role"):
        rej.add("x", "1", "f", "r", role="lines")
    assert set(REJECT_ROLES) == {"power_lines", "assets", "soil", "grounds", "towers",
                                 "substations"}


def _lines_with(scenario, **columns) -> gpd.GeoDataFrame:
    """Three parallel lines L1..L3 (200 m apart) with extra attribute columns."""
    base = scenario.line_frame()
    rows = []
    for k in range(3):
        geom = LineString([(X0_M, Y0_M - 200.0 * k), (X0_M + 4000.0, Y0_M - 200.0 * k)])
        rows.append({"LINE_ID": f"L{k + 1}", "KV": 220.0, "TOWER": scenario.arrangement,
                     "geometry": geom})
    frame = gpd.GeoDataFrame(rows, geometry="geometry", crs=base.crs)
    for name, values in columns.items():
        frame[name] = values
    return frame


def test_text_voltage_rejects_the_line_with_role(scenario):
    """'220 kV' in a voltage field is not a number: the line is rejected as a power line,
    never defaulted (issue 12)."""
    lines = _lines_with(scenario)
    lines["KV"] = ["220", "220 kV", None]
    cfg = scenario.build(lines=lines)
    inputs = _read(scenario, cfg)
    assert list(inputs.lines["line_id"]) == ["L1"]
    assert float(inputs.lines["voltage_kv"].iloc[0]) == 220.0  # text "220" is a number
    rej = _roles(inputs, "power_lines")
    assert set(rej) == {"L2", "L3"}
    assert rej["L2"]["field"] == "KV" and "220 kV" in rej["L2"]["reason"]
    assert rej["L3"]["reason"] == "missing"  # voltage has no default: required
    assert inputs.rejected.by_role("assets") == []


def test_fault_current_typo_rejects_missing_takes_line_default(scenario):
    """400 kA (a typo of 40) is above the 300 kA ceiling: the line is rejected, not
    screened with the 10 kA default. A NULL takes [line_defaults] and is recorded."""
    lines = _lines_with(scenario, IF_KA=[40.0, 400.0, np.nan])
    cfg = scenario.build(lines=lines)
    cfg["layers"]["power_lines"]["fields"]["fault_current_start_ka"] = "IF_KA"
    cfg["line_defaults"] = {"fault_current_start_ka": 12.5}
    inputs = _read(scenario, cfg)
    kept = inputs.lines.set_index("line_id")
    assert list(kept.index) == ["L1", "L3"]
    assert float(kept.loc["L1", "fault_current_start_ka"]) == 40.0
    assert float(kept.loc["L3", "fault_current_start_ka"]) == 12.5
    (row,) = inputs.rejected.by_role("power_lines")
    assert (row["feature_id"], row["field"]) == ("L2", "IF_KA")
    assert "400.0 above the valid range" in row["reason"]
    assert inputs.defaults_used["fault_current_start_ka"] == ["L3"]
    # absent columns are missing for every kept line (and for every asset likewise)
    assert inputs.defaults_used["clearing_time_s"] == ["L1", "L3"]
    assert inputs.defaults_used["post_spacing_m"] == ["F1"]
    assert "fault_current_end_ka" in inputs.defaults_used
    assert "voltage_kv" not in inputs.defaults_used


@pytest.mark.parametrize("raw, reason", [("wood ", None), ("steel", "is not one of"),
                                         (" ", "missing")])
def test_choice_values(scenario, raw, reason):
    """A value outside the choices rejects the fence even with kind defaults allowed; a
    blank one is missing and takes the default."""
    assets = scenario.asset_frame()
    assets["POSTS"] = [raw]
    cfg = scenario.build(assets=assets)
    cfg["layers"]["assets"][0]["fields"]["post_type"] = "POSTS"
    cfg["run"]["use_kind_defaults"] = True
    inputs = _read(scenario, cfg)
    if reason is None:
        assert inputs.assets["post_type"].tolist() == ["wood"]
    elif reason == "missing":
        assert inputs.assets["post_type"].tolist() == ["metal"]  # the fence kind default
        assert inputs.defaults_used["post_type"] == ["F1"]
    else:
        (row,) = inputs.rejected.by_role("assets")
        assert row["field"] == "POSTS" and reason in row["reason"]


def test_whole_number_field_rejects_fractions(scenario):
    assets = scenario.asset_frame()
    assets["WIRES"] = [2.5]
    cfg = scenario.build(assets=assets)
    cfg["layers"]["assets"][0]["fields"]["wire_count"] = "WIRES"
    inputs = _read(scenario, cfg)
    (row,) = inputs.rejected.by_role("assets")
    assert row["field"] == "WIRES" and "whole number" in row["reason"]


# --- ground items and towers ------------------------------------------------------------------

def _grounds(scenario, cfg, frame: gpd.GeoDataFrame) -> dict:
    path = scenario.write_layer(frame, "grounds")
    cfg["layers"]["grounds"] = {"path": path.name, "layer": "grounds",
                                "fields": dict(GROUND_FIELDS)}
    return cfg


def _points(n: int, dy: float = 100.0) -> list[Point]:
    return [Point(X0_M + 600.0 + 300.0 * i, Y0_M + dy) for i in range(n)]


def test_grounds_naming_unknown_or_rejected_assets_are_rejected(scenario, cli, capsys):
    """The README: a grounding item naming no screened asset is rejected (rejected.csv
    with layer, feature id, field, reason)."""
    assets = scenario.asset_frame()
    bad = assets.copy()
    bad["AID"] = "F2"
    bad["POST_OHM"] = -1.0  # invalid: F2 is rejected
    bad.geometry = [LineString([(X0_M + 500, Y0_M + 300), (X0_M + 3500, Y0_M + 300)])]
    assets = gpd.GeoDataFrame(pd.concat([assets, bad], ignore_index=True), crs=assets.crs)
    cfg = scenario.build(assets=assets)
    g = gpd.GeoDataFrame({"GID": ["G1", "G2", "G3", "G4"], "AID": ["F1", "F2", "NOPE", None],
                          "ITEM": ["ground"] * 4, "R": [5.0] * 4},
                         geometry=_points(4), crs=PROJECTED_CRS)
    cfg = _grounds(scenario, cfg, g)
    inputs = _read(scenario, cfg)
    assert inputs.grounds["feature_id"].tolist() == ["G1"]
    rej = _roles(inputs, "grounds")
    assert set(rej) == {"G2", "G3", "G4"}
    assert "'F2' was rejected" in rej["G2"]["reason"]
    assert "'NOPE' is not in any asset layer" in rej["G3"]["reason"]
    assert rej["G4"]["reason"] == "missing asset id"
    assert {r["field"] for r in rej.values()} == {"AID"}
    assert {r["layer"] for r in rej.values()} == {"grounds.gpkg:grounds"}
    assert inputs.counts["grounds"] == 1
    # the whole run: exit 0, the rows in rejected.csv
    path = scenario.write_config(cfg)
    assert cli(["run", str(path), "-q"]) == EXIT_OK
    out = pd.read_csv(scenario.root / "out" / "rejected.csv", comment="#", dtype=str)
    assert set(out.loc[out["role"] == "grounds", "feature_id"]) == {"G2", "G3", "G4"}
    assert set(out.loc[out["role"] == "assets", "feature_id"]) == {"F2"}


def test_integer_ids_match_across_layers(scenario, cli, capsys):
    """Integer id columns (and integer columns with NULLs, which the reader gives as
    floats) are text "7" everywhere, so a ground item finds its asset."""
    assets = scenario.asset_frame()
    assets["AID"] = np.array([7], dtype=np.int64)
    cfg = scenario.build(assets=assets)
    g = gpd.GeoDataFrame({"GID": [1, 2, 3], "AID": [7.0, 99.0, np.nan],
                          "ITEM": ["ground"] * 3, "R": [5.0] * 3},
                         geometry=_points(3), crs=PROJECTED_CRS)
    cfg = _grounds(scenario, cfg, g)
    inputs = _read(scenario, cfg)
    assert inputs.assets["asset_id"].tolist() == ["7"]
    assert inputs.grounds["asset_id"].tolist() == ["7"]
    assert inputs.grounds["feature_id"].tolist() == ["1"]
    assert set(_roles(inputs, "grounds")) == {"2", "3"}
    assert cli(["run", str(scenario.write_config(cfg)), "-q"]) == EXIT_OK


def test_text_resistance_with_series_break(scenario, cli, capsys):
    """A text-typed resistance column beside a series break: "5.0" is read as 5 Ω, a
    break needs no resistance, a ground with "n/a" is rejected naming the field."""
    cfg = scenario.build()
    g = gpd.GeoDataFrame({"GID": ["G1", "G2", "G3", "G4"], "AID": ["F1"] * 4,
                          "ITEM": ["ground", "insulating_joint", "ground", "gap"],
                          "R": ["5.0", "", "n/a", None]},
                         geometry=_points(4), crs=PROJECTED_CRS)
    cfg = _grounds(scenario, cfg, g)
    inputs = _read(scenario, cfg)
    kept = inputs.grounds.set_index("feature_id")
    assert list(kept.index) == ["G1", "G2", "G4"]
    assert float(kept.loc["G1", "resistance_ohm"]) == 5.0
    (row,) = inputs.rejected.by_role("grounds")
    assert (row["feature_id"], row["field"]) == ("G3", "R") and "n/a" in row["reason"]
    assert cli(["run", str(scenario.write_config(cfg)), "-q"]) == EXIT_OK


def test_towers_naming_unknown_or_rejected_lines(scenario):
    lines = _lines_with(scenario)
    lines["KV"] = [220.0, -1.0, 220.0]  # L2 rejected
    cfg = scenario.build(lines=lines)
    t = gpd.GeoDataFrame({"TID": ["T1", "T2", "T3"], "LID": ["L1", "L2", "L9"]},
                         geometry=[Point(X0_M + 100, Y0_M), Point(X0_M + 100, Y0_M - 200),
                                   Point(X0_M + 100, Y0_M - 400)], crs=PROJECTED_CRS)
    path = scenario.write_layer(t, "towers")
    cfg["layers"]["towers"] = {"path": path.name, "layer": "towers",
                               "fields": {"tower_id": "TID", "line_id": "LID"}}
    inputs = _read(scenario, cfg)
    assert inputs.towers["feature_id"].tolist() == ["T1"]
    rej = _roles(inputs, "towers")
    assert "'L2' was rejected" in rej["T2"]["reason"]
    assert "'L9' is not in any line layer" in rej["T3"]["reason"]
    assert rej["T2"]["field"] == "LID"


# --- folder datasets --------------------------------------------------------------------------

def _write_gdb(scenario, name="data.gdb") -> None:
    for layer, frame in (("power_lines", scenario.line_frame()),
                         ("assets", scenario.asset_frame())):
        pyogrio.write_dataframe(frame, scenario.root / name, layer=layer, driver="OpenFileGDB")


def _folder_config(scenario, folder: str, layers: bool = True) -> dict:
    cfg = scenario.build()
    for entry in (cfg["layers"]["power_lines"], cfg["layers"]["assets"][0]):
        entry["path"] = folder
    if not layers:
        cfg["layers"]["power_lines"].pop("layer")
        cfg["layers"]["assets"][0].pop("layer")
    return cfg


def test_file_geodatabase(scenario):
    """An Esri File Geodatabase is a folder; GDAL's OpenFileGDB driver reads it."""
    _write_gdb(scenario)
    cfg = _folder_config(scenario, "data.gdb")
    inputs = _read(scenario, cfg)
    assert inputs.lines["line_id"].tolist() == ["L1"]
    assert inputs.assets["asset_id"].tolist() == ["F1"]
    assert inputs.assets.geometry.iloc[0].equals(scenario.asset_frame().geometry.iloc[0])
    assert inputs.lines["source_layer"].iloc[0] == "data.gdb:power_lines"


def test_folder_without_layer_name_lists_its_layers(scenario, cli, capsys):
    _write_gdb(scenario)
    cfg = _folder_config(scenario, "data.gdb", layers=False)
    with pytest.raises(InputError) as info:
        _read(scenario, cfg)
    msg = "\n".join(info.value.problems)
    assert "folder holds several layers" in msg
    assert "power_lines" in msg and "assets" in msg and "layer = ..." in msg
    capsys.readouterr()
    assert cli(["check", str(scenario.write_config(cfg)), "-q"]) == EXIT_INPUT
    assert "several layers" in capsys.readouterr().err


def test_folder_of_shapefiles(scenario):
    sub = scenario.root / "shp"
    sub.mkdir()
    scenario.write_layer(scenario.line_frame(), "shp/power_lines", "ESRI Shapefile")
    scenario.write_layer(scenario.asset_frame(), "shp/assets", "ESRI Shapefile")
    cfg = _folder_config(scenario, "shp")
    inputs = _read(scenario, cfg)
    assert inputs.assets["asset_id"].tolist() == ["F1"]
    assert inputs.lines["line_id"].tolist() == ["L1"]


def test_empty_folder_is_an_input_error(scenario):
    (scenario.root / "empty.gdb").mkdir()
    cfg = _folder_config(scenario, "empty.gdb", layers=False)
    with pytest.raises(InputError, match="folder cannot be opened|holds no layer"):
        _read(scenario, cfg)


def test_folder_datasets_run_end_to_end(scenario, cli, capsys):
    """``run`` (not only ``check``) works on a File Geodatabase; it needs fingerprints of
    folder datasets (corridor.io.fingerprint) in the run record."""
    pytest.importorskip("corridor.io.fingerprint")
    _write_gdb(scenario)
    path = scenario.write_config(_folder_config(scenario, "data.gdb"))
    assert cli(["check", str(path), "-q"]) == EXIT_OK
    assert cli(["run", str(path), "-q"]) == EXIT_OK
    kept = pyogrio.read_dataframe(scenario.root / "out" / "screening.gpkg", layer="assets",
                                  read_geometry=False)
    assert kept["asset_id"].tolist() == ["F1"]


def test_check_accepts_file_geodatabase(scenario, cli, capsys):
    _write_gdb(scenario)
    assert cli(["check", str(scenario.write_config(_folder_config(scenario, "data.gdb"))),
                "-q"]) == EXIT_OK


# --- coordinates ------------------------------------------------------------------------------

def test_run_extent_from_area_of_use():
    """UTM zone 33N is used between 12 and 18 E (PROJ's area of use): the extent holds
    the zone's band at the equator as pyproj projects it, widened by 500 km or more."""
    crs = pyproj.CRS.from_user_input("EPSG:32633")
    aou = crs.area_of_use
    assert (aou.west, aou.east) == (12.0, 18.0)  # PROJ's database
    x0, y0, x1, y1 = run_extent(crs)
    tr = pyproj.Transformer.from_crs(4326, crs, always_xy=True)
    ex, _ = tr.transform([12.0, 18.0], [0.0, 0.0])
    assert x0 <= ex[0] - 500e3 and x1 >= ex[1] + 500e3
    assert x1 < 1e7 and y1 < 2e7
    # Web Mercator's x reaches +-20,037,508 m (pi times the 6,378,137 m WGS 84 radius)
    x0, _, x1, _ = run_extent(pyproj.CRS.from_user_input("EPSG:3857"))
    assert x0 < -np.pi * 6378137.0 and x1 > np.pi * 6378137.0


@pytest.mark.parametrize("x_far", [1e9, 2e7, -5e6])
def test_far_coordinates_rejected_naming_geometry(scenario, cli, capsys, x_far):
    """Coordinates far outside the run CRS's area of use (1e9 m gave MemoryError) reject
    the feature; the other features are screened."""
    assets = scenario.asset_frame()
    far = assets.copy()
    far["AID"] = "FAR"
    far.geometry = [LineString([(X0_M, Y0_M + 100), (x_far, Y0_M + 100)])]
    assets = gpd.GeoDataFrame(pd.concat([assets, far], ignore_index=True), crs=assets.crs)
    cfg = scenario.build(assets=assets)
    inputs = _read(scenario, cfg)
    assert inputs.assets["asset_id"].tolist() == ["F1"]
    (row,) = inputs.rejected.by_role("assets")
    assert (row["feature_id"], row["field"]) == ("FAR", "geometry")
    assert "outside the area of use of EPSG:32633" in row["reason"]
    assert cli(["run", str(scenario.write_config(cfg)), "-q"]) == EXIT_OK


def test_feet_inputs_reprojected_to_metre_run_crs(scenario):
    """A layer in US survey feet (EPSG:2272) with a metre run CRS: lengths come out in
    metres, as PROJ transforms the vertices (no factor 3.28)."""
    lines = scenario.line_frame().to_crs("EPSG:2272")
    assets = scenario.asset_frame().to_crs("EPSG:2272")
    cfg = scenario.build(lines=lines, assets=assets)
    cfg["run"]["crs"] = PROJECTED_CRS
    inputs = _read(scenario, cfg)
    expected = scenario.asset_frame().geometry.iloc[0].length  # 3000 m, drawn in metres
    assert inputs.assets.geometry.iloc[0].length == pytest.approx(expected, rel=1e-6)


def test_empty_run_crs_with_feet_inputs_picks_utm(scenario):
    """With no run.crs and inputs projected in feet, the run uses the UTM zone of the
    data (lon 15.2 E: zone 33, floor((lon + 180) / 6) + 1; from memory), never feet."""
    lines = scenario.line_frame().to_crs("EPSG:2272")
    assets = scenario.asset_frame().to_crs("EPSG:2272")
    cfg = scenario.build(lines=lines, assets=assets)
    inputs = _read(scenario, cfg)
    assert inputs.crs.to_epsg() == 32633
    assert inputs.crs.axis_info[0].unit_name == "metre"


def test_rejected_lines_and_assets_logged_at_warning(scenario, caplog):
    """Issue 12: rejected power lines and assets reach the log at WARNING (shown under -q)."""
    import logging

    lines = _lines_with(scenario)
    lines["KV"] = [220.0, 0.0, 220.0]  # L2: 0 kV is below the 1 kV floor of the schema
    assets = scenario.asset_frame()
    assets["POST_OHM"] = ["many"]
    assets = gpd.GeoDataFrame(pd.concat([scenario.asset_frame(), assets.assign(AID="F2")],
                                        ignore_index=True), crs=assets.crs)
    cfg = scenario.build(lines=lines, assets=assets)
    with caplog.at_level(logging.WARNING, logger="corridor"):
        _read(scenario, cfg)
    msgs = [r.getMessage() for r in caplog.records if r.levelno == logging.WARNING]
    assert any("power line L2 rejected" in m and "KV" in m for m in msgs), msgs
    assert any("asset F2 rejected" in m and "POST_OHM" in m and "many" in m for m in msgs), msgs


def test_missing_asset_kind_is_named_missing(scenario):
    assets = scenario.asset_frame()
    assets = gpd.GeoDataFrame(pd.concat([assets, assets.assign(AID="F2", KIND=None)],
                                        ignore_index=True), crs=assets.crs)
    inputs = _read(scenario, scenario.build(assets=assets))
    (row,) = inputs.rejected.by_role("assets")
    assert (row["feature_id"], row["field"]) == ("F2", "KIND")
    assert row["reason"].startswith("missing asset kind (allowed: ")


def test_per_circuit_list_with_a_bad_value_rejects_the_line(scenario):
    """Issue 12 rule for issue 15's per-circuit fields: a present but invalid value
    ("400;lots", a direction of 2) rejects the line, naming the field; it never stops
    the run and is never replaced by a default."""
    lines = _lines_with(scenario)
    lines["CIRC_A"] = ["400;300", "400;lots", None]
    lines["CIRC_DIR"] = ["1;-1", None, "2"]
    cfg = scenario.build(lines=lines)
    cfg["layers"]["power_lines"]["fields"].update(
        {"circuit_load_current_a": "CIRC_A", "circuit_flow_direction": "CIRC_DIR"})
    inputs = _read(scenario, cfg)
    rows = {r["feature_id"]: r for r in inputs.rejected.by_role("power_lines")}
    assert set(rows) == {"L2", "L3"}
    assert rows["L2"]["field"] == "CIRC_A" and "'400;lots'" in rows["L2"]["reason"]
    assert rows["L3"]["field"] == "CIRC_DIR" and "+1, -1" in rows["L3"]["reason"]
    assert list(inputs.lines["line_id"]) == ["L1"]


def test_two_layer_soil_polygon_needs_no_homogeneous_value(scenario):
    """Issue 15: a polygon may give a two-layer soil alone; one with no resistivity at
    all is rejected, never filled from run.default_soil_resistivity_ohm_m."""
    from shapely.geometry import box

    soil = gpd.GeoDataFrame(
        {"RHO": [None, None, 50.0], "TOP": [30.0, None, None], "T": [3.0, None, None],
         "BOT": [1000.0, None, None]},
        geometry=[box(X0_M - 10, Y0_M - 10, X0_M + 1000, Y0_M + 500),
                  box(X0_M + 1000, Y0_M - 10, X0_M + 2000, Y0_M + 500),
                  box(X0_M + 2000, Y0_M - 10, X0_M + 4000, Y0_M + 500)],
        crs=scenario.line_frame().crs)
    cfg = scenario.build()
    path = scenario.write_layer(soil, "soil")
    cfg["layers"]["soil"] = {"path": path.name, "layer": "soil", "fields": {
        "soil_resistivity_ohm_m": "RHO", "top_resistivity_ohm_m": "TOP",
        "top_thickness_m": "T", "bottom_resistivity_ohm_m": "BOT"}}
    inputs = _read(scenario, cfg)
    (row,) = inputs.rejected.by_role("soil")
    assert row["field"] == "RHO" and "no resistivity" in row["reason"]
    assert len(inputs.soil) == 2
    assert inputs.soil["top_resistivity_ohm_m"].iloc[0] == 30.0
