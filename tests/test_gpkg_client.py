"""The demo's GeoPackage as GDAL's own command-line client reads it.

Checks against the outside world: GDAL's ``ogrinfo`` (Debian gdal-bin) lists
the layers, reports the spatial index, the CRS, the field domain GDAL builds
from our gpkg_data_column_constraints, and reads the layer_styles table; the
SLD documents follow the namespaces and structure of OGC SLD 1.1 / SE 1.1;
FlatGeobuf files open in ogrinfo; GeoParquet files carry the ``geo``
metadata the GeoParquet specification requires.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyarrow.parquet as pq
import pyogrio
import pytest
from pyproj import CRS

from corridor.cli import main
from corridor.io.formats import write_extra_formats
from corridor.io.styles import GLOSSARY, HAZARD_COLOURS, apply_styles
from corridor.limits.limit_sets import HAZARD_CLASSES

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "config" / "demo.toml"
OGRINFO = shutil.which("ogrinfo")
needs_ogrinfo = pytest.mark.skipif(
    OGRINFO is None, reason="GDAL's ogrinfo is not installed (Debian package gdal-bin);"
                            " .ci/run installs it")

# OGC 05-078r4 (SLD 1.1.0) and OGC 05-077r4 (SE 1.1.0) namespaces.
SLD_NS = "http://www.opengis.net/sld"
SE_NS = "http://www.opengis.net/se"
OGC_NS = "http://www.opengis.net/ogc"
NS = {"sld": SLD_NS, "se": SE_NS, "ogc": OGC_NS}


def ogrinfo(*args: str) -> str:
    """Run ogrinfo read-only; return stdout (GDAL's version warnings go to stderr)."""
    res = subprocess.run([OGRINFO, "-ro", *args], capture_output=True, text=True, timeout=60,
                         check=False)
    assert res.returncode == 0, res.stderr
    return res.stdout


@pytest.fixture(scope="module")
def demo_out(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("gpkg_client") / "out"
    assert main(["run", str(DEMO), "--out", str(out), "-q"]) == 0
    gpkg = out / "screening.gpkg"
    layers = [str(n) for n in pyogrio.list_layers(gpkg)[:, 0] if n != "layer_styles"]
    # The runner may already have styled the file; apply_styles is idempotent.
    apply_styles(gpkg, layers)
    return out


@pytest.fixture(scope="module")
def gpkg(demo_out) -> Path:
    return demo_out / "screening.gpkg"


@pytest.fixture(scope="module")
def spatial_layers(gpkg) -> list[str]:
    return [str(n) for n, g in pyogrio.list_layers(gpkg) if g is not None]


@needs_ogrinfo
def test_ogrinfo_lists_every_layer(gpkg, spatial_layers):
    # GDAL ogrinfo docs: without a layer name, ogrinfo lists "N: name (geometry type)".
    listed = re.findall(r"^\d+: (\S+)", ogrinfo("-q", str(gpkg)), flags=re.M)
    for name in ("exposures", "segments", "hazards", "assets", "layer_styles"):
        assert name in listed
    assert set(spatial_layers) <= set(listed)


@needs_ogrinfo
def test_every_spatial_layer_has_a_spatial_index(gpkg, spatial_layers):
    # GDAL GPKG driver docs, "SQL functions": HasSpatialIndex(table, geom column)
    # returns 1 when the gpkg_rtree_index extension is registered and present.
    for name in spatial_layers:
        out = ogrinfo("-q", str(gpkg), "-sql", f"SELECT HasSpatialIndex('{name}', 'geom')")
        assert re.search(r"HasSpatialIndex \(Integer\) = 1", out), (name, out)


@needs_ogrinfo
def test_crs_is_the_configured_epsg(gpkg, spatial_layers):
    # The demo config asks for EPSG:32615 (config/demo.toml, run.crs); ogrinfo -so
    # prints the layer's WKT, which PROJ (independently) must parse to that code.
    for name in spatial_layers:
        out = ogrinfo("-so", str(gpkg), name)
        wkt = out.split("Layer SRS WKT:\n", 1)[1].split("\nData axis", 1)[0]
        assert CRS.from_wkt(wkt).to_epsg() == 32615, name


@needs_ogrinfo
def test_layer_styles_read_by_gdal(gpkg, spatial_layers):
    out = ogrinfo("-q", str(gpkg), "-sql",
                  "SELECT f_table_name, COUNT(*) AS n, SUM(useAsDefault) AS d FROM layer_styles"
                  " GROUP BY f_table_name")
    rows = re.findall(r"f_table_name \(String\) = (\S+)\s+n \(Integer\) = (\d+)\s+"
                      r"d \(Integer\) = (\d+)", out)
    styled = {name: (int(n), int(d)) for name, n, d in rows}
    for name in ("exposures", "segments", "hazards", "assets", "sites"):
        if name in spatial_layers:
            assert name in styled, name
            # Desktop GIS load the style flagged useAsDefault; exactly one per layer.
            assert styled[name][1] == 1, name
    # The same table through the GDAL library, as a client reads it.
    styles = pyogrio.read_dataframe(gpkg, layer="layer_styles")
    for col in ("f_table_catalog", "f_table_schema", "f_table_name", "f_geometry_column",
                "styleName", "styleQML", "styleSLD", "useAsDefault", "description", "owner",
                "ui", "update_time"):
        assert col in styles.columns, col
    assert (styles["f_geometry_column"] == "geom").all()


def _sld_rules(sld: str):
    root = ET.fromstring(sld.encode("utf-8"))
    # OGC 05-078r4 §11: root StyledLayerDescriptor in the SLD namespace, version 1.1.0.
    assert root.tag == f"{{{SLD_NS}}}StyledLayerDescriptor"
    assert root.get("version") == "1.1.0"
    assert root.find("sld:NamedLayer/se:Name", NS) is not None
    return root.findall(".//se:Rule", NS)


def _matches(rule, row) -> bool:
    """Evaluate the OGC filter of an SE rule on one feature (the operators we write)."""
    filt = rule.find("ogc:Filter", NS)
    if filt is None:
        return True
    ok = True
    for op in filt.iter():
        if op.tag == f"{{{OGC_NS}}}PropertyIsEqualTo":
            value = row[op.find("ogc:PropertyName", NS).text]
            # OGC literals are text; a boolean field compares as true/false
            text = str(value).lower() if isinstance(value, bool | np.bool_) else str(value)
            ok &= text == op.find("ogc:Literal", NS).text
        elif op.tag == f"{{{OGC_NS}}}PropertyIsGreaterThanOrEqualTo":
            ok &= float(row[op.find("ogc:PropertyName", NS).text]) >= float(
                op.find("ogc:Literal", NS).text)
        elif op.tag == f"{{{OGC_NS}}}PropertyIsLessThan":
            ok &= float(row[op.find("ogc:PropertyName", NS).text]) < float(
                op.find("ogc:Literal", NS).text)
    return bool(ok)


@needs_ogrinfo
def test_sld_rules_name_real_fields_and_cover_every_feature(gpkg, spatial_layers):
    styles = pyogrio.read_dataframe(gpkg, layer="layer_styles")
    for rec in styles.itertuples():
        layer = rec.f_table_name
        fields = set(pyogrio.read_info(gpkg, layer=layer)["fields"])
        rules = _sld_rules(rec.styleSLD)
        assert rules, (layer, rec.styleName)
        for prop in ET.fromstring(rec.styleSLD.encode()).iter(f"{{{OGC_NS}}}PropertyName"):
            assert prop.text in fields, (layer, prop.text)
        # Every feature falls in exactly one rule: no gaps or overlaps in the classes.
        frame = pyogrio.read_dataframe(gpkg, layer=layer, read_geometry=False)
        # SE 1.1 §10: an ElseFilter rule takes the features no other rule of the style takes
        else_rules = [r for r in rules if r.find("se:ElseFilter", NS) is not None]
        ring = [r for r in rules if "unresolved" in r.find("se:Name", NS).text]
        classes = [r for r in rules if r not in else_rules and r not in ring]
        for row in frame.to_dict("records"):
            hits = [r.find("se:Name", NS).text for r in classes if _matches(r, row)]
            if not hits and else_rules:
                hits = [r.find("se:Name", NS).text for r in else_rules]
            assert len(hits) == 1, (layer, rec.styleName, row.get("utilization"), hits)
            # sites: an unresolved site is ringed besides its remedy's mark, and only it
            for r in ring:
                assert _matches(r, row) == bool(row["unresolved"]), (layer, row["site_id"])
            # The ramp's band names the class the limit set gives (HAZARD_CLASSES).
            if rec.styleName == "utilization":
                assert hits[0].split(",")[0] == row["hazard_class"]
        # QML is well-formed XML with a renderer (QGIS project file format).
        qml = ET.fromstring(rec.styleQML.encode("utf-8"))
        assert qml.tag == "qgis" and qml.find("renderer-v2") is not None


@needs_ogrinfo
def test_hazard_class_colours_in_sld(gpkg):
    styles = pyogrio.read_dataframe(gpkg, layer="layer_styles")
    sld = styles[(styles.f_table_name == "segments")
                 & (styles.styleName == "hazard class")].styleSLD.iloc[0]
    got = {}
    for rule in _sld_rules(sld):
        value = rule.find(".//ogc:Literal", NS).text
        stroke = rule.find(".//se:SvgParameter[@name='stroke']", NS).text
        got[value] = stroke
    assert got == {k: HAZARD_COLOURS[k] for k in HAZARD_CLASSES}


@needs_ogrinfo
def test_field_descriptions_and_domain(gpkg):
    # OGC 12-128r18 Annex F.9: gpkg_data_columns, registered as gpkg_schema.
    out = ogrinfo("-q", str(gpkg), "-sql",
                  "SELECT table_name, extension_name FROM gpkg_extensions"
                  " WHERE extension_name = 'gpkg_schema'")
    assert "gpkg_data_columns" in out and "gpkg_data_column_constraints" in out
    out = ogrinfo("-q", str(gpkg), "-sql",
                  "SELECT title, description FROM gpkg_data_columns"
                  " WHERE table_name = 'segments' AND column_name = 'separation_m'")
    title, desc = GLOSSARY["separation_m"]
    assert f"title (String) = {title}" in out and "[m]" in desc and desc in out
    # GDAL turns an enum constraint into a coded field domain (GDAL >= 3.3).
    so = ogrinfo("-so", str(gpkg), "segments")
    assert re.search(r"hazard_class: String .*domain name=hazard_class", so)
    dom = ogrinfo("-so", str(gpkg), "-fielddomain", "hazard_class")
    for k in HAZARD_CLASSES:
        assert re.search(rf"^\s*{k}:", dom, flags=re.M), dom


@needs_ogrinfo
def test_styles_are_idempotent(tmp_path, gpkg):
    copy = tmp_path / "again.gpkg"
    shutil.copy(gpkg, copy)
    before = pyogrio.read_dataframe(copy, layer="layer_styles")
    apply_styles(copy, ["segments", "assets"])
    after = pyogrio.read_dataframe(copy, layer="layer_styles")
    assert len(after) == len(before)
    out = ogrinfo("-q", str(copy), "-sql", "SELECT COUNT(*) AS n FROM gpkg_data_columns"
                  " WHERE table_name = 'segments' AND column_name = 'utilization'")
    assert "n (Integer) = 1" in out


@needs_ogrinfo
def test_flatgeobuf_and_geoparquet(tmp_path, gpkg, spatial_layers):
    tables = {n: gpd.read_file(gpkg, layer=n) for n in spatial_layers}
    written = write_extra_formats(tables, tmp_path, ["gpkg", "fgb", "parquet"])
    assert sorted(p.stem for p in written["fgb"]) == sorted(spatial_layers)
    for path in written["fgb"]:
        out = ogrinfo("-so", str(path), path.stem)
        # ogrinfo -so prints "Feature Count: N" (GDAL ogrinfo docs).
        n = int(re.search(r"Feature Count: (\d+)", out).group(1))
        assert n == len(tables[path.stem])
        assert 'ID["EPSG",32615]' in out
    for path in written["parquet"]:
        # GeoParquet 1.x spec: file metadata key "geo" with version, primary_column
        # and per-column encoding "WKB" and the CRS as PROJJSON.
        geo = json.loads(pq.read_schema(path).metadata[b"geo"])
        assert re.match(r"1\.\d+\.\d+", geo["version"])
        col = geo["columns"][geo["primary_column"]]
        assert col["encoding"] == "WKB"
        assert CRS.from_json_dict(col["crs"]).to_epsg() == 32615
        back = gpd.read_parquet(path)
        assert len(back) == len(tables[path.stem])
        # WKB stores IEEE doubles, so the round trip is exact.
        np.testing.assert_array_equal(back.total_bounds, tables[path.stem].total_bounds)


def test_unknown_format_is_a_config_error(tmp_path):
    from corridor.errors import ConfigError

    with pytest.raises(ConfigError, match="shapefile"):
        write_extra_formats({}, tmp_path, ["fgb", "shapefile"])


def test_qml_styles_carry_aliases_and_labels(gpkg):
    # QGIS project-file format: <aliases><alias field= name=/> and the root's
    # labelsEnabled with a simple <labeling> naming the field; QGIS 3.22 takes field
    # aliases from the style only (tests/test_qgis_outputs.py loads them in QGIS)
    from corridor.io.glossary import alias_for
    from corridor.io.styles import LABEL_FIELDS

    styles = pyogrio.read_dataframe(gpkg, layer="layer_styles")
    for rec in styles.itertuples():
        root = ET.fromstring(rec.styleQML.encode("utf-8"))
        fields = ["fid", *pyogrio.read_info(gpkg, layer=rec.f_table_name)["fields"]]
        aliases = {a.get("field"): a.get("name") for a in root.iter("alias")}
        assert aliases == {f: alias_for(f) for f in fields}, rec.f_table_name
        label = LABEL_FIELDS.get(rec.f_table_name)
        assert root.get("labelsEnabled") == ("1" if label else "0")
        if label:
            style = root.find("labeling/settings/text-style")
            assert style is not None and style.get("fieldName") == label


def test_hazards_layer_is_the_segments_at_or_above_review(gpkg):
    # README, "hazards": the segments at or above the limit set's review threshold
    # (hazard_class `review` and `exceeds`), with the deciding columns; in the
    # GeoPackage a view on `segments`, so a feature keeps its id. Both layers as GDAL
    # reads them back.
    seg = pyogrio.read_dataframe(gpkg, layer="segments", fid_as_index=True)
    haz = pyogrio.read_dataframe(gpkg, layer="hazards", fid_as_index=True)
    want = seg[seg["hazard_class"].isin(["review", "exceeds"])]
    assert len(want) > 0  # the demo has hazards (README walkthrough)
    assert list(haz.index) == list(want.index)
    for col in haz.columns:
        if col == "geometry":
            assert haz.geometry.geom_equals_exact(want.geometry, 0).all()
        else:
            assert haz[col].equals(want[col]), col
    # worst first by rank, once sorted on it
    assert list(haz.sort_values("rank")["rank"]) == sorted(want["rank"])


@needs_ogrinfo
def test_hazards_view_reads_and_filters_in_debian_gdal(gpkg):
    # GeoPackage standard (OGC 12-128, Contents): a gpkg_contents row may name a view.
    # Debian's GDAL 3.6 lists it, counts it and applies a spatial filter through the
    # segments layer's R-tree; the filtered features are exactly those whose extent
    # meets the rectangle (GDAL's spatial filter semantics: envelope test).
    import sqlite3

    con = sqlite3.connect(gpkg)
    try:
        kind = con.execute("SELECT type FROM sqlite_master WHERE name = 'hazards'").fetchone()
    finally:
        con.close()
    assert kind == ("view",)
    haz = pyogrio.read_dataframe(gpkg, layer="hazards", fid_as_index=True)
    out = ogrinfo("-so", str(gpkg), "hazards")
    assert f"Feature Count: {len(haz)}" in out
    xmin, ymin, xmax, ymax = haz.total_bounds
    box = (xmin, ymin, (xmin + xmax) / 2, (ymin + ymax) / 2)
    b = haz.geometry.bounds
    inside = haz.index[(b.minx <= box[2]) & (b.maxx >= box[0]) & (b.miny <= box[3])
                       & (b.maxy >= box[1])]
    assert 0 < len(inside) < len(haz)
    listed = ogrinfo("-q", "-spat", *(repr(float(v)) for v in box), "-geom=NO", str(gpkg),
                     "hazards")
    fids = sorted(int(f) for f in re.findall(r"^OGRFeature\(hazards\):(\d+)", listed, re.M))
    assert fids == sorted(int(i) for i in inside)
    info = pyogrio.read_info(gpkg, layer="hazards")
    assert info["capabilities"]["fast_spatial_filter"]
