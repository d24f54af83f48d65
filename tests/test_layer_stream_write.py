"""A layer written as a stream of Arrow chunks is the layer pyogrio writes from the whole
table at once: same fields and types, values, geometries, geometry type and spatial index.

Reference: pyogrio's own ``write_dataframe`` (GDAL's GPKG driver through Arrow), an
independent writer of the same format; the GeoPackage encoding standard (OGC 12-128r18,
the ``rtree_<table>_<column>`` spatial index tables).
"""

import sqlite3

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow as pa
import pyogrio
import pytest
import shapely

from corridor.io import outputs


def _frame(n, mixed_parts):
    rng = np.random.default_rng(5)
    geoms = [shapely.LineString([(i, 0.0), (i + 1.0, 1.0)]) for i in range(n)]
    if mixed_parts:  # single and multi parts together: written as multi parts
        for i in range(0, n, 3):
            geoms[i] = shapely.MultiLineString([[(i, 0.0), (i, 2.0)], [(i + 1.0, 0.0),
                                                                       (i + 1.0, 3.0)]])
    geoms[7] = None
    text = np.array(["pipe", None, "=SUM(A1)"], dtype=object)[np.arange(n) % 3]
    # a column as a cache read gives it back from Parquet: Arrow-backed, in two chunks
    half = n // 2
    cached = pd.Series(pd.arrays.ArrowExtensionArray(pa.chunked_array(
        [[f"A{i}" for i in range(half)], [f"A{i}" for i in range(half, n)]])))
    return gpd.GeoDataFrame({
        "asset_id": cached,
        "utilization": rng.normal(size=n), "governing": text,
        "exceeds": rng.integers(0, 2, n).astype(bool), "segment_index": np.arange(n),
        "empty_value": np.full(n, np.nan), "no_text": np.full(n, None, dtype=object),
    }, geometry=geoms, crs="EPSG:32633")


def _rtree_tables(path):
    with sqlite3.connect(path) as db:
        return sorted(r[0] for r in db.execute(
            "SELECT name FROM sqlite_master WHERE type = 'table' AND name LIKE 'rtree_%'"))


@pytest.mark.parametrize("mixed_parts", [False, True])
def test_chunked_layer_equals_a_whole_table_write(tmp_path, monkeypatch, mixed_parts):
    monkeypatch.setattr(outputs, "WRITE_CHUNK_ROWS", 128)  # 1,000 rows: 8 chunks
    frame = _frame(1000, mixed_parts)
    ours = tmp_path / "ours.gpkg"
    outputs.write_layer(frame, ours, "segments")
    reference = frame.copy()
    for c in ("governing", "no_text"):
        reference[c] = reference[c].astype("string")
    theirs = tmp_path / "theirs.gpkg"
    pyogrio.write_dataframe(reference, theirs, layer="segments", driver="GPKG",
                            use_arrow=True, layer_options={"SPATIAL_INDEX": "YES"})
    info_a, info_b = pyogrio.read_info(ours), pyogrio.read_info(theirs)
    assert info_a["geometry_type"] == info_b["geometry_type"]
    assert list(info_a["fields"]) == list(info_b["fields"])
    assert list(info_a["dtypes"]) == list(info_b["dtypes"])
    assert info_a["crs"] == info_b["crs"] and info_a["features"] == 1000
    a = pyogrio.read_dataframe(ours)
    b = pyogrio.read_dataframe(theirs)
    assert a.drop(columns="geometry").equals(b.drop(columns="geometry"))
    assert (a.geometry.isna() == b.geometry.isna()).all()
    both = a.geometry.notna()
    assert a.geometry[both].geom_equals_exact(b.geometry[both], tolerance=0).all()
    assert _rtree_tables(ours) == _rtree_tables(theirs) == [
        "rtree_segments_geom", "rtree_segments_geom_node", "rtree_segments_geom_parent",
        "rtree_segments_geom_rowid"]


def test_empty_layer_is_written_with_its_fields(tmp_path):
    frame = _frame(10, False).iloc[:0]
    path = tmp_path / "empty.gpkg"
    outputs.write_layer(frame, path, "sites")
    info = pyogrio.read_info(path)
    assert info["features"] == 0
    assert list(info["fields"]) == list(frame.columns.drop("geometry"))


def test_segment_wkb_equals_shapely_wkb_and_leaves_other_geometries_to_it():
    """Uniform 2D line strings get WKB built from one buffer, byte for byte shapely's
    (OGC Simple Features WKB as GEOS writes it); anything else (Z, M, empty, missing,
    mixed point counts, other types) is left to shapely (None)."""
    rng = np.random.default_rng(3)
    for k in (2, 3, 5):
        lines = shapely.linestrings(rng.normal(size=(50, k, 2)) * 1e5)
        built = outputs._linestring_wkb(lines)
        assert built.to_pylist() == list(shapely.to_wkb(lines))
    line = shapely.LineString([(0, 0), (1, 1)])
    for other in ([shapely.LineString([(0, 0, 1), (1, 1, 1)])],
                  [shapely.from_wkt("LINESTRING M (0 0 5, 1 1 6)")],
                  [shapely.LineString()], [None, line],
                  [line, shapely.LineString([(0, 0), (1, 1), (2, 2)])],
                  [shapely.Point(0, 0)], [shapely.MultiLineString([[(0, 0), (1, 1)]])]):
        assert outputs._linestring_wkb(np.array(other, dtype=object)) is None


def test_two_point_segments_stored_as_pyogrio_stores_them(tmp_path):
    """A layer of two-point segments (the buffer-built WKB path) holds the same
    GeoPackage geometry blobs, values and R-tree as pyogrio's own write of the table."""
    n = 700
    xy = np.random.default_rng(9).uniform(0, 5e4, size=(n, 2, 2))
    frame = gpd.GeoDataFrame({"v": np.arange(n, dtype=float)},
                             geometry=shapely.linestrings(xy), crs="EPSG:3035")
    ours, theirs = tmp_path / "ours.gpkg", tmp_path / "theirs.gpkg"
    outputs.write_layer(frame, ours, "segments")
    pyogrio.write_dataframe(frame, theirs, layer="segments", driver="GPKG", use_arrow=True,
                            layer_options={"SPATIAL_INDEX": "YES"})

    def rows(path, sql):
        with sqlite3.connect(path) as db:
            return db.execute(sql).fetchall()

    assert rows(ours, "SELECT fid, geom, v FROM segments ORDER BY fid") == rows(
        theirs, "SELECT fid, geom, v FROM segments ORDER BY fid")
    assert rows(ours, "SELECT * FROM rtree_segments_geom ORDER BY id") == rows(
        theirs, "SELECT * FROM rtree_segments_geom ORDER BY id")
