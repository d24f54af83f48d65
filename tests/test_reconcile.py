"""Readings against the model, and calibration (docs/methods.md §17).

Checks against things the project did not make:

- recovery: readings generated from the model with known factors (coating x3 on the
  gas lateral, soil x0.5 on the railway) and seeded log-normal noise; the fit must
  return the known factors within its stated uncertainty (two standard deviations:
  the 95 % interval of the normal distribution, common practice);
- anomaly: one reading generated with the insulating joint bridged (Sunde 1968: a
  joint splits the induced profile and raises the voltage on both sides of it, so a
  bridged joint reads far lower there) is flagged and not absorbed into the factors;
- closed form: a straight pipeline parallel to a straight line (uniform EMF), open
  ends: V(0) = −(E/γ)·tanh(γL/2) (Sunde 1968; docs/methods.md §5.2), with
  y = πD/r_coat + jωC_coat (docs/methods.md §5.7). One noiseless reading fixes the
  coating factor exactly.
"""

from __future__ import annotations

import copy
import json
import logging
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from corridor.cli import main
from corridor.compute import compute
from corridor.config import load_config
from corridor.errors import ConfigError
from corridor.io.layers import read_inputs
from corridor.io.outputs import read_csv
from corridor.reconcile.model import asset_voltages, model_stages
from corridor.reconcile.run import calibrate

ROOT = Path(__file__).resolve().parents[1]
DEMO_READINGS = ROOT / "config" / "demo_readings.toml"
EPS0_F_PER_M = 8.8541878128e-12  # CODATA 2018


def _config(tmp_path: Path, readings: Path, extra: str = "", fields: str | None = None) -> Path:
    """The demo_readings config with its paths made absolute and another readings file."""
    text = DEMO_READINGS.read_text(encoding="utf-8")
    text = text.replace('"../', f'"{ROOT}/')
    text = text.replace(f'"{ROOT}/out/demo_readings"', f'"{tmp_path}/out"')
    text = text.replace(f'path = "{ROOT}/sample_layers/brackenford_readings.gpkg"',
                        f'path = "{readings}"')
    text = text.replace(f'"{ROOT}/out/demo_calibration.json"', f'"{tmp_path}/cal.json"')
    if fields is not None:
        text = text.replace(text[text.index("fields = { reading_id"):].split("\n")[0], fields)
    path = tmp_path / "readings.toml"
    path.write_text(text + extra, encoding="utf-8")
    return path


def _synthetic(truth: dict, posts: dict, noise_log: float, bridged_at: tuple | None = None,
               seed: int = 7) -> gpd.GeoDataFrame:
    """Readings at test posts from the model run with ``truth`` factors, plus noise."""
    cfg = load_config(ROOT / "config" / "demo.toml")
    inputs = read_inputs(cfg)
    segs = compute(cfg, inputs, model_stages(), logging.DEBUG).segment_table
    ids = list(inputs.assets["asset_id"].astype(str))
    rng = np.random.default_rng(seed)
    rows = []
    for aid, chainages in posts.items():
        v = asset_voltages(cfg, inputs, ids.index(aid), truth[aid])
        if bridged_at is not None and bridged_at[0] == aid:
            bridged = copy.copy(inputs)
            bridged.grounds = inputs.grounds[inputs.grounds["item"] != "insulating_joint"]
            v_b = asset_voltages(cfg, bridged, ids.index(aid), truth[aid])
        mine = segs[segs["asset_id"] == aid].sort_values("segment_index")
        start = mine["chainage_m"].to_numpy(float)
        for n, ch in enumerate(chainages):
            s = int(np.searchsorted(start, ch, side="right") - 1)
            volts = v_b[s] if bridged_at == (aid, ch) else v[s]
            rows.append({"POST": f"{aid}-{n}", "ASSET": aid, "TIME": "2026-11-03T10:00Z",
                         "V_AC": float(volts * np.exp(rng.normal(0.0, noise_log))),
                         "CURRENTS": "",
                         "geometry": shapely.line_interpolate_point(
                             mine.geometry.iloc[s], 0.5, normalized=True)})
    return gpd.GeoDataFrame(rows, geometry="geometry", crs=inputs.crs)


MBL_POSTS = [600, 2400, 4800, 6600, 8400, 9800, 11400, 13200, 16200, 20400]
BVR_POSTS = [1500, 4500, 7500, 10500, 13500, 16500, 19500, 22500]


def test_recovery_of_known_factors(tmp_path):
    # truth: coating x3 on MBL-12, soil x0.5 on BVR-1; 3 % log-normal noise (seeded)
    truth = {"MBL-12": {"coating_factor": 3.0, "soil_factor": 1.0},
             "BVR-1": {"coating_factor": 1.0, "soil_factor": 0.5}}
    table = _synthetic(truth, {"MBL-12": MBL_POSTS, "BVR-1": BVR_POSTS}, 0.03)
    table.to_file(tmp_path / "r.gpkg", layer="readings", driver="GPKG")
    cfg = load_config(_config(tmp_path, tmp_path / "r.gpkg"))
    path, data = calibrate(cfg)
    assert path == tmp_path / "cal.json" and path.is_file()
    assert json.loads(path.read_text())["format"] == "corridor-calibration-1"
    for aid, factors in truth.items():
        entry = data["assets"][aid]
        assert entry["readings"] == len(MBL_POSTS if aid == "MBL-12" else BVR_POSTS)
        for name in ("coating", "soil"):
            got = entry[f"{name}_factor"]
            if name in entry["fitted"]:
                sigma = entry[f"{name}_factor_sigma_log"]
                assert 0 < sigma < 1.0
                # within two standard deviations of the truth (95 %, common practice)
                assert abs(np.log(got) - np.log(factors[f"{name}_factor"])) <= 2 * sigma, (
                    aid, name, got, sigma)
            else:
                assert got == 1.0
        assert entry["anomalies"] == 0
        assert abs(entry["bias_log_after"]) < 0.05
    # the dominant factors are the ones the truth moved, and tightly
    assert abs(np.log(data["assets"]["MBL-12"]["coating_factor"] / 3.0)) < 0.15
    readings = read_csv(tmp_path / "cal_readings.csv")
    assert len(readings) == len(table)
    assert np.abs(readings["log_residual_after"]).max() < 0.15


def test_bridged_joint_is_flagged_not_absorbed(tmp_path):
    truth = {"MBL-12": {"coating_factor": 3.0, "soil_factor": 1.0}}
    table = _synthetic(truth, {"MBL-12": MBL_POSTS}, 0.0, bridged_at=("MBL-12", 9800))
    table.to_file(tmp_path / "r.gpkg", layer="readings", driver="GPKG")
    cfg = load_config(_config(tmp_path, tmp_path / "r.gpkg"))
    _, data = calibrate(cfg)
    entry = data["assets"]["MBL-12"]
    # not absorbed: the joint reading is set aside and the noiseless rest fix the truth
    assert entry["set_aside"] == 1
    assert entry["coating_factor"] == pytest.approx(3.0, rel=0.02)
    assert entry["soil_factor"] == pytest.approx(1.0, rel=0.05)
    assert [a["reading_id"] for a in data["anomalies"]] == ["MBL-12-5"]
    cause = data["anomalies"][0]["likely_cause"]
    assert cause.startswith("a shorted (bridged) insulating joint")
    assert data["anomalies"][0]["log_residual_after"] < -0.35


def _straight_case(tmp_path: Path, r_coat_ohm_m2: float, rho_ohm_m: float = 100.0):
    """One line along y = 0 and a pipeline 100 m from it, parallel over 10 km, open ends."""
    crs = "EPSG:32615"
    x0, y0 = 500_000.0, 4_600_000.0
    lines = gpd.GeoDataFrame(
        {"line_id": ["L1"], "voltage_kv": [138.0], "arrangement": ["h_frame_138"],
         "load_current_a": [500.0], "residual_current_pct": [0.0],
         "fault_current_start_ka": [5.0], "fault_current_end_ka": [5.0],
         "clearing_time_s": [0.5]},
        geometry=[shapely.LineString([(x0 - 5000, y0), (x0 + 15000, y0)])], crs=crs)
    pipe = gpd.GeoDataFrame(
        {"asset_id": ["P1"], "height_m": [-1.5], "start_termination": ["open"],
         "end_termination": ["open"], "termination_resistance_ohm": [10.0],
         "diameter_m": [0.508], "wall_thickness_m": [0.0095],
         "coating_resistance_ohm_m2": [r_coat_ohm_m2], "steel_relative_permeability": [300.0],
         "cathodic_protection": [True], "coating_type": ["pe"]},
        geometry=[shapely.LineString([(x0, y0 + 100), (x0 + 10_000, y0 + 100)])], crs=crs)
    lines.to_file(tmp_path / "case.gpkg", layer="power_lines", driver="GPKG")
    pipe.to_file(tmp_path / "case.gpkg", layer="pipelines", driver="GPKG")
    cfg = tmp_path / "case.toml"
    cfg.write_text(f"""
[run]
output_dir = "out"
crs = "{crs}"
frequency_hz = 60.0
screening_distance_m = 1000.0
segment_length_m = 50.0
default_soil_resistivity_ohm_m = {rho_ohm_m}
limit_set = "ieee_na"

[layers.power_lines]
path = "case.gpkg"
layer = "power_lines"

[[layers.assets]]
path = "case.gpkg"
layer = "pipelines"
kind = "pipeline"

[readings]
path = "readings.csv"
fields = {{ reading_id = "post", asset_id = "asset", chainage_m = "km_m", voltage_v = "volts" }}
calibration_path = "cal.json"
""", encoding="utf-8")
    return cfg


def test_closed_form_one_reading_fixes_the_coating_factor(tmp_path):
    # a coating of 5·10³ Ω·m² over 10 km: γL ≈ 4.6, where the reading feels the coating
    # (d ln V/d ln r_coat → 1/2 for a long line) more than the soil
    r_coat, k_true, length_m, f_hz = 1.0e4, 0.5, 10_000.0, 60.0
    cfg_path = _straight_case(tmp_path, r_coat)
    (tmp_path / "readings.csv").write_text("post,asset,km_m,volts\nTP1,P1,0,1\n")
    cfg = load_config(cfg_path)
    inputs = read_inputs(cfg)
    segs = compute(cfg, inputs, model_stages(), logging.DEBUG).segment_table
    e_v_per_m = segs["emf_normal_v_per_km"].to_numpy(float) / 1000.0
    assert np.ptp(e_v_per_m) <= 1e-9 * e_v_per_m.mean()  # the exposure is uniform
    from corridor.network.asset_models import pipeline_line_constants

    z, y_model = pipeline_line_constants(0.508, 0.0095, r_coat, -1.5, 100.0, f_hz,
                                         steel_relative_permeability=300.0)
    # y of docs/methods.md §5.7, written out here: coating leakage and coaxial capacitance
    # (PE 3 mm, εr 2.3 as the section states)
    c_coat = 2 * np.pi * EPS0_F_PER_M * 2.3 / np.log(1 + 2 * 0.003 / 0.508)
    assert complex(np.asarray(y_model).ravel()[0]) == pytest.approx(
        np.pi * 0.508 / r_coat + 2j * np.pi * f_hz * c_coat, rel=1e-9)
    y_true = np.pi * 0.508 / (k_true * r_coat) + 2j * np.pi * f_hz * c_coat
    g = np.sqrt(complex(np.asarray(z).ravel()[0]) * y_true)
    v0 = abs(e_v_per_m[0] / g * np.tanh(g * length_m / 2))  # Sunde, open ends, x = 0
    (tmp_path / "readings.csv").write_text(f"post,asset,km_m,volts\nTP1,P1,0,{float(v0)!r}\n")
    _, data = calibrate(load_config(cfg_path))
    entry = data["assets"]["P1"]
    assert entry["fitted"] == ["coating"]
    assert "soil factor" in entry["note"] and "held at 1" in entry["note"]  # says which
    assert entry["soil_factor"] == 1.0
    assert entry["coating_factor"] == pytest.approx(k_true, rel=1e-3)


def test_every_reading_is_listed_with_its_reason(tmp_path):
    cfg = load_config(DEMO_READINGS)
    inputs = read_inputs(cfg)
    p = shapely.line_interpolate_point(inputs.assets.geometry.iloc[0], 3000.0)
    rows = [  # (id, asset, chainage, voltage, geometry)
        ("ok", "MBL-12", None, 12.0, p),
        ("far", "", None, 5.0, shapely.Point(p.x + 5000, p.y + 5000)),
        ("text", "MBL-12", None, "high", p),
        ("neg", "MBL-12", None, -3.0, p),
        ("beyond", "MBL-12", 99_000.0, 4.0, None),
        ("nobody", "XX-9", 100.0, 4.0, None),
        ("nowhere", "", None, 4.0, None),
        ("zero", "MBL-12", 500.0, 0.0, None),
        ("bad amps", "MBL-12", 500.0, 3.0, None),
    ]
    table = gpd.GeoDataFrame(
        {"POST": [r[0] for r in rows], "ASSET": [r[1] for r in rows],
         "CH": [r[2] for r in rows], "V_AC": [str(r[3]) for r in rows],
         "CURRENTS": ["VPC-345-A=lots" if r[0] == "bad amps" else "" for r in rows]},
        geometry=[r[4] for r in rows], crs=inputs.crs)
    table.to_file(tmp_path / "r.gpkg", layer="readings", driver="GPKG")
    fields = ('fields = { reading_id = "POST", asset_id = "ASSET", chainage_m = "CH",'
              ' voltage_v = "V_AC", line_currents_a = "CURRENTS" }')
    assert main(["run", str(_config(tmp_path, tmp_path / "r.gpkg", fields=fields)), "-q"]) == 0
    out = read_csv(tmp_path / "out" / "reconciliation.csv").set_index("reading_id")
    assert list(out.index) == [r[0] for r in rows]  # none dropped, input order
    assert out.loc["ok", "status"] == "placed" and np.isfinite(out.loc["ok", "log_residual"])
    assert out.loc["far", "status"] == "unplaced" and "snap tolerance" in out.loc["far", "reason"]
    for rid, fld in (("text", "voltage_v"), ("neg", "voltage_v"),
                     ("bad amps", "line_currents_a")):
        assert out.loc[rid, "status"] == "rejected"
        assert out.loc[rid, "reason"].startswith(f"layer r.gpkg:readings: feature {rid}: field"
                                                 f" '{fld}'")
    assert "beyond the end of asset MBL-12" in out.loc["beyond", "reason"]
    assert "'XX-9' is not an asset of this run" in out.loc["nobody", "reason"]
    assert "no location" in out.loc["nowhere", "reason"]
    assert out.loc["zero", "status"] == "not compared"
    caution = pd.read_csv(tmp_path / "out" / "reconciliation.csv")["caution"]
    assert caution.nunique() == 1 and "licensed engineer" in caution.iloc[0]
    layer = gpd.read_file(tmp_path / "out" / "screening.gpkg", layer="readings")
    assert len(layer) == len(rows)


def test_two_assets_equally_near_are_ambiguous():
    from corridor.reconcile.readings import place

    segs = gpd.GeoDataFrame(
        {"asset_id": ["A", "B"], "segment_index": [0, 0], "chainage_m": [0.0, 0.0],
         "length_m": [100.0, 100.0]},
        geometry=[shapely.LineString([(0, 0), (100, 0)]),
                  shapely.LineString([(0, 10), (100, 10)])])
    table = gpd.GeoDataFrame(
        {"feature_id": ["fid:1", "fid:2"], "reading_id": ["mid", "named"], "asset_id": ["", "B"],
         "chainage_m": [None, None], "x_m": [None, None], "y_m": [None, None],
         "measured_at": ["", ""], "voltage_v": [1.0, 1.0], "ac_density_a_per_m2": [None, None],
         "line_currents_a": ["", ""]},
        geometry=[shapely.Point(50, 5), shapely.Point(50, 5)])
    out = place(table, segs, {"path": "r.csv", "layer": None, "snap_tolerance_m": 25.0,
                              "ambiguity_margin_m": 5.0})
    assert out["status"].tolist() == ["unplaced", "placed"]
    assert out["reason"].iloc[0].startswith("ambiguous: several assets about equally near")
    assert out["asset_id"].iloc[1] == "B" and out["snap_distance_m"].iloc[1] == 5.0


def test_config_problems_name_the_key(tmp_path):
    bad = _config(tmp_path, ROOT / "sample_layers" / "brackenford_readings.gpkg",
                  extra="\n[calibration]\npath = \"missing.json\"\n")
    text = bad.read_text().replace("snap_tolerance_m = 25.0", "snap_tolerance_m = -1\nsnap = 2")
    bad.write_text(text)
    with pytest.raises(ConfigError) as exc:
        load_config(bad)
    msgs = "\n".join(exc.value.problems)
    assert "readings.snap_tolerance_m: -1.0 [m] is below the valid range" in msgs
    assert "readings.snap: unknown key" in msgs
    assert "calibration.path:" in msgs and "run `corridor calibrate` first" in msgs
    assert main(["calibrate", str(bad), "-q"]) == 2  # bad config: exit 2 (README)


def test_calibrated_run_names_the_calibration_in_changes(tmp_path):
    cfg_path = _config(tmp_path, ROOT / "sample_layers" / "brackenford_readings.gpkg")
    assert main(["calibrate", str(cfg_path), "-q"]) == 0
    assert main(["run", str(cfg_path), "-q"]) == 0
    before = read_csv(tmp_path / "out" / "reconciliation.csv")
    cal_path = _config(tmp_path, ROOT / "sample_layers" / "brackenford_readings.gpkg",
                       extra=f'\n[calibration]\npath = "{tmp_path}/cal.json"\n')
    assert main(["run", str(cal_path), "-q"]) == 0
    after = read_csv(tmp_path / "out" / "reconciliation.csv")
    changes = read_csv(tmp_path / "out" / "changes.csv")
    cal = json.loads((tmp_path / "cal.json").read_text())
    moved = changes[changes["asset_id"].isin(cal["assets"])]
    assert len(moved) >= 1
    for cause in moved["cause"]:
        assert cause.startswith("calibration (cal.json): ")
        assert "config changed" not in cause
    # the calibrated run agrees better with the readings, apart from the anomaly
    ok = ~after["anomaly"].astype(bool) & np.isfinite(after["log_residual"])
    assert np.abs(after.loc[ok, "log_residual"]).mean() < 0.5 * np.abs(
        before.loc[ok, "log_residual"]).mean()
    assert set(after.loc[after["asset_id"].isin(cal["assets"]), "calibrated"]) == {"yes"}
    assert after["anomaly"].astype(bool).sum() == 1
    html = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert "Readings against the model" in html and "MBL-12-TP06" in html


def test_demo_readings_config_loads_and_demo_names_no_readings():
    # demo.toml names no readings: its run has no readings outputs (README)
    assert load_config(ROOT / "config" / "demo.toml").readings is None
    cfg = load_config(DEMO_READINGS)
    assert cfg.readings is not None and cfg.calibration is None
    assert pd.notna(cfg.readings["calibration_path"])


def test_new_readings_reuse_the_cache_but_never_stale_outputs(tmp_path):
    # readings change no asset's results: the second run takes every asset from the
    # cache, yet its readings outputs are those of the new readings (README, cache)
    table = gpd.read_file(ROOT / "sample_layers" / "brackenford_readings.gpkg",
                          layer="readings")
    table.to_file(tmp_path / "r.gpkg", layer="readings", driver="GPKG")
    cfg_path = _config(tmp_path, tmp_path / "r.gpkg")
    assert main(["run", str(cfg_path), "-q"]) == 0
    table.iloc[:-1].to_file(tmp_path / "r.gpkg", layer="readings", driver="GPKG", mode="w")
    assert main(["run", str(cfg_path), "-q"]) == 0
    record = json.loads((tmp_path / "out" / "run.json").read_text())
    assert record["counts"]["assets_from_cache"] == record["counts"]["assets"]
    assert len(read_csv(tmp_path / "out" / "reconciliation.csv")) == len(table) - 1
    assert len(gpd.read_file(tmp_path / "out" / "screening.gpkg", layer="readings")) == \
        len(table) - 1
    assert any(d["path"] == str(tmp_path / "r.gpkg") for d in record["inputs"])


def test_unusable_readings_fail_check_and_run_before_computing(tmp_path, monkeypatch, capsys):
    # A readings layer without its voltage field: `corridor check` must not say the
    # config is usable (common practice: a check that passes what the run refuses is a
    # false all-clear), and the run must refuse it before computing anything.
    import corridor.backends as backends

    path = _config(tmp_path, ROOT / "sample_layers" / "brackenford_readings.gpkg",
                   fields='fields = { reading_id = "POST", asset_id = "ASSET",'
                          ' measured_at = "TIME", voltage_v = "NO_SUCH_FIELD" }')
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "brackenford_readings.gpkg:readings" in err and "voltage_v" in err
    assert "NO_SUCH_FIELD" in err

    def no_compute(*args, **kwargs):
        raise AssertionError("computed before the readings were checked")

    monkeypatch.setattr(backends, "compute_function", lambda *a, **k: no_compute)
    assert main(["run", str(path), "-q"]) == 2
    assert "NO_SUCH_FIELD" in capsys.readouterr().err
