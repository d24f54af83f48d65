"""Published outputs of a demo run: files, columns with units, CSV and layers agree.

The checks are internal consistency of what a user receives (a CSV work list
that disagrees with its layer would send crews to the wrong place), plus the
safety caution required on every CSV (project safety rule).
"""

from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest

from corridor.cli import main
from corridor.io.outputs import SAFETY_CAUTION

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def demo_out(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    assert main(["run", str(ROOT / "config" / "demo.toml"), "--out", str(out), "-q"]) == 0
    import logging

    for h in list(logging.getLogger("corridor").handlers):
        logging.getLogger("corridor").removeHandler(h)
    return out


def test_files_written(demo_out):
    for name in ("screening.gpkg", "exposures.csv", "grounding_sites.csv", "rejected.csv",
                 "changes.csv", "run.json", "report.html", "corridor.log"):
        assert (demo_out / name).exists(), name
    layers = {str(n) for n in pyogrio.list_layers(demo_out / "screening.gpkg")[:, 0]}
    assert {"exposures", "segments", "hazards", "assets", "sites"} <= layers


@pytest.mark.parametrize("csv_name,layer,key", [
    ("grounding_sites.csv", "sites", "site_id"),
    ("exposures.csv", "exposures", "exposure_id"),
])
def test_csv_and_layer_agree_row_for_row(demo_out, csv_name, layer, key):
    csv = pd.read_csv(demo_out / csv_name, comment="#")
    lyr = pyogrio.read_dataframe(demo_out / "screening.gpkg", layer=layer, read_geometry=False)
    assert list(csv.columns) == list(lyr.columns)
    assert csv[key].astype(str).tolist() == lyr[key].astype(str).tolist()
    for col in csv.columns:
        a, b = csv[col], lyr[col]
        if pd.api.types.is_numeric_dtype(a) and pd.api.types.is_numeric_dtype(b):
            # CSV keeps 12 significant digits (float_format %.12g)
            np.testing.assert_allclose(a.to_numpy(float), b.to_numpy(float), rtol=1e-11,
                                       equal_nan=True, err_msg=col)
        else:
            assert a.fillna("").astype(str).str.lower().tolist() == \
                b.fillna("").astype(str).str.lower().tolist(), col


def test_every_csv_carries_the_caution(demo_out):
    for path in demo_out.glob("*.csv"):
        assert path.read_text(encoding="utf-8").splitlines()[0] == f"# {SAFETY_CAUTION}"


def test_column_names_carry_units(demo_out):
    # project convention: every numeric column names its unit (or is a count/id/ratio)
    seg = pyogrio.read_dataframe(demo_out / "screening.gpkg", layer="segments",
                                 read_geometry=False, max_features=5)
    units = ("_m", "_deg", "_kv", "_ka", "_a", "_ma", "_v", "_v_per_km", "_ohm", "_ohm_m", "_s",
             "_a_per_m2")
    unitless = {"segment_id", "part", "segment_index", "lines_in_reach", "utilization", "rank",
                "screening_factor", "high_reliability"}
    for col in seg.columns:
        if pd.api.types.is_numeric_dtype(seg[col]) and col not in unitless \
                and not col.startswith("ratio_"):
            assert col.endswith(units), col


def test_sites_have_wgs84_positions_matching_pyproj(demo_out):
    # pyproj is the reference for the run CRS -> WGS 84 transformation
    from pyproj import Transformer

    s = pd.read_csv(demo_out / "grounding_sites.csv", comment="#")
    lon, lat = Transformer.from_crs("EPSG:32615", 4326, always_xy=True).transform(
        s["x"].to_numpy(), s["y"].to_numpy())
    np.testing.assert_allclose(s["lon"], lon, atol=1e-7)  # 12 significant digits in the CSV
    np.testing.assert_allclose(s["lat"], lat, atol=1e-7)
