"""The ``hazards`` layer of ``screening.gpkg``: a view on ``segments`` only when exact.

The writer stores the hazards layer as a view on the segments layer when the
in-memory hazards table is exactly the segments at or above the review threshold
(README, "hazards"), and as a table otherwise. Either way GDAL must read back the
hazards table the run built: the same rows, values and geometries. Invented data.
"""

from __future__ import annotations

import sqlite3

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely

from corridor.io.write import write_gpkg
from corridor.result import Result
from corridor.steps import rank_segments
from corridor.steps.report_tables import hazards_layer

THRESHOLD = 0.5


def _segments(n: int = 400) -> gpd.GeoDataFrame:
    rng = np.random.default_rng(3)
    x = np.arange(n) * 50.0
    util = rng.random(n) * 1.5
    util[::37] = np.nan  # not assessed: never a hazard, never hidden as clear either
    t = gpd.GeoDataFrame({
        "segment_id": np.arange(n, dtype=np.int64),
        "asset_id": [f"FENCE-{i // 100}" for i in range(n)],
        "chainage_m": (np.arange(n) % 100) * 50.0,
        "utilization": util,
        "v_fault_v": rng.random(n) * 900.0,
        "hazard_class": np.where(util >= 1, "exceeds", np.where(util >= THRESHOLD, "review",
                                                                "clear")),
    }, geometry=shapely.linestrings(np.stack([np.c_[x, x * 0], np.c_[x + 50, x * 0 + 1]],
                                             axis=1)), crs="EPSG:32633")
    rank_segments(t)
    return t


def _write(tmp_path, segments, hazards) -> tuple[str, pd.DataFrame]:
    empty = gpd.GeoDataFrame({"a": []}, geometry=gpd.GeoSeries([], crs=segments.crs))
    result = Result(segments=segments, exposures=empty, rejected=pd.DataFrame(),
                    power_lines=empty, hazards=hazards)
    path = tmp_path / "screening.gpkg"
    write_gpkg(result, path, THRESHOLD)
    con = sqlite3.connect(path)
    try:
        kind = con.execute("SELECT type FROM sqlite_master WHERE name = 'hazards'").fetchone()[0]
    finally:
        con.close()
    return kind, pyogrio.read_dataframe(path, layer="hazards")


def _same_rows(read: pd.DataFrame, built: gpd.GeoDataFrame) -> None:
    read = read.sort_values("rank").reset_index(drop=True)
    built = built.sort_values("rank").reset_index(drop=True)
    assert list(read.columns) == list(built.columns)
    for col in built.columns:
        if col == built.geometry.name:
            assert read.geometry.geom_equals_exact(built.geometry, 0).all()
        else:
            pd.testing.assert_series_equal(read[col], built[col], check_dtype=False,
                                           check_names=False)


def test_exact_hazards_table_is_written_as_a_view(tmp_path):
    seg = _segments()
    haz = hazards_layer(seg, THRESHOLD)
    assert 0 < len(haz) < len(seg)
    kind, read = _write(tmp_path, seg, haz)
    assert kind == "view"
    _same_rows(read, haz)
    # the rows a reader gets: utilization at or above the threshold, none missing
    assert (read["utilization"] >= THRESHOLD).all()
    assert len(read) == int((seg["utilization"] >= THRESHOLD).sum())


@pytest.mark.parametrize("change", ["value", "row", "geometry"])
def test_hazards_table_that_is_not_the_view_is_written_as_it_is(tmp_path, change):
    seg = _segments()
    haz = hazards_layer(seg, THRESHOLD)
    if change == "value":  # a plugin step adjusted one value of the hazards table only
        haz.loc[3, "v_fault_v"] += 1.0
    elif change == "row":
        haz = haz.iloc[1:].reset_index(drop=True)
    else:
        haz.loc[0, haz.geometry.name] = shapely.LineString([(0, 0), (1, 1)])
    kind, read = _write(tmp_path, seg, haz)
    assert kind == "table"
    _same_rows(read, haz)
