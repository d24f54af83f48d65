"""Reading input layers: formats, Z, reprojection, missing CRS and bad features.

References outside corridor: GDAL's drivers (through pyogrio) write the
layers; shapely computes the input lengths; PROJ (through pyproj) is the
reference for every reprojection and for the UTM zone of geographic data.
The UTM zone number is floor((lon + 180) / 6) + 1 (the UTM grid definition,
e.g. NGA.SIG.0012 §2; from memory), so lon 15.2 E, lat 47.1 N is zone 33N,
EPSG:32633.
"""

from __future__ import annotations

import logging

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest
import shapely
from shapely.geometry import LineString, MultiLineString, Point

from corridor.config import load_config
from corridor.errors import InputError
from corridor.io.layers import read_inputs
from tests.conftest import DRIVER_EXT, PROJECTED_CRS, X0_M, Y0_M

ALL_DRIVERS = list(DRIVER_EXT)
# GDAL writes a length in metres from float64 coordinates of ~5e6 m, which keep
# ~1e-9 m; 1e-6 m leaves room for text formats (GeoJSON keeps 15 significant digits).
LENGTH_ATOL_M = 1e-6


def _read(scenario, cfg):
    return read_inputs(load_config(scenario.write_config(cfg)))


def _asset_layer_label(cfg: dict, driver: str = "GPKG") -> str:
    entry = cfg["layers"]["assets"][0]
    return f"{entry['path']}:{entry['layer']}" if driver == "GPKG" else entry["path"]


def _three_assets(crs=PROJECTED_CRS) -> gpd.GeoDataFrame:
    """Two fences (one in two parts) and a pipeline, ids and kinds in fields."""
    geoms = [
        LineString([(X0_M + 500, Y0_M + 100), (X0_M + 3500, Y0_M + 100)]),
        MultiLineString([[(X0_M + 200, Y0_M - 150), (X0_M + 900, Y0_M - 160)],
                         [(X0_M + 1000, Y0_M - 160), (X0_M + 1800.25, Y0_M - 400.5)]]),
        LineString([(X0_M - 300, Y0_M - 800), (X0_M + 1200.5, Y0_M + 50.125),
                    (X0_M + 4300, Y0_M + 700)]),
    ]
    return gpd.GeoDataFrame({"AID": ["F1", "F2", "P1"], "KIND": ["fence", "fence", "pipeline"],
                             "POST_OHM": [80.0, 120.0, 0.0]},  # a pipeline has no posts: unread
                            geometry=geoms, crs=crs)


# --- formats ----------------------------------------------------------------------------------

@pytest.mark.parametrize("driver", ALL_DRIVERS)
def test_same_assets_through_every_format(scenario, driver):
    source = _three_assets()
    inputs = _read(scenario, scenario.build(driver, assets=source))
    got = inputs.assets.sort_values("asset_id").reset_index(drop=True)
    assert list(got["asset_id"]) == ["F1", "F2", "P1"]
    assert list(got["asset_kind"]) == ["fence", "fence", "pipeline"]
    # reference: shapely's length of the frame that was written
    np.testing.assert_allclose(shapely.length(got.geometry.to_numpy()),
                               shapely.length(source.geometry.to_numpy()),
                               rtol=0, atol=LENGTH_ATOL_M)
    assert inputs.crs.equals(pyproj.CRS.from_user_input(PROJECTED_CRS))
    assert list(inputs.lines["line_id"]) == ["L1"]
    assert inputs.rejected.rows == []
    fences = got[got["asset_kind"] == "fence"]
    assert list(fences["post_resistance_ohm"].astype(float)) == [80.0, 120.0]


# --- Z dropped --------------------------------------------------------------------------------

@pytest.mark.parametrize("driver", ALL_DRIVERS)
def test_z_coordinates_dropped_with_info(scenario, driver, caplog):
    xyz = [(X0_M + 500, Y0_M + 100, 12.5), (X0_M + 1500, Y0_M + 140, 13.0),
           (X0_M + 3500, Y0_M + 100, 11.0)]
    assets = scenario.asset_frame()
    assets.geometry = [LineString(xyz)]
    assert shapely.has_z(assets.geometry.to_numpy()).all()
    cfg = scenario.build(driver, assets=assets)
    with caplog.at_level(logging.INFO, logger="corridor"):
        inputs = _read(scenario, cfg)
    geom = inputs.assets.geometry.iloc[0]
    assert not geom.has_z
    np.testing.assert_allclose(np.asarray(geom.coords), np.asarray(xyz)[:, :2], rtol=0,
                               atol=LENGTH_ATOL_M)  # x, y kept as written
    label = _asset_layer_label(cfg, driver)
    infos = [r for r in caplog.records if r.levelno == logging.INFO and "Z/M" in r.getMessage()]
    assert any(label in r.getMessage() for r in infos), [r.getMessage() for r in caplog.records]


# --- reprojection -----------------------------------------------------------------------------

def _geographic_scenario(scenario):
    """The line and a three-vertex fence near lon 15.2 E, lat 47.1 N, in EPSG:4326."""
    lines = scenario.line_frame(crs="EPSG:4326")
    lines.geometry = [LineString([(15.20, 47.10), (15.25, 47.10)])]
    assets = scenario.asset_frame(crs="EPSG:4326")
    lonlat = [(15.2105, 47.1009), (15.2250, 47.1013), (15.2403, 47.1021)]
    assets.geometry = [LineString(lonlat)]
    return lines, assets, np.asarray(lonlat)


@pytest.mark.parametrize("driver", ["GPKG", "GeoJSON"])
def test_reprojection_matches_pyproj(scenario, driver):
    lines, assets, lonlat = _geographic_scenario(scenario)
    cfg = scenario.build(driver, lines=lines, assets=assets)
    cfg["run"]["crs"] = "EPSG:32633"
    inputs = _read(scenario, cfg)
    # reference: PROJ through pyproj, lon/lat order forced
    tr = pyproj.Transformer.from_crs(4326, 32633, always_xy=True)
    ex, ey = tr.transform(lonlat[:, 0], lonlat[:, 1])
    got = np.asarray(inputs.assets.geometry.iloc[0].coords)
    # 1e-6 m: both sides run the same PROJ operation; only float rounding may differ
    np.testing.assert_allclose(got[:, 0], ex, rtol=0, atol=1e-6)
    np.testing.assert_allclose(got[:, 1], ey, rtol=0, atol=1e-6)
    assert inputs.crs.equals(pyproj.CRS.from_epsg(32633))


def test_reprojection_between_projected_crs(scenario):
    """Inputs in UTM 33N, run in ETRS89-LAEA Europe (EPSG:3035): also PROJ's answer."""
    cfg = scenario.build()
    cfg["run"]["crs"] = "EPSG:3035"
    inputs = _read(scenario, cfg)
    src = np.asarray(scenario.asset_frame().geometry.iloc[0].coords)
    ex, ey = pyproj.Transformer.from_crs(32633, 3035, always_xy=True).transform(src[:, 0],
                                                                               src[:, 1])
    got = np.asarray(inputs.assets.geometry.iloc[0].coords)
    np.testing.assert_allclose(got, np.column_stack([ex, ey]), rtol=0, atol=1e-6)  # as above


def test_empty_run_crs_picks_utm_zone(scenario, caplog):
    lines, assets, _ = _geographic_scenario(scenario)
    cfg = scenario.build(lines=lines, assets=assets)
    assert cfg["run"]["crs"] == ""
    with caplog.at_level(logging.INFO, logger="corridor"):
        inputs = _read(scenario, cfg)
    # zone 33N from the UTM grid definition (module docstring) and from pyproj's estimate
    assert inputs.crs.to_epsg() == 32633
    assert inputs.crs.equals(lines.estimate_utm_crs())
    assert any("EPSG:32633" in r.getMessage() for r in caplog.records)
    # the layers are in the chosen CRS: the fence's x lies in zone 33's metric range
    x = shapely.get_coordinates(inputs.assets.geometry.to_numpy())[:, 0]
    assert ((x > 100_000) & (x < 900_000)).all()  # UTM eastings (common practice)


def test_empty_run_crs_keeps_projected_inputs(scenario):
    inputs = _read(scenario, scenario.build())
    assert inputs.crs.equals(pyproj.CRS.from_user_input(PROJECTED_CRS))
    np.testing.assert_allclose(np.asarray(inputs.assets.geometry.iloc[0].coords),
                               np.asarray(scenario.asset_frame().geometry.iloc[0].coords),
                               rtol=0, atol=0)  # no transformation at all: bit-identical


# --- missing CRS ------------------------------------------------------------------------------

# GeoJSON is left out: RFC 7946 §4 makes WGS 84 the CRS of a file that names none,
# and GDAL reads it so.
@pytest.mark.parametrize("driver", ["GPKG", "ESRI Shapefile", "FlatGeobuf"])
def test_layer_without_crs(scenario, driver):
    cfg = scenario.build(driver, assets=scenario.asset_frame(crs=None))
    label = _asset_layer_label(cfg, driver)
    with pytest.raises(InputError) as info:
        _read(scenario, cfg)
    assert len(info.value.problems) == 1
    msg = info.value.problems[0]
    assert label in msg and "no CRS" in msg and "crs =" in msg  # says how to fix it
    cfg["layers"]["assets"][0]["crs"] = PROJECTED_CRS
    inputs = _read(scenario, cfg)
    assert list(inputs.assets["asset_id"]) == ["F1"]
    np.testing.assert_allclose(np.asarray(inputs.assets.geometry.iloc[0].coords),
                               np.asarray(scenario.asset_frame().geometry.iloc[0].coords),
                               rtol=0, atol=0)  # declared CRS equals the run CRS: untouched


def test_declared_crs_is_reprojected(scenario):
    """A CRS-less layer declared geographic is reprojected like one that carries it."""
    lines, assets, lonlat = _geographic_scenario(scenario)
    assets = assets.set_crs(None, allow_override=True)
    cfg = scenario.build("ESRI Shapefile", lines=lines, assets=assets)
    cfg["layers"]["assets"][0]["crs"] = "EPSG:4326"
    cfg["run"]["crs"] = "EPSG:32633"
    inputs = _read(scenario, cfg)
    ex, ey = pyproj.Transformer.from_crs(4326, 32633, always_xy=True).transform(lonlat[:, 0],
                                                                               lonlat[:, 1])
    got = np.asarray(inputs.assets.geometry.iloc[0].coords)
    np.testing.assert_allclose(got, np.column_stack([ex, ey]), rtol=0, atol=1e-6)  # PROJ


# --- bad features -----------------------------------------------------------------------------

def _bad_assets() -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {"AID": ["A1", "A2", "A3", "A4", "A5", None],
         "KIND": ["fence"] * 6, "POST_OHM": [80.0] * 6},
        geometry=[
            LineString([(X0_M + 500, Y0_M + 100), (X0_M + 1000, Y0_M + 100)]),
            MultiLineString([[(X0_M + 500, Y0_M + 200), (X0_M + 1000, Y0_M + 200)],
                             [(X0_M + 1100, Y0_M + 200), (X0_M + 1500, Y0_M + 300)]]),
            Point(X0_M + 500, Y0_M + 300),
            LineString(),
            LineString([(X0_M + 500, Y0_M + 400), (X0_M + 500, Y0_M + 400)]),
            LineString([(X0_M + 500, Y0_M + 500), (X0_M + 1000, Y0_M + 500)]),
        ], crs=PROJECTED_CRS)


@pytest.mark.parametrize("driver", ["GPKG", "ESRI Shapefile"])
def test_feature_without_id_is_named_by_its_fid(scenario, driver):
    # Issue 16 §3: an asset without an id is named by its layer FID, as GDAL reports it
    # (GeoPackage: the primary key, from 1; Shapefile: the record number, from 0). The
    # reference is pyogrio's own FID (read_dataframe(fid_as_index=True)), not the row.
    source = _three_assets()
    source.loc[1, "AID"] = None
    source.loc[2, "AID"] = None
    source.loc[2, "POST_OHM"] = -1.0  # a bad value too: rejected, named by its FID
    source.loc[2, "KIND"] = "fence"
    cfg = scenario.build(driver, assets=source)
    entry = cfg["layers"]["assets"][0]
    cfg["run"]["use_kind_defaults"] = False
    fids = pyogrio.read_dataframe(scenario.root / entry["path"], layer=entry.get("layer"),
                                  fid_as_index=True).index.to_numpy()
    assert fids[1] == (2 if driver == "GPKG" else 1)  # GDAL's FID conventions
    inputs = _read(scenario, cfg)
    rows = {r["feature_id"]: r for r in inputs.rejected.rows}
    assert set(rows) == {f"fid:{fids[1]}", f"fid:{fids[2]}"}
    assert rows[f"fid:{fids[1]}"]["reason"] == "missing id"
    assert rows[f"fid:{fids[2]}"]["reason"] == "missing id"
    # a feature with an id but a bad value keeps its id
    source.loc[2, "AID"] = "F9"
    cfg = scenario.build(driver, assets=source)
    cfg["run"]["use_kind_defaults"] = False
    inputs = _read(scenario, cfg)
    assert {r["feature_id"] for r in inputs.rejected.rows} == {f"fid:{fids[1]}", "F9"}


# Shapefile and FlatGeobuf cannot hold a Point beside lines or an empty geometry.
@pytest.mark.parametrize("driver", ["GPKG", "GeoJSON"])
def test_bad_features_rejected_with_reasons(scenario, driver):
    source = _bad_assets()
    cfg = scenario.build(driver, assets=source)
    label = _asset_layer_label(cfg, driver)
    inputs = _read(scenario, cfg)
    assert sorted(inputs.assets["asset_id"]) == ["A1", "A2"]
    multi = inputs.assets.set_index("asset_id").geometry["A2"]
    assert multi.geom_type == "MultiLineString"  # kept whole, not split or dropped
    assert multi.length == pytest.approx(source.geometry[1].length, abs=LENGTH_ATOL_M)
    rows = {(r["feature_id"], r["field"]): r for r in inputs.rejected.rows}
    assert all(r["layer"] == label for r in inputs.rejected.rows)
    assert "Point" in rows[("A3", "geometry")]["reason"]
    reason_a4 = rows[("A4", "geometry")]["reason"]
    assert "empty" in reason_a4 or "no geometry" in reason_a4  # a driver may store NULL
    assert "zero-length" in rows[("A5", "geometry")]["reason"]
    # the feature without an id is named by its FID as GDAL reports it (pyogrio, fid_as_index)
    fids = pyogrio.read_dataframe(scenario.root / cfg["layers"]["assets"][0]["path"],
                                  layer=cfg["layers"]["assets"][0].get("layer"),
                                  fid_as_index=True).index
    assert rows[(f"fid:{fids[5]}", "AID")]["reason"] == "missing id"
    assert len(inputs.rejected.rows) == 4


@pytest.mark.parametrize("driver", ["GPKG", "GeoJSON"])
def test_no_feature_silently_lost(scenario, driver):
    source = _bad_assets()
    source.loc[0, "POST_OHM"] = -3.0  # also a bad attribute, rejected below
    cfg = scenario.build(driver, assets=source)
    cfg["run"]["use_kind_defaults"] = False
    inputs = _read(scenario, cfg)
    label = _asset_layer_label(cfg, driver)
    rejected_ids = {r["feature_id"] for r in inputs.rejected.rows if r["layer"] == label}
    kept_ids = set(inputs.assets["asset_id"])
    assert not kept_ids & rejected_ids
    assert len(kept_ids) + len(rejected_ids) == len(source)  # conservation of features
    assert inputs.counts["assets"] + inputs.counts["rejected"] == len(source)


def test_duplicate_asset_ids(scenario):
    assets = _three_assets()
    assets["AID"] = ["F1", "F1", "P7"]
    cfg = scenario.build(assets=assets)
    with pytest.raises(InputError) as info:
        _read(scenario, cfg)
    msg = "\n".join(info.value.problems)
    assert "duplicate" in msg and "F1" in msg and "P7" not in msg
    assert _asset_layer_label(cfg) in msg


def test_duplicate_asset_ids_across_layers(scenario):
    cfg = scenario.build()
    other = scenario.write_layer(scenario.asset_frame(), "more_assets")  # also has F1
    cfg["layers"]["assets"].append({"path": other.name, "layer": "more_assets",
                                    "fields": dict(cfg["layers"]["assets"][0]["fields"])})
    with pytest.raises(InputError) as info:
        _read(scenario, cfg)
    msg = "\n".join(info.value.problems)
    assert "duplicate" in msg and "F1" in msg


def test_empty_power_line_layer(scenario):
    cfg = scenario.build(lines=scenario.line_frame().iloc[:0])
    with pytest.raises(InputError) as info:
        _read(scenario, cfg)
    msg = "\n".join(info.value.problems)
    assert "power_lines.gpkg:power_lines" in msg and "empty" in msg


@pytest.mark.parametrize("driver", ["GPKG", "GeoJSON"])
def test_empty_asset_layer(scenario, driver):
    cfg = scenario.build(driver, assets=scenario.asset_frame().iloc[:0])
    with pytest.raises(InputError) as info:
        _read(scenario, cfg)
    assert _asset_layer_label(cfg, driver) in "\n".join(info.value.problems)


@pytest.mark.parametrize("driver", ["GPKG", "GeoJSON"])
def test_empty_asset_layer_says_empty(scenario, driver):
    cfg = scenario.build(driver, assets=scenario.asset_frame().iloc[:0])
    with pytest.raises(InputError) as info:
        _read(scenario, cfg)
    assert "empty" in "\n".join(info.value.problems)


@pytest.mark.parametrize("use_defaults", [True, False])
def test_out_of_range_attribute_rejects_even_with_defaults(scenario, use_defaults, caplog):
    """A present but invalid value is never replaced by a default (issue 12): the typo
    rejects the feature; only a missing (NULL) value may take the kind default."""
    assets = _three_assets()
    assets.loc[1, "POST_OHM"] = -5.0  # F2: a resistance cannot be negative (schema low 0.1 Ω)
    extra = assets.iloc[[0]].copy()
    extra["AID"] = "F3"
    extra["POST_OHM"] = np.nan  # F3: no value at all
    extra.geometry = [LineString([(X0_M + 500, Y0_M + 300), (X0_M + 3500, Y0_M + 300)])]
    assets = gpd.GeoDataFrame(pd.concat([assets, extra], ignore_index=True), crs=assets.crs)
    cfg = scenario.build(assets=assets)
    cfg["run"]["use_kind_defaults"] = use_defaults
    cfg["defaults"] = {"fence": {"post_resistance_ohm": 42.0}}  # a default told apart from 80
    with caplog.at_level(logging.WARNING, logger="corridor"):
        inputs = _read(scenario, cfg)
    kept = inputs.assets.set_index("asset_id")
    assert float(kept.loc["F1", "post_resistance_ohm"]) == 80.0  # good value untouched
    assert "F2" not in kept.index
    f2 = [r for r in inputs.rejected.rows if r["feature_id"] == "F2"]
    assert [(r["layer"], r["field"], r["role"]) for r in f2] == [
        ("assets.gpkg:assets", "POST_OHM", "assets")]
    assert "-5.0" in f2[0]["reason"] and "below" in f2[0]["reason"]
    if use_defaults:
        assert float(kept.loc["F3", "post_resistance_ohm"]) == 42.0
        assert inputs.defaults_used["post_resistance_ohm"] == ["F3"]
        msgs = [w for w in inputs.warnings if "F3" in w]
        assert len(msgs) == 1 and "POST_OHM" in msgs[0] and "42.0" in msgs[0]
        assert any("F3" in r.getMessage() and r.levelno == logging.WARNING
                   for r in caplog.records)
    else:
        assert "F3" not in kept.index
        (f3,) = [r for r in inputs.rejected.rows if r["feature_id"] == "F3"]
        assert (f3["field"], f3["reason"]) == ("POST_OHM", "missing")
        assert "post_resistance_ohm" not in inputs.defaults_used


# --- corrupt files ----------------------------------------------------------------------------

@pytest.mark.parametrize("damage", ["random_bytes", "truncated"])
def test_corrupt_geopackage(scenario, cli, damage, capsys):
    cfg = scenario.build()
    path = scenario.root / "assets.gpkg"
    if damage == "random_bytes":
        path.write_bytes(np.random.default_rng(7).bytes(8192))
    else:
        path.write_bytes(path.read_bytes()[: path.stat().st_size // 2])
    cfg_path = scenario.write_config(cfg)
    with pytest.raises(InputError) as info:
        read_inputs(load_config(cfg_path))
    msg = "\n".join(info.value.problems)
    assert "assets.gpkg:assets" in msg and "cannot be opened" in msg
    assert cli(["check", str(cfg_path)]) == 2  # a user error, not an internal one
    assert "Traceback" not in capsys.readouterr().err
    assert not (scenario.root / "corridor-crash.log").exists()


# --- field mapping against what the file holds ------------------------------------------------

def test_shapefile_truncated_required_field_is_input_error(scenario):
    """dBASE keeps 10 characters of a field name (ESRI Shapefile Technical Description, 1998)."""
    lines = scenario.line_frame().rename(columns={"TOWER": "TOWER_TYPE_NAME"})
    cfg = scenario.build("ESRI Shapefile", lines=lines)
    cfg["layers"]["power_lines"]["fields"]["arrangement"] = "TOWER_TYPE_NAME"
    with pytest.raises(InputError) as info:
        _read(scenario, cfg)
    msg = "\n".join(info.value.problems)
    assert "power_lines.shp" in msg and "TOWER_TYPE_NAME" in msg and "arrangement" in msg


def test_mapped_optional_field_absent_is_reported(scenario):
    assets = scenario.asset_frame().rename(columns={"POST_OHM": "POST_RESIST_OHM"})
    cfg = scenario.build("ESRI Shapefile", assets=assets)  # stored as POST_RESIS
    cfg["layers"]["assets"][0]["fields"]["post_resistance_ohm"] = "POST_RESIST_OHM"
    try:
        inputs = _read(scenario, cfg)
    except InputError as exc:
        reported = "\n".join(exc.problems)
    else:
        reported = "\n".join(inputs.warnings)
    assert "POST_RESIST_OHM" in reported


def test_multi_layer_file_without_layer_name(scenario):
    cfg = scenario.build()
    path = scenario.root / "assets.gpkg"
    pyogrio.write_dataframe(scenario.line_frame(), path, layer="zz_other")  # a second layer
    cfg["layers"]["assets"][0].pop("layer")
    with pytest.raises(InputError) as info:
        _read(scenario, cfg)
    msg = "\n".join(info.value.problems)
    assert "assets" in msg and "zz_other" in msg


def test_empty_geographic_power_lines_without_run_crs(scenario):
    lines = scenario.line_frame(crs="EPSG:4326").iloc[:0]
    assets = scenario.asset_frame().to_crs("EPSG:4326")
    cfg = scenario.build(lines=lines, assets=assets)
    with pytest.raises(InputError) as info:
        _read(scenario, cfg)
    assert "empty" in "\n".join(info.value.problems)
