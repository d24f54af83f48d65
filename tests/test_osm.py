"""OpenStreetMap extracts as input (corridor.io.osm), end to end through the CLI.

Each test writes a small invented ``.osm`` XML extract (OSM API 0.6 format, as
exported by the OSM website) near lat 45 N, lon 9 E. Distances expected on it
are computed independently on the WGS 84 ellipsoid with pyproj's Geod
(Karney's geodesic algorithm), not with corridor's projection.

Facts of the trade used below:
- OSM gives ``voltage`` in volts, several values separated by ';' (OSM wiki,
  Key:voltage; common practice of mappers);
- a three-phase AC circuit has three phase conductors, so ``cables=6`` is two
  circuits (OSM wiki, Key:cables);
- 230 kV is a transmission voltage in the 170-300 kV class, 110 kV in the
  100-170 kV class (common practice, from memory of IEC 60038 series).
"""

from __future__ import annotations

import json
import struct
import zlib
from pathlib import Path
from xml.sax.saxutils import quoteattr

import pandas as pd
import pytest
from pyproj import Geod

from corridor.cli import main
from corridor.config import load_config
from corridor.errors import ConfigError
from corridor.io import osm
from corridor.io.layers import read_inputs
from corridor.io.outputs import read_csv

GEOD = Geod(ellps="WGS84")

LAT0 = 45.0
#: Offsets of the parallel railway (north) and fence (south) from the line [deg latitude].
RAIL_DLAT = 0.00072
FENCE_DLAT = -0.00027


class Extract:
    """A tiny OSM XML extract built node by node."""

    def __init__(self):
        self.nodes: dict[int, tuple[float, float]] = {}
        self.ways: list[tuple[int, list[int], dict]] = []
        self.relations: list[tuple[int, list[int], dict]] = []

    def node(self, lat: float, lon: float) -> int:
        nid = len(self.nodes) + 1
        self.nodes[nid] = (lat, lon)
        return nid

    def way(self, wid: int, nodes: list[int], **tags) -> None:
        self.ways.append((wid, nodes, tags))

    def relation(self, rid: int, ways: list[int], **tags) -> None:
        self.relations.append((rid, ways, tags))

    def write(self, path: Path) -> Path:
        def tag_xml(tags):
            return "".join(f"<tag k={quoteattr(k)} v={quoteattr(v)}/>" for k, v in tags.items())

        out = ["<?xml version='1.0' encoding='UTF-8'?>",
               '<osm version="0.6" generator="corridor tests">']
        for nid, (lat, lon) in self.nodes.items():
            out.append(f'<node id="{nid}" lat="{lat:.7f}" lon="{lon:.7f}" version="1"/>')
        for wid, nodes, tags in self.ways:
            out.append(f'<way id="{wid}" version="1">'
                       + "".join(f'<nd ref="{n}"/>' for n in nodes) + tag_xml(tags) + "</way>")
        for rid, ways, tags in self.relations:
            out.append(f'<relation id="{rid}" version="1">'
                       + "".join(f'<member type="way" ref="{w}" role=""/>' for w in ways)
                       + tag_xml(tags) + "</relation>")
        out.append("</osm>")
        path.write_text("\n".join(out), encoding="utf-8")
        return path


    def write_pbf(self, path: Path) -> Path:
        """The extract as OSM PBF: protobuf messages of the OSM-binary format (one
        OSMHeader blob, one OSMData blob with plain nodes and ways), zlib-compressed."""
        strings = [b""]

        def sid(text: str) -> int:
            b = text.encode()
            if b not in strings:
                strings.append(b)
            return strings.index(b)

        nodes = b"".join(_msg(1, _int(1, _zz(i)) + _int(8, _zz(round(lat * 1e7)))
                              + _int(9, _zz(round(lon * 1e7))))
                         for i, (lat, lon) in self.nodes.items())
        ways = b""
        for wid, refs, tags in self.ways:
            deltas = [_zz(b - a) for a, b in zip([0, *refs[:-1]], refs, strict=True)]
            ways += _msg(3, _int(1, wid) + _packed(2, [sid(k) for k in tags])
                         + _packed(3, [sid(v) for v in tags.values()]) + _packed(8, deltas))
        table = _msg(1, b"".join(_msg(1, x) for x in strings))
        block = table + _msg(2, nodes) + _msg(2, ways)
        with open(path, "wb") as fh:
            for kind, data in (("OSMHeader", _msg(4, b"OsmSchema-V0.6")), ("OSMData", block)):
                blob = _int(2, len(data)) + _msg(3, zlib.compress(data))
                head = _msg(1, kind.encode()) + _int(3, len(blob))
                fh.write(struct.pack(">i", len(head)) + head + blob)
        return path


def _varint(n: int) -> bytes:
    out = bytearray()
    while True:
        b, n = n & 0x7F, n >> 7
        out.append(b | 0x80 if n else b)
        if not n:
            return bytes(out)


def _zz(n: int) -> int:
    """Protobuf's zigzag code of a signed integer (sint64)."""
    return (n << 1) ^ (n >> 63)


def _int(num: int, n: int) -> bytes:
    return _varint(num << 3) + _varint(n)


def _msg(num: int, payload: bytes) -> bytes:
    return _varint((num << 3) | 2) + _varint(len(payload)) + payload


def _packed(num: int, values: list[int]) -> bytes:
    return _msg(num, b"".join(_varint(v) for v in values))


def corridor_extract() -> Extract:
    """A 230 kV line split into two ways, a parallel railway, a fence, a crossing
    pipeline, a line with a bad voltage tag and a two-voltage line far away."""
    e = Extract()
    a, b, c = e.node(LAT0, 9.000), e.node(LAT0, 9.020), e.node(LAT0, 9.040)
    e.way(100, [a, b], power="line", voltage="230000", name="Test line")
    e.way(101, [b, c], power="line", voltage="230000", cables="3")
    e.way(200, [e.node(LAT0 + RAIL_DLAT, 8.995), e.node(LAT0 + RAIL_DLAT, 9.045)],
          railway="rail")
    e.way(210, [e.node(LAT0 + FENCE_DLAT, 9.010), e.node(LAT0 + FENCE_DLAT, 9.030)],
          barrier="fence", material="wire")
    e.way(220, [e.node(44.990, 9.020), e.node(45.010, 9.0205)], man_made="pipeline",
          substance="gas", location="underground", diameter="500")
    e.way(300, [e.node(45.05, 9.0), e.node(45.05, 9.03)], power="line", voltage="medium")
    e.way(301, [e.node(45.03, 9.0), e.node(45.03, 9.03)], power="line",
          voltage="110000;20000", cables="6")
    e.way(302, [e.node(45.06, 9.0), e.node(45.06, 9.03)], power="line", voltage="110;20")
    return e


def _config(tmp_path: Path, extract: Path, body: str = "", run: str = "") -> Path:
    arr = tmp_path / "own_arrangements.toml"
    arr.write_text("", encoding="utf-8")  # no arrangements of our own: the typical set only
    cfg = tmp_path / "run.toml"
    cfg.write_text(f'[run]\noutput_dir = "out"\nfrequency_hz = 50.0\nlimit_set = "iec_en"\n'
                   f'arrangements = "{arr.name}"\n{run}\n'
                   f'[layers.power_lines]\npath = "{extract.name}"\n'
                   f'[[layers.assets]]\npath = "{extract.name}"\n{body}', encoding="utf-8")
    return cfg


@pytest.fixture(scope="module")
def screened(tmp_path_factory):
    """The two README commands: write a config for the extract, then run it."""
    tmp = tmp_path_factory.mktemp("osm_run")
    extract = corridor_extract().write(tmp / "region.osm")
    assert osm.main([str(extract), str(tmp / "region.toml")]) == 0
    code = main(["run", str(tmp / "region.toml")])
    return tmp, code


def test_two_commands_screen_the_extract(screened):
    tmp, code = screened
    # way/300 (voltage=medium) is rejected: published but incomplete, exit 5 (README)
    assert code == 5
    out = tmp / "region_out"
    ex = read_csv(out / "exposures.csv").set_index("asset_kind")
    assert set(ex.index) == {"rail", "fence", "pipeline"}
    assert set(ex["line_id"]) == {"way/100"}  # one line, not one per way
    assert (ex["line_voltage_kv"] == 230.0).all()
    # the railway runs beside the whole line: its parallel length is the line's length,
    # 0.04 deg of longitude at 45 N on the ellipsoid (pyproj Geod)
    line_len = GEOD.inv(9.0, LAT0, 9.04, LAT0)[2]
    assert ex.loc["rail", "parallel_length_m"] == pytest.approx(line_len, rel=0.01)
    sep_rail = GEOD.inv(9.02, LAT0, 9.02, LAT0 + RAIL_DLAT)[2]
    assert ex.loc["rail", "min_separation_m"] == pytest.approx(sep_rail, rel=0.02)
    fence_len = GEOD.inv(9.01, LAT0 + FENCE_DLAT, 9.03, LAT0 + FENCE_DLAT)[2]
    assert ex.loc["fence", "parallel_length_m"] == pytest.approx(fence_len, rel=0.01)
    sep_fence = GEOD.inv(9.02, LAT0, 9.02, LAT0 + FENCE_DLAT)[2]
    assert ex.loc["fence", "min_separation_m"] == pytest.approx(sep_fence, rel=0.02)
    # the pipeline crosses the line once, nearly at right angles
    assert ex.loc["pipeline", "crossings"] == 1
    assert ex.loc["pipeline", "parallel_length_m"] < 0.05 * line_len


def test_bad_voltage_tags_reported(screened):
    tmp, _ = screened
    out = tmp / "region_out"
    rej = read_csv(out / "rejected.csv", dtype=str)
    row = rej[rej["feature_id"] == "way/300"].iloc[0]
    assert (row["layer"], row["field"], row["role"]) == ("region.osm", "voltage", "power_lines")
    assert "'medium'" in row["reason"] and "volts" in row["reason"]
    run = json.loads((out / "run.json").read_text(encoding="utf-8"))
    msgs = [w for w in run["warnings"] if "way/301" in w]
    assert len(msgs) == 1
    assert "'voltage'" in msgs[0] and "110 kV" in msgs[0] and "20 kV" in msgs[0]
    # the two-voltage line is kept (at its highest voltage), the bad one is not
    assert "way/301" not in set(rej["feature_id"])
    # voltage=110;20 (kilovolts written where OSM wants volts): rejected, the fix named
    row = rej[rej["feature_id"] == "way/302"].iloc[0]
    assert (row["layer"], row["field"]) == ("region.osm", "voltage")
    assert "'110;20'" in row["reason"] and "110000" in row["reason"]


def test_default_arrangement_and_circuits(tmp_path):
    extract = corridor_extract().write(tmp_path / "region.osm")
    cfg = load_config(_config(tmp_path, extract))
    inputs = read_inputs(cfg)
    lines = inputs.lines.set_index("line_id")
    assert set(lines.index) == {"way/100", "way/301"}
    # 230 kV, no circuits tag, cables=3 on one way -> 1 circuit -> 170-300 kV single circuit
    assert lines.loc["way/100", "arrangement"] == "osm_230kv_1c"
    # 110000;20000 with cables=6 -> 2 circuits at the highest voltage, 110 kV
    assert lines.loc["way/301", "voltage_kv"] == 110.0
    assert lines.loc["way/301", "arrangement"] == "osm_110kv_2c"
    assert cfg.arrangements["osm_110kv_2c"].n_circuits == 2
    assert cfg.arrangements["osm_230kv_1c"].n_circuits == 1
    used = inputs.defaults_used
    assert set(used["arrangement"]) == {"way/100", "way/301"}
    assert set(used["circuits"]) == {"way/100", "way/301"}
    assert set(used["frequency_hz"]) == {"way/100", "way/301"}
    assert set(used["load_current_a"]) == {"way/100", "way/301"}  # from [line_defaults]
    assets = inputs.assets.set_index("asset_id")
    # pipeline diameter=500 (OSM: millimetres) and location=underground (preset: -1.5 m)
    assert assets.loc["way/220", "diameter_m"] == pytest.approx(0.5)
    assert assets.loc["way/220", "height_m"] == pytest.approx(-1.5)
    assert assets.loc["way/210", "post_type"] == "metal"  # material=wire
    assert "way/220" not in used["height_m"] and "way/200" in used["height_m"]


def test_ways_joined_into_one_line(tmp_path):
    extract = corridor_extract().write(tmp_path / "region.osm")
    cfg = load_config(_config(tmp_path, extract))
    lines = read_inputs(cfg).lines.set_index("line_id")
    geom = lines.loc["way/100", "geometry"]
    assert geom.geom_type == "LineString"
    # the joined line is as long as both ways together, end to end on the ellipsoid
    assert geom.length == pytest.approx(GEOD.inv(9.0, LAT0, 9.04, LAT0)[2], rel=0.002)
    assert "way/101" not in lines.index


def test_junction_and_route_relation(tmp_path):
    """Three 230 kV ways meet at a tee: not joined through the tee (which way continues
    is unknown) unless a route=power relation says so."""
    e = Extract()
    a, b, c = e.node(LAT0, 9.00), e.node(LAT0, 9.02), e.node(LAT0, 9.04)
    d = e.node(LAT0 - 0.02, 9.02)
    e.way(10, [a, b], power="line", voltage="230000")
    e.way(11, [b, c], power="line", voltage="230000")
    e.way(12, [b, d], power="line", voltage="230000")
    e.way(13, [d, e.node(LAT0 - 0.04, 9.02)], power="line", voltage="132000")
    e.way(20, [e.node(LAT0 + 0.001, 9.0), e.node(LAT0 + 0.001, 9.04)], railway="rail")
    extract = e.write(tmp_path / "tee.osm")
    lines = read_inputs(load_config(_config(tmp_path, extract))).lines
    assert sorted(lines["line_id"]) == ["way/10", "way/11", "way/12", "way/13"]
    # a different voltage never joins, even end to end (way/12 - way/13)
    e.relation(77, [10, 11], type="route", route="power", voltage="230000")
    extract = e.write(tmp_path / "tee.osm")
    lines = read_inputs(load_config(_config(tmp_path, extract))).lines.set_index("line_id")
    assert sorted(lines.index) == ["relation/77", "way/12", "way/13"]
    assert lines.loc["relation/77", "geometry"].geom_type == "LineString"


def test_parse_voltage():
    # OSM wiki Key:voltage: volts, ';' between the voltages of one way
    assert osm.parse_voltage_kv("230000") == ([230.0], None)
    assert osm.parse_voltage_kv("110000;20000") == ([110.0, 20.0], None)
    assert osm.parse_voltage_kv("20000;110000;110000") == ([110.0, 20.0], None)
    assert osm.parse_voltage_kv("380 kV") == ([380.0], None)
    for bad in ("medium", "230", "high;110000", "1500000"):
        kvs, err = osm.parse_voltage_kv(bad)
        assert kvs == [] and repr(bad) in err


def test_other_tags_hstore():
    # GDAL writes other_tags as "k"=>"v" pairs with \" and \\ escaped (GDAL OSM driver doc)
    text = r'"power"=>"line","note"=>"a \"q\" \\ b,c=>d","voltage"=>"230000"'
    assert osm.parse_other_tags(text) == {"power": "line", "note": 'a "q" \\ b,c=>d',
                                          "voltage": "230000"}
    assert osm.parse_other_tags(None) == {}


def test_preset_overridden_in_the_layer_table(tmp_path):
    e = corridor_extract()
    e.way(102, [e.node(44.98, 9.0), e.node(44.98, 9.03)], power="cable", voltage="20000")
    e.way(211, [e.node(44.9995, 9.012), e.node(44.9995, 9.028)], barrier="fence",
          material="plastic")
    extract = e.write(tmp_path / "region.osm")
    body = ('[layers.assets.osm.fence.values.post_type]\ntag = "material"\n'
            'map = { plastic = "wood", wire = "metal" }\n'
            '[layers.power_lines.osm]\nselect = ["power=line", "power=cable"]\n'
            '[[layers.power_lines.osm.classes]]\nmin_kv = 1.0\nmax_kv = 1200.1\n'
            'arrangements = ["my_line"]\ncables = ["osm_cable_1c"]\n')
    cfg_path = _config(tmp_path, extract, body)
    own = tmp_path / "own_arrangements.toml"
    own.write_text(osm.ARRANGEMENTS_PATH.read_text(encoding="utf-8").replace(
        "[arrangements.osm_230kv_1c]", "[arrangements.my_line]").replace(
        "arrangements.osm_230kv_1c.", "arrangements.my_line."), encoding="utf-8")
    cfg = load_config(cfg_path)
    inputs = read_inputs(cfg)
    lines = inputs.lines.set_index("line_id")
    assert lines.loc["way/100", "arrangement"] == "my_line"
    assert lines.loc["way/102", "arrangement"] == "osm_cable_1c"
    # 110000;20000 with cables=6: two circuits, but the user's class has one arrangement
    rej = inputs.rejected.frame().set_index("feature_id")
    assert rej.loc["way/301", "field"] == "circuits"
    assert "2 circuits" in rej.loc["way/301", "reason"]
    assets = inputs.assets.set_index("asset_id")
    assert assets.loc["way/211", "post_type"] == "wood"


def test_unmapped_tag_value_takes_the_kind_default(tmp_path):
    e = corridor_extract()
    e.way(211, [e.node(44.9995, 9.012), e.node(44.9995, 9.028)], barrier="fence",
          material="plastic")
    e.way(221, [e.node(44.99, 9.03), e.node(45.01, 9.03)], man_made="pipeline",
          diameter='20"')
    extract = e.write(tmp_path / "region.osm")
    inputs = read_inputs(load_config(_config(tmp_path, extract)))
    assert "way/211" in inputs.defaults_used["post_type"]
    assert any("way/211" in w and "'material'" in w and "plastic" in w
               for w in inputs.warnings)
    rej = inputs.rejected.frame().set_index("feature_id")
    assert rej.loc["way/221", "field"] == "diameter"
    assert rej.loc["way/221", "role"] == "assets"


def test_other_frequency_rejected(tmp_path):
    e = corridor_extract()
    e.way(400, [e.node(45.002, 9.0), e.node(45.002, 9.03)], power="line",
          voltage="15000", frequency="16.7")
    extract = e.write(tmp_path / "region.osm")
    inputs = read_inputs(load_config(_config(tmp_path, extract)))
    rej = inputs.rejected.frame().set_index("feature_id")
    assert rej.loc["way/400", "field"] == "frequency"
    assert "16.7" in rej.loc["way/400", "reason"] and "50" in rej.loc["way/400", "reason"]
    assert "way/400" not in set(inputs.lines["line_id"])


def test_several_frequencies_warned(tmp_path):
    e = corridor_extract()
    e.way(401, [e.node(45.002, 9.0), e.node(45.002, 9.03)], power="line",
          voltage="110000;15000", frequency="50;16.7", cables="6")
    extract = e.write(tmp_path / "region.osm")
    inputs = read_inputs(load_config(_config(tmp_path, extract)))
    assert "way/401" in set(inputs.lines["line_id"])
    assert any("way/401" in w and "'frequency'" in w and "16.7" in w for w in inputs.warnings)


def test_bad_osm_table_is_a_config_error(tmp_path, capsys):
    extract = corridor_extract().write(tmp_path / "region.osm")
    cfg = _config(tmp_path, extract, '[layers.power_lines.osm]\nvoltages = "v"\n')
    with pytest.raises(ConfigError) as exc:
        load_config(cfg)
    assert any("layers.power_lines.osm.voltages: unknown key" in p for p in exc.value.problems)
    assert main(["run", str(cfg)]) == 2


def test_no_matching_way_is_an_input_error(tmp_path):
    e = Extract()
    e.way(1, [e.node(LAT0, 9.0), e.node(LAT0, 9.01)], highway="residential")
    e.way(2, [e.node(LAT0, 9.0), e.node(LAT0 + 0.001, 9.01)], railway="rail")
    extract = e.write(tmp_path / "empty.osm")
    from corridor.errors import InputError

    with pytest.raises(InputError) as exc:
        read_inputs(load_config(_config(tmp_path, extract)))
    assert any("power=line" in p and "empty.osm" in p for p in exc.value.problems)


def test_broken_xml_is_an_input_error(tmp_path):
    # GDAL's OSM driver stops quietly at an XML error; corridor must not lose the ways
    extract = corridor_extract().write(tmp_path / "region.osm")
    text = extract.read_text(encoding="utf-8")
    extract.write_text(text[: len(text) // 2], encoding="utf-8")  # a truncated download
    from corridor.errors import InputError

    with pytest.raises(InputError) as exc:
        read_inputs(load_config(_config(tmp_path, extract)))
    assert any("region.osm" in p and "not well-formed" in p for p in exc.value.problems)


def test_pbf_extract_reads_like_the_xml(tmp_path):
    # the same extract as OSM PBF (the format of the usual regional downloads)
    e = corridor_extract()
    xml_dir, pbf_dir = tmp_path / "xml", tmp_path / "pbf"
    xml_dir.mkdir()
    pbf_dir.mkdir()
    got = []
    for folder, extract in ((xml_dir, e.write(xml_dir / "region.osm")),
                            (pbf_dir, e.write_pbf(pbf_dir / "region.osm.pbf"))):
        inputs = read_inputs(load_config(_config(folder, extract)))
        got.append(inputs)
    xml, pbf = got
    for a, b in ((xml.lines, pbf.lines), (xml.assets, pbf.assets)):
        a = a.drop(columns="source_layer").sort_values(a.columns[0]).reset_index(drop=True)
        b = b.drop(columns="source_layer").sort_values(b.columns[0]).reset_index(drop=True)
        pd.testing.assert_frame_equal(a.drop(columns="geometry"), b.drop(columns="geometry"))
        assert a.geometry.geom_equals_exact(b.geometry, tolerance=0.01).all()
    assert pbf.rejected.frame()["feature_id"].tolist() == ["way/300", "way/302"]
    assert set(pbf.rejected.frame()["layer"]) == {"region.osm.pbf"}


def test_asset_layer_with_a_kind_takes_only_that_kind(tmp_path):
    extract = corridor_extract().write(tmp_path / "region.osm")
    cfg = _config(tmp_path, extract)
    text = cfg.read_text(encoding="utf-8").replace(
        f'[[layers.assets]]\npath = "{extract.name}"\n',
        f'[[layers.assets]]\npath = "{extract.name}"\nkind = "rail"\n')
    cfg.write_text(text, encoding="utf-8")
    inputs = read_inputs(load_config(cfg))
    assert inputs.assets["asset_kind"].tolist() == ["rail"]
    assert inputs.assets["asset_id"].tolist() == ["way/200"]
    assert main(["check", str(cfg)]) == 0  # usable; way/300 is listed as would-be rejected
