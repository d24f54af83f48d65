"""Bad input data: a clear message naming layer, feature and field, never a traceback.

Every input feature must come out either in the outputs (the ``assets``
layer) or in ``rejected.csv`` with a reason: the counts are checked, not our
own numbers. Value ranges are the schema's (corridor.schema), whose bounds
are facts of the trade (a line has a positive voltage; fault currents above
300 kA do not occur on public networks, common practice).
"""

from __future__ import annotations

import json
import subprocess
import sys
import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from shapely.geometry import LineString

from tests.conftest import X0_M, Y0_M, Scenario

EXIT_OK, EXIT_INPUT, EXIT_INTERNAL = 0, 2, 3


def _run(cli, capsys, path):
    capsys.readouterr()
    rc = cli(["run", str(path), "-q"])
    err = capsys.readouterr().err
    assert "Traceback" not in err
    return rc, err


def _accounted(root, n_assets: int) -> None:
    """Every asset feature is in the assets layer or in rejected.csv."""
    out = root / "out"
    kept = pyogrio.read_dataframe(out / "screening.gpkg", layer="assets", read_geometry=False)
    rej = pd.read_csv(out / "rejected.csv", comment="#", dtype=str)
    rej_assets = rej[rej["layer"].str.startswith("assets")]["feature_id"].nunique()
    assert len(kept) + rej_assets == n_assets


def _feature_cases():
    with warnings.catch_warnings():
        # shapely warns on NaN coordinates: those features are wanted here
        warnings.simplefilter("ignore", RuntimeWarning)
        return _feature_cases_()


def _feature_cases_():
    y = Y0_M + 100.0
    return {
        "good": (LineString([(X0_M + 500, y), (X0_M + 3500, y)]), 80.0, None),
        "self_crossing": (LineString([(X0_M, y), (X0_M + 900, y + 80), (X0_M + 900, y),
                                      (X0_M, y + 80)]), 80.0, None),
        "empty": (LineString(), 80.0, "empty geometry"),
        "zero_length": (LineString([(X0_M, y), (X0_M, y)]), 80.0, "zero-length line"),
        "nan_coord": (LineString([(X0_M, y), (np.nan, y)]), 80.0, "NaN or infinite"),
        "inf_coord": (LineString([(X0_M, y), (np.inf, y)]), 80.0, "NaN or infinite"),
        "dup_vertex": (LineString([(X0_M, y), (X0_M + 10, y), (X0_M + 10, y),
                                   (X0_M + 900, y)]), 80.0, None),
        "negative_post": (LineString([(X0_M + 100, y + 20), (X0_M + 2000, y + 20)]), -5.0,
                          "below the valid range"),
        "missing_post": (LineString([(X0_M + 100, y + 40), (X0_M + 2000, y + 40)]), np.nan,
                         "missing"),
    }


def _write_features(sc: Scenario, use_defaults: bool):
    cases = _feature_cases()
    geoms = [c[0] for c in cases.values()]
    assets = gpd.GeoDataFrame({"AID": list(cases), "KIND": ["fence"] * len(cases),
                               "POST_OHM": [c[1] for c in cases.values()]},
                              geometry=geoms, crs="EPSG:32633")
    lines = sc.line_frame()
    lines = pd.concat([lines, lines.assign(LINE_ID="L0KV", KV=0.0),
                       lines.assign(LINE_ID="LNEG", KV=-10.0)], ignore_index=True)
    cfg = sc.build(assets=assets, lines=gpd.GeoDataFrame(lines, crs=lines.crs))
    cfg["run"]["use_kind_defaults"] = use_defaults
    return sc.write_config(cfg), cases


@pytest.mark.parametrize("use_defaults", [True, False])
def test_bad_features_rejected_or_repaired_never_lost(scenario, cli, capsys, use_defaults):
    path, cases = _write_features(scenario, use_defaults)
    rc, err = _run(cli, capsys, path)
    assert rc == 5, err  # two power lines rejected: published but incomplete (README)
    rej = pd.read_csv(scenario.root / "out" / "rejected.csv", comment="#", dtype=str)
    for fid, (_g, _v, reason) in cases.items():
        rows = rej[rej["feature_id"] == fid]
        attribute_case = fid in ("negative_post", "missing_post")
        # a missing value may take the kind default; an invalid one never does
        if reason is None or (fid == "missing_post" and use_defaults):
            assert rows.empty, fid  # kept (repaired or defaulted with a warning)
        else:
            assert rows["reason"].str.contains(reason).any(), (fid, rows)
            if attribute_case:
                assert (rows["field"] == "POST_OHM").all()
    # 0 kV and negative kV lines are rejected naming the field
    for lid in ("L0KV", "LNEG"):
        assert (rej[rej["feature_id"] == lid]["field"] == "KV").all()
    _accounted(scenario.root, len(cases))
    record = json.loads((scenario.root / "out" / "run.json").read_text(encoding="utf-8"))
    assert any("crosses itself" in w for w in record["warnings"])


def _layer_case(sc: Scenario, case: str):
    cfg = sc.build()
    root = sc.root
    a = sc.asset_frame()
    if case == "duplicate_ids":
        sc.write_layer(gpd.GeoDataFrame(pd.concat([a, a], ignore_index=True), crs=a.crs),
                       "assets")
        return cfg, "duplicate ids"
    if case == "unknown_kind":
        a["KIND"] = "hedge"
        sc.write_layer(a, "assets")
        return cfg, "no usable asset features"
    if case == "empty_layer":
        sc.write_layer(a.iloc[:0], "assets")
        return cfg, "is empty"
    if case == "corrupt":
        (root / "assets.gpkg").write_bytes(b"not a geopackage " * 200)
        return cfg, "cannot be opened"
    if case == "truncated":
        data = (root / "assets.gpkg").read_bytes()
        (root / "assets.gpkg").write_bytes(data[: len(data) // 3])
        return cfg, "cannot be opened"
    if case == "shapefile_latin1":
        for p in root.glob("assets.*"):
            p.unlink()
        a["NOTE"] = "MXXller"
        sc.write_layer(a, "assets", "ESRI Shapefile")
        dbf = root / "assets.dbf"
        dbf.write_bytes(dbf.read_bytes().replace(b"MXX", b"M\xfc "))  # latin-1 u-umlaut
        (root / "assets.cpg").write_text("UTF-8", encoding="ascii")  # wrong .cpg
        cfg["layers"]["assets"][0] = {"path": "assets.shp",
                                      "fields": cfg["layers"]["assets"][0]["fields"]}
        return cfg, "not valid UTF-8"
    if case == "geojson_bad_utf8":
        text = a.to_json().replace('"F1"', '"F#1"').encode().replace(b"#", b"\xfc")
        (root / "assets.geojson").write_bytes(text)
        cfg["layers"]["assets"][0] = {"path": "assets.geojson",
                                      "fields": cfg["layers"]["assets"][0]["fields"]}
        return cfg, "not valid UTF-8"
    if case == "single_point_line":
        fc = json.loads(a.to_json())
        fc["features"][0]["geometry"] = {"type": "LineString",
                                         "coordinates": [[X0_M + 500, Y0_M + 100]]}
        fc["crs"] = {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}}
        (root / "assets.geojson").write_text(json.dumps(fc), encoding="utf-8")
        cfg["layers"]["assets"][0] = {"path": "assets.geojson",
                                      "fields": cfg["layers"]["assets"][0]["fields"]}
        return cfg, "single point"
    raise ValueError(case)


@pytest.mark.parametrize("case", ["duplicate_ids", "unknown_kind", "empty_layer", "corrupt",
                                  "truncated", "shapefile_latin1", "geojson_bad_utf8",
                                  "single_point_line"])
def test_whole_layer_problems_exit_2_with_clear_message(scenario, cli, capsys, case):
    cfg, words = _layer_case(scenario, case)
    path = scenario.write_config(cfg)
    rc, err = _run(cli, capsys, path)
    assert rc == EXIT_INPUT, err
    assert "layer assets" in err and words in err, err
    assert not (scenario.root / "out").exists()
    capsys.readouterr()
    assert cli(["check", str(path), "-q"]) == EXIT_INPUT
    assert words in capsys.readouterr().err


@pytest.mark.slow
def test_gpkg_locked_by_another_program(scenario, cli, capsys):
    """An editing session holding ``BEGIN EXCLUSIVE`` in another process (SQLite locks
    are per process, so the holder must be one)."""
    path = scenario.write_config(scenario.build())
    holder = subprocess.Popen(
        [sys.executable, "-c", "import sqlite3, sys, time; c = sqlite3.connect(sys.argv[1],"
         " isolation_level=None); c.execute('BEGIN EXCLUSIVE'); print('held', flush=True);"
         " time.sleep(60)", str(scenario.root / "assets.gpkg")],
        stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        rc, err = _run(cli, capsys, path)
    finally:
        holder.kill()
        holder.wait()
        holder.stdout.close()
    assert rc == EXIT_INPUT
    assert "locked by another program" in err


_coord = st.one_of(st.floats(-3000, 3000, allow_nan=False), st.just(float("nan")),
                   st.just(float("inf")))
_value = st.one_of(st.floats(-1e3, 1e7), st.just(float("nan")), st.just(float("inf")),
                   st.none())


@st.composite
def _asset_layer(draw):
    n = draw(st.integers(1, 5))
    geoms, posts, kinds = [], [], []
    for _ in range(n):
        shape = draw(st.sampled_from(["line", "line", "empty", "point", "dup", "polygon"]))
        pts = [(X0_M + 2000 + draw(_coord), Y0_M + draw(_coord))
               for _ in range(draw(st.integers(2, 4)))]
        if shape == "empty":
            geoms.append(LineString())
        elif shape == "point":
            from shapely.geometry import Point

            geoms.append(Point(pts[0]))
        elif shape == "dup":
            geoms.append(_quiet_linestring([pts[0], pts[0], *pts[1:]]))
        elif shape == "polygon":
            from shapely.geometry import box

            geoms.append(box(X0_M, Y0_M + 10, X0_M + 100, Y0_M + 60))
        else:
            geoms.append(_quiet_linestring(pts))
        posts.append(draw(_value))
        kinds.append(draw(st.sampled_from(["fence", "fence", "pipeline", "hedge"])))
    return geoms, posts, kinds


def _quiet_linestring(pts):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # NaN coordinates wanted
        return LineString(pts)


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(layer=_asset_layer(), defaults=st.booleans())
def test_random_layers_never_crash_never_lose_a_feature(tmp_path_factory, layer, defaults):
    from corridor.cli import main

    geoms, posts, kinds = layer
    root = tmp_path_factory.mktemp("h")
    sc = Scenario(root)
    assets = gpd.GeoDataFrame({"AID": [f"A{i}" for i in range(len(geoms))], "KIND": kinds,
                               "POST_OHM": np.array([np.nan if v is None else v
                                                     for v in posts], float)},
                              geometry=geoms, crs="EPSG:32633")
    cfg = sc.build(assets=assets)
    cfg["run"]["use_kind_defaults"] = defaults
    path = sc.write_config(cfg)
    rc = main(["run", str(path), "-q"])
    assert rc in (EXIT_OK, EXIT_INPUT)
    if rc == EXIT_OK:
        _accounted(root, len(geoms))
