"""The published outputs of a demo run, opened in a real QGIS as a planner opens them.

QGIS from Debian (``python3-qgis``, 3.22 or later) runs headless
(``QT_QPA_PLATFORM=offscreen``) under its own Python through
tests/qgis_driver.py. The references are QGIS itself and the files:

- every layer of ``screening.gpkg`` loads with its default style from the
  GeoPackage's ``layer_styles`` table (the renderer and classes our QML
  declares, not QGIS's single default symbol), with an alias on every field
  (QGIS 3.22 does not read ``gpkg_data_columns``; the aliases travel in the
  QML), and with labels on the asset, site and power-line layers;
- the sites are drawn by remedy, with unresolved sites ringed;
- a rendered map is not blank, and shows the unresolved ring's colour;
- every CSV opens in QGIS's delimited-text provider as a valid layer whose
  first line is the header, with numeric columns typed as numbers, and the
  work list as points at the layer's coordinates.
"""

from __future__ import annotations

import json
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest

from corridor.cli import main as cli_main
from corridor.io.glossary import alias_for
from corridor.io.outputs import CAUTION_COLUMN, read_csv
from corridor.io.styles import LABEL_FIELDS, REMEDY_SYMBOLS, UNRESOLVED_COLOUR
from corridor.steps import ground
from tests.test_qgis import DRIVER, QGIS_PYTHON, _qgis_env, _qgis_missing

pytestmark = pytest.mark.qgis

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "config" / "demo.toml"

#: Renderer of each layer's default style (corridor.io.styles.layer_style_specs).
#: The utilization ramps are rules, so that a segment no criterion judged (empty
#: utilization) is drawn by an ELSE rule in the "not assessed" colour.
DEFAULT_RENDERER = {"exposures": "graduatedSymbol", "segments": "RuleRenderer",
                    "hazards": "RuleRenderer", "assets": "categorizedSymbol",
                    "power_lines": "graduatedSymbol", "sites": "RuleRenderer"}


@pytest.fixture(scope="module")
def qgis_view(tmp_path_factory):
    missing = _qgis_missing()
    if missing:
        pytest.skip(missing)
    tmp = tmp_path_factory.mktemp("qgis_outputs")
    out = tmp / "out"
    assert cli_main(["run", str(DEMO), "--out", str(out), "-q"]) == 0
    gpkg = out / "screening.gpkg"
    layers = [str(n) for n, g in pyogrio.list_layers(gpkg) if g is not None]
    uris = [[f"{gpkg}|layername={n}", n, "ogr"] for n in layers]
    csvs = sorted(p.name for p in out.glob("*.csv"))
    for name in csvs:
        uris.append([f"file://{out / name}?delimiter=,&detectTypes=yes&geomType=none",
                     f"csv:{name}", "delimitedtext"])
    uris.append([f"file://{out / 'grounding_sites.csv'}?delimiter=,&detectTypes=yes"
                 "&xField=x&yField=y&crs=EPSG:32615", "csv points", "delimitedtext"])
    png = tmp / "map.png"
    shown = [n for n in ("power_lines", "assets", "hazards", "sites") if n in layers]
    actions = [{"do": "inspect", "layers": uris},
               {"do": "render", "png": str(png), "size": [900, 650],
                "layers": [[f"{gpkg}|layername={n}", n] for n in shown]}]
    task = tmp / "task.json"
    task.write_text(json.dumps({"actions": actions}), encoding="utf-8")
    result = tmp / "result.json"
    proc = subprocess.run([QGIS_PYTHON, str(DRIVER), "-", str(task), str(result)],
                          capture_output=True, text=True, env=_qgis_env(), timeout=600)
    assert proc.returncode == 0, proc.stderr[-3000:]
    inspected, rendered = json.loads(result.read_text(encoding="utf-8"))
    return {"out": out, "layers": layers, "csvs": csvs, "info": inspected,
            "render": rendered, "png": png}


def test_every_layer_loads_with_its_default_style(qgis_view):
    assert set(DEFAULT_RENDERER) <= set(qgis_view["layers"])
    for name in qgis_view["layers"]:
        info = qgis_view["info"][name]
        assert info["valid"], (name, info.get("error"))
        assert info["crs"] == "EPSG:32615", name  # config/demo.toml run.crs
        # QGIS lists corridor's styles in the GeoPackage and applied the default one
        assert info["styles"]["count"] >= 1, name
        assert info["renderer"] == DEFAULT_RENDERER[name], name
        assert info["rules"], name
        n = pyogrio.read_info(qgis_view["out"] / "screening.gpkg", layer=name)["features"]
        assert info["features"] == n, name


def test_every_field_has_its_alias_in_qgis(qgis_view):
    for name in qgis_view["layers"]:
        fields = qgis_view["info"][name]["fields"]
        assert fields, name
        for field, _type, alias in fields:
            assert alias, (name, field)
            assert alias == alias_for(field), (name, field)
    # units reach the user: a few aliases as the glossary words them
    aliases = {f: a for f, _t, a in qgis_view["info"]["sites"]["fields"]}
    assert aliases["chainage_m"] == "Chainage [m]"
    assert aliases["ground_resistance_ohm"] == "Ground resistance [Ω]"


def test_labels_name_assets_sites_and_lines(qgis_view):
    for name, field in LABEL_FIELDS.items():
        info = qgis_view["info"][name]
        assert info["labels"] is True, name
        assert info["label_field"] == field, name
    assert qgis_view["info"]["segments"]["labels"] is False  # too many to label


def test_sites_are_drawn_by_remedy_and_unresolved(qgis_view):
    # the remedies the grounding step writes (corridor/steps/ground.py) each have a rule
    remedies = {getattr(ground, n) for n in dir(ground) if n.startswith("REMEDY_")}
    assert remedies == set(REMEDY_SYMBOLS)
    rules = qgis_view["info"]["sites"]["rules"]
    filters = [f for _label, f in rules]
    for remedy in remedies:
        assert f"\"remedy\" = '{remedy}'" in filters
    assert '"unresolved"' in filters and "ELSE" in filters
    sites = read_csv(qgis_view["out"] / "grounding_sites.csv")
    assert sites["unresolved"].any() and not sites["unresolved"].all()  # the demo has both
    assert set(sites["remedy"]) <= remedies


def _pixels(png: Path) -> np.ndarray:
    from PIL import Image

    with Image.open(png) as img:
        return np.asarray(img.convert("RGB"), dtype=float)


def test_rendered_map_is_not_blank(qgis_view):
    px = _pixels(qgis_view["png"])
    assert px.shape == (650, 900, 3)
    assert px.std() > 10.0  # a blank (one-colour) image has zero variance
    drawn = (px < 245).any(axis=2).mean()
    assert 0.005 < drawn < 0.9, drawn  # features drawn, not a filled canvas
    # the unresolved ring's colour is on the map (the site rules were applied)
    ring = np.array([int(UNRESOLVED_COLOUR[i:i + 2], 16) for i in (1, 3, 5)], dtype=float)
    assert (np.abs(px - ring).max(axis=2) < 30).sum() > 20
    assert qgis_view["render"]["renderers"]["sites"] == "RuleRenderer"


def test_every_csv_opens_in_qgis_delimited_text(qgis_view):
    assert {"grounding_sites.csv", "exposures.csv", "rejected.csv", "changes.csv"} <= set(
        qgis_view["csvs"])
    for name in qgis_view["csvs"]:
        info = qgis_view["info"][f"csv:{name}"]
        assert info["valid"], (name, info.get("error"))
        frame = pd.read_csv(qgis_view["out"] / name, keep_default_na=False, na_values=[""])
        # the first line is the header: QGIS's field names are pandas' columns
        assert [f for f, _t, _a in info["fields"]] == list(frame.columns), name
        assert info["fields"][-1][0] == CAUTION_COLUMN
        assert info["features"] == len(frame), name
        if len(frame):  # with rows, numeric columns are numbers in QGIS as in pandas
            types = {f: t for f, t, _a in info["fields"]}
            for col in frame.columns:
                if pd.api.types.is_float_dtype(frame[col]):
                    assert types[col] == "double", (name, col, types[col])
                elif pd.api.types.is_integer_dtype(frame[col]):
                    assert types[col] in ("integer", "integer64", "longlong"), (name, col)


def test_work_list_csv_is_a_point_layer_at_the_sites(qgis_view):
    info = qgis_view["info"]["csv points"]
    assert info["valid"] and info["crs"] == "EPSG:32615"
    assert info["geometry"] == 0  # QgsWkbTypes.PointGeometry
    sites = qgis_view["info"]["sites"]
    assert info["features"] == sites["features"]
    # full-precision coordinates: the same extent as the GeoPackage layer
    np.testing.assert_allclose(info["extent"], sites["extent"], rtol=0, atol=1e-6)
