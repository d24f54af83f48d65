"""Published outputs of a demo run: files, columns with units, CSV and layers agree.

The checks are internal consistency of what a user receives (a CSV work list
that disagrees with its layer would send crews to the wrong place), plus the
safety caution required on every CSV (project safety rule).
"""

import csv
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest

from corridor.cli import main
from corridor.io.outputs import CAUTION_COLUMN, SAFETY_CAUTION, read_csv, write_csv

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
    csv = read_csv(demo_out / csv_name)
    lyr = pyogrio.read_dataframe(demo_out / "screening.gpkg", layer=layer, read_geometry=False)
    assert list(csv.columns) == list(lyr.columns)
    assert csv[key].astype(str).tolist() == lyr[key].astype(str).tolist()
    for col in csv.columns:
        a, b = csv[col], lyr[col]
        if pd.api.types.is_numeric_dtype(a) and pd.api.types.is_numeric_dtype(b):
            # the CSV rounds by unit (corridor.io.csv_format): within half its last digit
            _assert_rounded(a.to_numpy(float), b.to_numpy(float), col)
        else:
            assert a.fillna("").astype(str).str.lower().tolist() == \
                b.fillna("").astype(str).str.lower().tolist(), col


def _assert_rounded(csv_values, layer_values, col):
    """CSV values equal the layer's rounded as README "Outputs" states for the unit."""
    np.testing.assert_array_equal(np.isnan(csv_values), np.isnan(layer_values), err_msg=col)
    ok = ~np.isnan(layer_values)
    got, ref = csv_values[ok], layer_values[ok]
    mag = np.abs(ref)
    if col in ("x", "y", "lon", "lat"):  # coordinates: full precision, exact
        np.testing.assert_array_equal(got, ref, err_msg=col)
    elif col.endswith("_m") and not col.endswith("_ohm_m"):  # 0.01 m (3 significant < 1 m)
        tol = np.where(mag >= 1.0, 0.005 + 1e-9, 0.005 * mag + 1e-12)
        assert (np.abs(got - ref) <= tol).all(), col
    elif col.endswith("_deg"):
        assert (np.abs(got - ref) <= 0.05 + 1e-9).all(), col
    else:  # 3 significant digits: off by at most half a unit of the third digit
        assert (np.abs(got - ref) <= 0.005 * mag + 1e-12).all(), col


def test_every_csv_carries_the_caution(demo_out):
    # project safety rule: every CSV carries the caution; here as the last column of a
    # plain CSV (RFC 4180), read with the standard library's csv module as reference
    paths = sorted(demo_out.glob("*.csv"))
    assert len(paths) >= 4
    for path in paths:
        with open(path, newline="", encoding="utf-8") as fh:
            rows = list(csv.reader(fh))
        assert rows[0][-1] == CAUTION_COLUMN, path.name
        assert all(len(r) == len(rows[0]) for r in rows), path.name
        assert all(r[-1] == SAFETY_CAUTION for r in rows[1:]), path.name
    # the tables with rows carry the text itself
    with open(demo_out / "grounding_sites.csv", newline="", encoding="utf-8") as fh:
        assert SAFETY_CAUTION in fh.read()
    # a CSV without rows (rejected.csv of the clean demo) has only the column name: the
    # caution file that every run writes beside the CSVs carries the text for it
    assert SAFETY_CAUTION in (demo_out / "CAUTION.txt").read_text(encoding="utf-8")


def test_csv_ids_with_hash_survive_plain_pandas(tmp_path):
    # ids such as "#3" (a feature without id) or "MP#12" are whole: no comment line,
    # so a plain pandas.read_csv needs no option (the README's advice)
    frame = pd.DataFrame({"feature_id": ["#3", "MP#12", "A"], "x_m": [1.0, 2.0, 3.0]})
    write_csv(frame, tmp_path / "t.csv")
    back = pd.read_csv(tmp_path / "t.csv")
    assert back["feature_id"].tolist() == ["#3", "MP#12", "A"]
    assert list(back.columns) == ["feature_id", "x_m", CAUTION_COLUMN]
    assert read_csv(tmp_path / "t.csv").columns.tolist() == ["feature_id", "x_m"]


FORMULAS = ["=1+1", "+41 55", "-2+3", "@SUM(A1)", "\tTAB", "\rCR", "'quoted",
            "=HYPERLINK(\"http://x\",\"y\")"]


def test_csv_injection_neutralised_and_reversible(tmp_path):
    # OWASP "CSV Injection": a cell starting with = + - @ tab or CR is read as a formula
    # by spreadsheets; prefixing a single quote makes it text (common practice).
    frame = pd.DataFrame({"asset_id": FORMULAS + ["plain", "MBL-12"],
                          "v_normal_v": [-1.5] * 8 + [2.0, 3.0]})
    write_csv(frame, tmp_path / "t.csv")
    with open(tmp_path / "t.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))[1:]
    cells = [r[0] for r in rows]
    for raw, cell in zip(FORMULAS, cells, strict=False):
        assert cell == "'" + raw
        assert not cell.startswith(("=", "+", "-", "@", "\t", "\r"))
    assert cells[-2:] == ["plain", "MBL-12"]
    assert [float(r[1]) for r in rows][:1] == [-1.5]  # numbers are not text: unchanged
    back = read_csv(tmp_path / "t.csv")
    assert back["asset_id"].tolist() == FORMULAS + ["plain", "MBL-12"]
    np.testing.assert_array_equal(back["v_normal_v"], frame["v_normal_v"])


def test_no_csv_cell_of_the_demo_starts_with_a_formula_trigger(demo_out):
    for path in demo_out.glob("*.csv"):
        with open(path, newline="", encoding="utf-8") as fh:
            for row in list(csv.reader(fh))[1:]:
                for cell in row:
                    if cell.startswith(("=", "+", "@", "\t", "\r")):
                        raise AssertionError(f"{path.name}: {cell!r}")
                    if cell.startswith("-"):  # only numbers may start with a minus
                        float(cell)


def test_run_json_counts_agree_with_the_files(demo_out):
    record = json.loads((demo_out / "run.json").read_text(encoding="utf-8"))
    counts = record["counts"]
    sites = read_csv(demo_out / "grounding_sites.csv")
    layer = pyogrio.read_dataframe(demo_out / "screening.gpkg", layer="sites",
                                   read_geometry=False)
    assert counts["grounding_sites"] == len(sites) == len(layer)
    assert counts["grounds_proposed"] == int(sites["ground_resistance_ohm"].notna().sum())
    assert counts["grounds_proposed"] < counts["grounding_sites"]  # the demo has both kinds
    assert counts["exposures"] == len(read_csv(demo_out / "exposures.csv"))
    assert counts["rejected"] == len(read_csv(demo_out / "rejected.csv"))
    assert counts["segments"] == pyogrio.read_info(demo_out / "screening.gpkg",
                                                   layer="segments")["features"]
    assert counts["assets"] == pyogrio.read_info(demo_out / "screening.gpkg",
                                                 layer="assets")["features"]


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

    s = read_csv(demo_out / "grounding_sites.csv")
    lon, lat = Transformer.from_crs("EPSG:32615", 4326, always_xy=True).transform(
        s["x"].to_numpy(), s["y"].to_numpy())
    # coordinates keep full precision in the CSV (corridor.io.csv_format)
    np.testing.assert_allclose(s["lon"], lon, atol=1e-9)
    np.testing.assert_allclose(s["lat"], lat, atol=1e-9)


def test_run_json_lists_criteria_not_assessed(demo_out):
    # ieee_na (config/demo.toml): every criterion is assessed on the demo. step_fault is
    # computed beside faulted towers; ac_corrosion_ratio (ISO 18086's "or" combination
    # with the DC current density) is judged where J_ac passes on its own, and where J_ac
    # alone fails without J_dc the density criterion's J_ac/30 fallback exceeds
    # (docs/methods.md §10). The list and its count agree.
    record = json.loads((demo_out / "run.json").read_text(encoding="utf-8"))
    assert record["not_assessed"] == []
    assert record["counts"]["criteria_not_assessed"] == 0


def test_power_lines_layer_shows_what_causes_the_hazards(demo_out):
    # the lines as the run used them, styled by voltage (the map shows the cause); the
    # demo's two lines (sample_layers/make_demo.py) with their nominal voltages
    import sqlite3

    gpkg = demo_out / "screening.gpkg"
    lines = pyogrio.read_dataframe(gpkg, layer="power_lines")
    assert dict(zip(lines["line_id"], lines["voltage_kv"], strict=True)) == {
        "VPC-345-A": 345.0, "VPC-138-B": 138.0}
    assert {"arrangement", "fault_current_start_ka", "clearing_time_s"} <= set(lines.columns)
    with sqlite3.connect(gpkg) as con:
        styles = con.execute("SELECT styleName, useAsDefault FROM layer_styles"
                             " WHERE f_table_name = 'power_lines'").fetchall()
    assert styles == [("voltage", 1)]


@pytest.mark.parametrize("column,value,text", [
    # README "Outputs": metres to 0.01, volts/amperes/ohms and ratios to 3 significant
    # digits, coordinates in full (the decimal text is what a spreadsheet shows)
    ("chainage_m", 10566.4954096, "10566.5"),
    ("electrode_length_m", 384.843357811, "384.84"),
    ("wire_radius_m", 0.00125, "0.00125"),          # under 1 m: 3 significant digits
    ("v_before_v", 1240.21035798, "1240.0"),
    ("i_fault_a", 0.0123456, "0.0123"),
    ("ground_resistance_ohm", 1.0, "1.0"),
    ("soil_resistivity_ohm_m", 123.456, "123.0"),   # Ω·m is not metres
    ("emf_fault_v_per_km", 86.54321, "86.5"),
    ("utilization_after", 4.91527456541, "4.92"),
    ("ratio_touch_fault", 0.0456789, "0.0457"),
    ("angle_deg", 63.80546901, "63.8"),
    ("x", 527564.78405312345, repr(527564.78405312345)),
    ("lon", -92.66886748543217, repr(-92.66886748543217)),
])
def test_csv_numbers_are_rounded_by_unit(tmp_path, column, value, text):
    write_csv(pd.DataFrame({column: [value, np.nan]}), tmp_path / "t.csv")
    with open(tmp_path / "t.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == [column, CAUTION_COLUMN]  # the first line is the header
    assert rows[1][0] == text
    assert rows[2][0] == ""  # a missing number is an empty cell
    raw = (tmp_path / "t.csv").read_text(encoding="utf-8").splitlines()
    assert raw[1].startswith(text + ",")  # numbers are not quoted
    assert raw[2].startswith(',"')  # a missing number is empty, not ""


def test_csv_columns_read_back_with_their_types(tmp_path):
    # plain pandas (the README's reader) infers numbers, booleans and text
    frame = pd.DataFrame({"site_id": ["A@1", None], "n": [1, 2], "unresolved": [True, False],
                          "v_after_v": [12.345, np.nan], 'odd "name"': ["a,b", "c\rd"]})
    write_csv(frame, tmp_path / "t.csv")
    back = pd.read_csv(tmp_path / "t.csv", keep_default_na=False, na_values=[""])
    assert back["n"].tolist() == [1, 2]
    assert back["unresolved"].tolist() == [True, False]
    assert back["v_after_v"].iloc[0] == 12.3 and np.isnan(back["v_after_v"].iloc[1])
    assert back["site_id"].iloc[0] == "A@1" and pd.isna(back["site_id"].iloc[1])
    assert back['odd "name"'].tolist() == ["a,b", "c\rd"]


def test_rounding_rules_hold_on_many_values():
    # properties of rounding to n significant digits / d decimals (common practice):
    # the result has at most n significant digits (d decimals), and it is off by at most
    # half a unit of its last digit; Python's correctly rounded formatting is the reference
    from corridor.io.csv_format import METRES, SIG3, round_array

    rng = np.random.default_rng(7)
    x = rng.lognormal(0.0, 5.0, 20_000) * rng.choice([-1.0, 1.0], 20_000)
    y = round_array(x, SIG3)
    assert all(float(f"{v:.3g}") == v for v in y)
    unit = 10.0 ** (np.floor(np.log10(np.abs(x))) - 2)
    assert (np.abs(y - x) <= 0.5 * unit * (1 + 1e-9)).all()
    m = round_array(x, METRES)
    big = np.abs(x) >= 1.0
    assert all(float(f"{v:.2f}") == v for v in m[big])
    assert (np.abs(m[big] - x[big]) <= 0.005 * (1 + 1e-9)).all()
    assert all(float(f"{v:.3g}") == v for v in m[~big])
    # missing and infinite values pass through; a negative zero is written as 0.0
    odd = round_array(np.array([np.nan, np.inf, -0.0, -1e-9]), SIG3)
    assert np.isnan(odd[0]) and odd[1] == np.inf and repr(float(odd[2])) == "0.0"
