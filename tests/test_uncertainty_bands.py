"""Uncertainty bands (docs/methods.md §16): the ensemble against independent solves and
closed forms.

References:

- zero-width ranges: the ensemble must reproduce the deterministic run (the members are
  the run itself);
- the load and fault current factors are applied by scaling one solve; each is checked
  against an independent full solve with the currents changed at the source (the
  lines' load currents; the fault sources' EMF, which every fault current is linear in:
  Thevenin's theorem), to 1e-9 relative;
- the physics inputs (soil, coating, posts, grounds) against full solves with the
  changed layers;
- a closed-form case: a pipeline in a uniform parallel exposure (Sunde, Earth Conduction
  Effects in Transmission Systems, 1968: the induced voltage is odd about the middle of
  the exposure). Every normal-state quantity is linear in the load factor f, the others
  do not depend on it, so a segment's utilization is g(f) = max(f·N, F) with N the
  largest normal-state ratio and F the largest other ratio of the deterministic run.
  g is non-decreasing, so the q quantile of g(f) is g(Q(q)), with Q(q) = a + q(b − a)
  for f uniform on [a, b] and a·(b/a)^q for log-uniform (derived). A Latin hypercube
  puts exactly one member in each of N equal-probability strata (McKay, Beckman &
  Conover 1979, Technometrics 21(2)), so an interpolated empirical quantile lies
  within 2/N in probability of the analytic one: the bound used below (derived);
- Spearman's rho against ``scipy.stats.spearmanr`` (an independent implementation).
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import scipy.stats
from shapely.geometry import LineString

from corridor.compute import compute, finalize
from corridor.config import load_config
from corridor.errors import ConfigError
from corridor.io.layers import read_inputs
from corridor.steps import asset_stages, run_stages
from corridor.uncertainty.ensemble import draw
from corridor.uncertainty.settings import Bands, Range, parse_uncertainty
from corridor.uncertainty.tables import rank_correlation

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "config" / "demo.toml"
RTOL = 1e-9


@pytest.fixture(scope="module")
def demo():
    cfg = load_config(DEMO)
    inputs = read_inputs(cfg)
    return cfg, inputs


def _bands(*ranges: Range, members: int = 4, seed: int = 7) -> Bands:
    return Bands(members, seed, tuple(ranges))


def _fixed(name: str, value: float) -> Range:
    return Range(name, value, value)


def _ensemble(cfg, inputs, bands: Bands):
    return compute(dataclasses.replace(cfg, uncertainty=bands), inputs, asset_stages())


def _utilization(cfg, inputs) -> np.ndarray:
    return compute(cfg, inputs, asset_stages()).segment_table["utilization"].to_numpy(float)


def _copy_inputs(inputs):
    import copy

    out = copy.copy(inputs)
    out.lines = inputs.lines.copy()
    out.assets = inputs.assets.copy()
    out.soil = None if inputs.soil is None else inputs.soil.copy()
    out.grounds = None if inputs.grounds is None else inputs.grounds.copy()
    return out


def _band(run, q: str) -> np.ndarray:
    return run.segment_table[f"utilization_{q}"].to_numpy(float)


# -- zero width: the deterministic run ------------------------------------------------

@pytest.mark.parametrize("with_soil", [False, True])
def test_zero_width_ranges_give_the_deterministic_run(demo, with_soil):
    cfg, inputs = demo
    ranges = [_fixed(n, 1.0) for n in ("soil_resistivity_factor", "coating_resistance_factor",
                                       "post_resistance_factor", "ground_resistance_factor",
                                       "load_current_factor", "fault_current_factor")]
    if with_soil:  # each polygon at its own value: the members are solved again
        rho = inputs.soil["soil_resistivity_ohm_m"].to_numpy(float)
        ranges += [_fixed(f"soil:{fid}", float(r))
                   for fid, r in zip(inputs.soil["feature_id"], rho, strict=True)]
    run = _ensemble(cfg, inputs, _bands(*ranges))
    util = run.segment_table["utilization"].to_numpy(float)
    for q in ("p05", "p50", "p95"):
        np.testing.assert_array_equal(_band(run, q), util)
    t = run.segment_table
    np.testing.assert_array_equal(t["share_exceeding"].to_numpy(float), (util >= 1.0) * 1.0)
    assert t["verdict_robust"].all()
    np.testing.assert_array_equal(t["band_verdict"] == "exceeds", util >= 1.0)
    assert (t["band_driver"] == "").all()  # nothing varies: no deciding input
    # the deterministic columns are those of a run without the section
    np.testing.assert_array_equal(util, _utilization(cfg, inputs))


# -- current factors: scaling one solve == full solves -------------------------------------

def test_load_factor_equals_full_solve(demo):
    cfg, inputs = demo
    run = _ensemble(cfg, inputs, _bands(_fixed("load_current_factor", 1.3)))
    ref_inputs = _copy_inputs(inputs)
    assert (ref_inputs.lines["circuit_load_current_a"].fillna("") == "").all()
    ref_inputs.lines["load_current_a"] = inputs.lines["load_current_a"] * 1.3
    ref = _utilization(cfg, ref_inputs)
    np.testing.assert_allclose(_band(run, "p50"), ref, rtol=RTOL, atol=1e-12)
    assert not np.allclose(ref, run.segment_table["utilization"].to_numpy(float))


def _scaled_fault_sources(monkeypatch, factor: float) -> None:
    """Every fault current times ``factor``: the sources' EMF scaled (Thevenin)."""
    from corridor.steps import faultscan

    original = faultscan.faults.slg_fault_currents

    def scaled(*args):
        *rest, phase_voltage_v = args
        return original(*rest, np.asarray(phase_voltage_v, float) * factor)

    monkeypatch.setattr(faultscan.faults, "slg_fault_currents", scaled)


@pytest.mark.parametrize("factor", [0.7, 1.25])
def test_fixed_fault_factor_equals_full_solve(demo, monkeypatch, factor):
    cfg, inputs = demo
    run = _ensemble(cfg, inputs, _bands(_fixed("fault_current_factor", factor)))
    _scaled_fault_sources(monkeypatch, factor)
    ref = _utilization(cfg, inputs)
    np.testing.assert_allclose(_band(run, "p50"), ref, rtol=RTOL, atol=1e-12)


def test_fault_factor_members_equal_full_solves(demo, monkeypatch):
    # A range: the tower zones are found for the largest factor and each member's tower
    # potential switched on where f·V reaches the threshold (docs/methods.md §16).
    cfg, inputs = demo
    bands = _bands(Range("fault_current_factor", 0.5, 1.6), members=3, seed=11)
    util = _member_utilization(cfg, inputs, bands)
    factors = draw(bands).column("fault_current_factor")
    for m, f in enumerate(factors):
        with monkeypatch.context() as mp:
            _scaled_fault_sources(mp, float(f))
            ref = _utilization(cfg, inputs)
        np.testing.assert_allclose(util[:, m], ref, rtol=RTOL, atol=1e-12)


def _member_utilization(cfg, inputs, bands):
    """Each member's utilization, from the production ensemble function."""
    from corridor.uncertainty.ensemble import ensemble_utilization

    run = compute(dataclasses.replace(cfg, uncertainty=None), inputs, asset_stages())
    run.config = dataclasses.replace(cfg, uncertainty=bands)
    return ensemble_utilization(run, bands, draw(bands))


# -- physics inputs: one member == a full solve with the layers changed ----------------------

def test_soil_polygon_value_equals_full_solve(demo):
    cfg, inputs = demo
    run = _ensemble(cfg, inputs, _bands(_fixed("soil:fid:2", 400.0)))
    ref_inputs = _copy_inputs(inputs)
    col = ref_inputs.soil["soil_resistivity_ohm_m"].to_numpy(float).copy()
    col[1] = 400.0  # the second polygon: GeoPackage FID 2
    ref_inputs.soil["soil_resistivity_ohm_m"] = col
    ref = _utilization(cfg, ref_inputs)
    np.testing.assert_allclose(_band(run, "p50"), ref, rtol=RTOL, atol=1e-12)
    assert not np.allclose(ref, run.segment_table["utilization"].to_numpy(float))


def test_soil_factor_equals_full_solve(demo):
    cfg, inputs = demo
    run = _ensemble(cfg, inputs, _bands(_fixed("soil_resistivity_factor", 2.0)))
    ref_inputs = _copy_inputs(inputs)
    ref_inputs.soil["soil_resistivity_ohm_m"] = inputs.soil["soil_resistivity_ohm_m"] * 2.0
    ref_cfg = cfg.with_run(default_soil_resistivity_ohm_m=2.0
                           * cfg.run.default_soil_resistivity_ohm_m)
    ref = _utilization(ref_cfg, ref_inputs)
    np.testing.assert_allclose(_band(run, "p50"), ref, rtol=RTOL, atol=1e-12)


def test_coating_post_ground_factors_equal_full_solve(demo):
    cfg, inputs = demo
    run = _ensemble(cfg, inputs, _bands(_fixed("coating_resistance_factor", 3.0),
                                        _fixed("post_resistance_factor", 0.5),
                                        _fixed("ground_resistance_factor", 2.0)))
    ref_inputs = _copy_inputs(inputs)
    a = ref_inputs.assets
    a["coating_resistance_ohm_m2"] = a["coating_resistance_ohm_m2"].astype(float) * 3.0
    a["post_resistance_ohm"] = a["post_resistance_ohm"].astype(float) * 0.5
    a["termination_resistance_ohm"] = a["termination_resistance_ohm"].astype(float) * 2.0
    ref_inputs.grounds["resistance_ohm"] = ref_inputs.grounds["resistance_ohm"] * 2.0
    ref = _utilization(cfg, ref_inputs)
    np.testing.assert_allclose(_band(run, "p50"), ref, rtol=RTOL, atol=1e-12)
    assert not np.allclose(ref, run.segment_table["utilization"].to_numpy(float))


# -- closed form: a uniform exposure, utilization linear in the load factor -----------------

X0, Y0 = 515_000.0, 5_216_000.0  # the shared scenarios' origin (EPSG:32633), invented


@pytest.fixture
def exposure(scenario):
    """A 3 km pipeline 80 m from and parallel to a 5 km line, open ends, 1 A fault current."""
    line = gpd.GeoDataFrame({"LINE_ID": ["L1"], "KV": [220.0], "TOWER": [scenario.arrangement]},
                            geometry=[LineString([(X0, Y0), (X0 + 5000.0, Y0)])],
                            crs="EPSG:32633")
    pipe = gpd.GeoDataFrame({"AID": ["P1"], "KIND": ["pipeline"], "POST_OHM": [np.nan]},
                            geometry=[LineString([(X0 + 1000.0, Y0 + 80.0),
                                                  (X0 + 4000.0, Y0 + 80.0)])],
                            crs="EPSG:32633")
    cfg = scenario.build(lines=line, assets=pipe)
    cfg["line_defaults"] = {"fault_current_start_ka": 0.001, "fault_current_end_ka": 0.001,
                            "load_current_a": 500.0}
    cfg["defaults"] = {"pipeline": {"start_termination": "open", "end_termination": "open"}}
    return scenario, cfg


def _bands_run(scenario, cfg, section: dict):
    cfg = scenario.mutate(cfg)
    cfg["uncertainty"] = section
    loaded = load_config(scenario.write_config(cfg))
    return finalize(compute(loaded, read_inputs(loaded), asset_stages()), run_stages())


@pytest.mark.parametrize("distribution", ["uniform", "log-uniform"])
def test_uniform_exposure_percentiles_match_the_analytic_distribution(exposure, distribution):
    scenario, cfg = exposure
    a, b, n = 0.6, 1.5, 64
    run = _bands_run(scenario, cfg, {
        "members": n, "seed": 3,
        "load_current_factor": {"low": a, "high": b, "distribution": distribution}})
    t = run.segment_table.sort_values("chainage_m")
    u0 = t["utilization"].to_numpy(float)
    v = t["v_normal_v"].to_numpy(float)
    # Sunde: odd about the middle of the exposure, largest at its ends
    assert v[0] == pytest.approx(v[-1], rel=1e-3) and v.argmax() in (0, len(v) - 1)
    assert v[len(v) // 2] < 0.1 * v.max()
    normal = [f"ratio_{c.name}" for c in run.limit_set.criteria
              if c.case == "normal" and f"ratio_{c.name}" in t]
    other = [f"ratio_{c.name}" for c in run.limit_set.criteria
             if c.case != "normal" and f"ratio_{c.name}" in t]
    big_n = t[normal].fillna(0.0).max(axis=1).to_numpy(float)
    big_f = t[other].fillna(0.0).max(axis=1).to_numpy(float) if other else 0.0 * u0
    np.testing.assert_allclose(u0, np.maximum(big_n, big_f), rtol=1e-12)
    assert (big_n > 0).all()

    def quantile(q):
        return a + q * (b - a) if distribution == "uniform" else a * (b / a) ** q

    slope = (b - a) if distribution == "uniform" else b * np.log(b / a)  # max dQ/dq
    for q, name in ((0.05, "p05"), (0.5, "p50"), (0.95, "p95")):
        got = t[f"utilization_{name}"].to_numpy(float)
        np.testing.assert_allclose(got, np.maximum(big_n * quantile(q), big_f), rtol=0,
                                   atol=float(np.max(big_n)) * slope * 2.0 / n + 1e-12)
    # the deciding input: utilization increases with the load factor alone, so rho = 1
    row = run.assets.set_index("asset_id").loc["P1"]
    assert row["band_driver"] == "load_current_factor"
    assert row["band_driver_rho"] == pytest.approx(1.0, abs=1e-12)


def test_bands_reproducible_with_the_seed(exposure):
    scenario, cfg = exposure
    section = {"members": 8, "seed": 42,
               "load_current_factor": {"low": 0.5, "high": 2.0},
               "coating_resistance_factor": {"low": 0.3, "high": 3.0,
                                             "distribution": "log-uniform"}}
    first = _bands_run(scenario, cfg, section).segment_table
    second = _bands_run(scenario, cfg, section).segment_table
    other = _bands_run(scenario, cfg, {**section, "seed": 43}).segment_table
    for col in ("utilization_p05", "utilization_p50", "utilization_p95"):
        np.testing.assert_array_equal(first[col].to_numpy(), second[col].to_numpy())
        assert not np.array_equal(first[col].to_numpy(), other[col].to_numpy())


def test_latin_hypercube_strata():
    # McKay et al. 1979: each of the N equal-probability strata of every input holds
    # exactly one member.
    bands = _bands(Range("load_current_factor", 0.5, 1.5),
                   Range("soil:#0", 10.0, 1000.0, "log-uniform"), members=16, seed=5)
    s = draw(bands)
    u_load = (s.column("load_current_factor") - 0.5) / 1.0
    u_soil = np.log(s.column("soil:#0") / 10.0) / np.log(100.0)
    for u in (u_load, u_soil):
        assert sorted(np.floor(u * 16).astype(int)) == list(range(16))
    np.testing.assert_array_equal(draw(bands).values, s.values)


def test_rank_correlation_is_spearman():
    rng = np.random.default_rng(0)
    x = rng.normal(size=(20, 3))
    x[:, 2] = np.round(x[:, 2])  # ties take average ranks
    y = np.vstack([x[:, 0] ** 3 + 0.1 * rng.normal(size=20), rng.normal(size=20),
                   np.round(x[:, 1], 0)])
    rho = rank_correlation(x, y)
    for i in range(3):
        for j in range(3):
            ref = scipy.stats.spearmanr(x[:, j], y[i]).statistic
            assert rho[i, j] == pytest.approx(ref, abs=1e-12)


# -- config ---------------------------------------------------------------------------------

@pytest.mark.parametrize(("section", "words"), [
    ({"load_current_factor": {"low": 1.2, "high": 0.8}}, ("load_current_factor", "above")),
    ({"load_current_factor": {"low": 0.8, "high": 1.2, "distribution": "normal"}},
     ("load_current_factor.distribution", "normal")),
    ({"load_current_factor": {"low": -1.0, "high": 1.2}}, ("load_current_factor.low",)),
    ({"load_current_factor": {"low": 0.8}}, ("load_current_factor.high", "required")),
    ({"load_factor": {"low": 0.8, "high": 1.2}}, ("uncertainty.load_factor", "unknown key")),
    ({"members": 0, "load_current_factor": {"low": 0.8, "high": 1.2}}, ("members",)),
    ({"seed": "x", "load_current_factor": {"low": 0.8, "high": 1.2}}, ("seed",)),
    ({"members": 8}, ("no range given",)),
    ({"soil_resistivity_ohm_m": {"#0": {"low": 10.0, "high": 1e7}}}, ("'#0'", "1e5")),
])
def test_bad_sections_name_file_and_key(section, words):
    bands, problems = parse_uncertainty(section, "run.toml")
    assert bands is None
    assert any(all(w in p for w in words) and p.startswith("run.toml: uncertainty")
               for p in problems), problems


def test_bad_section_exits_2(exposure, cli, capsys):
    scenario, cfg = exposure
    cfg = scenario.mutate(cfg)
    cfg["uncertainty"] = {"fault_current_factor": {"low": 2.0, "high": 1.0}}
    path = scenario.write_config(cfg)
    with pytest.raises(ConfigError):
        load_config(path)
    assert cli(["run", str(path), "--out", str(scenario.root / "o")]) == 2
    assert "run.toml: uncertainty.fault_current_factor" in capsys.readouterr().err


def test_polygon_ranges_need_a_soil_layer_and_a_known_polygon(exposure, cli, capsys):
    from tests.conftest import toml_text

    scenario, cfg = exposure
    cfg = scenario.mutate(cfg)

    def with_section(polygon_id: str) -> Path:  # a quoted key: '#' opens a TOML comment
        return scenario.write_config(toml_text(cfg) + "\n[uncertainty.soil_resistivity_ohm_m]\n"
                                     f'"{polygon_id}" = {{ low = 10.0, high = 100.0 }}\n')

    with pytest.raises(ConfigError, match="need a soil layer"):
        load_config(with_section("fid:1"))
    # with a soil layer, an id that names none of its polygons
    soil = gpd.GeoDataFrame({"RHO": [100.0]}, geometry=[LineString(
        [(X0 - 100, Y0 - 500), (X0 + 6000, Y0 - 500), (X0 + 6000, Y0 + 500)]).convex_hull],
        crs="EPSG:32633")
    path = scenario.write_layer(soil, "soil")
    cfg["layers"]["soil"] = {"path": path.name, "layer": "soil",
                             "fields": {"soil_resistivity_ohm_m": "RHO"}}
    config_path = with_section("fid:7")
    assert cli(["run", str(config_path), "--out", str(scenario.root / "o")]) == 2
    err = capsys.readouterr().err
    # the message lists the polygons by their GeoPackage FIDs (from 1)
    assert "uncertainty.soil_resistivity_ohm_m.'fid:7'" in err and "fid:1" in err
    # `corridor check` finds it too, without computing (it used to say "usable")
    assert cli(["check", str(config_path)]) == 2
    out, err = capsys.readouterr()
    assert "uncertainty.soil_resistivity_ohm_m.'fid:7'" in err
    assert "config and layers are usable" not in out


def test_run_without_section_has_no_band_columns(exposure):
    scenario, cfg = exposure
    loaded = load_config(scenario.write_config(cfg))
    assert loaded.uncertainty is None and "uncertainty" not in loaded.resolved
    run = finalize(compute(loaded, read_inputs(loaded), asset_stages()), run_stages())
    assert not any(c.startswith(("utilization_p", "band_")) for c in run.segment_table)
    assert "bands" not in run.extra_tables and "uncertainty" not in run.record


# -- the demo with bands, end to end ----------------------------------------------------------

@pytest.fixture(scope="module")
def demo_bands_out(tmp_path_factory):
    from corridor.cli import main

    out = tmp_path_factory.mktemp("demo_bands") / "out"
    assert main(["run", str(ROOT / "config" / "demo_bands.toml"), "--out", str(out),
                 "-q"]) == 0
    return out


def test_demo_bands_outputs(demo_bands_out):
    out = demo_bands_out
    seg = gpd.read_file(out / "screening.gpkg", layer="segments")
    haz = gpd.read_file(out / "screening.gpkg", layer="hazards")
    assets = gpd.read_file(out / "screening.gpkg", layer="assets")
    for frame in (seg, haz):
        for col in ("utilization_p05", "utilization_p50", "utilization_p95", "verdict_robust",
                    "band_verdict"):
            assert col in frame
        p05, p50, p95 = (frame[f"utilization_{q}"].to_numpy(float)
                         for q in ("p05", "p50", "p95"))
        assert (p05 <= p50).all() and (p50 <= p95).all()
    for col in ("worst_utilization_p95", "band_driver", "band_verdict"):
        assert col in assets
    record = json.loads((out / "run.json").read_text(encoding="utf-8"))["uncertainty"]
    assert record["members"] == 32 and "soil:fid:3" in record["ranges"]
    report = (out / "report.html").read_text(encoding="utf-8")
    assert 'id="bands"' in report and "would settle" in report
    # the uncertain segments name what decides them
    uncertain = seg[seg["band_verdict"] == "uncertain"]
    assert len(uncertain) and (uncertain["band_driver"] != "").all()


def test_partitions_and_cache_give_the_same_bands(demo, tmp_path):
    # Per-asset results do not depend on the other assets (corridor.compute.subset_inputs):
    # the bands of a run in partitions, and of a rerun from the cache, are the full run's.
    from corridor.pipeline import screen

    cfg, _ = demo
    bands = _bands(Range("load_current_factor", 0.8, 1.2),
                   Range("post_resistance_factor", 0.5, 2.0, "log-uniform"), members=4)
    cfg = dataclasses.replace(cfg, uncertainty=bands)
    whole = screen(cfg, tmp_path / "a", asset_stages(), run_stages())
    runs = [screen(cfg.with_run(threads=2, partitions=3), tmp_path / "b", asset_stages(),
                   run_stages())]
    cached = cfg.with_run(cache_dir=str(tmp_path / "cache"))
    runs += [screen(cached, tmp_path / "c", asset_stages(), run_stages()) for _ in range(2)]
    assert runs[-1].counts["assets_from_cache"] == len(whole.assets)
    for run in runs:
        for col in ("utilization_p05", "utilization_p95", "band_verdict", "band_driver"):
            np.testing.assert_array_equal(run.segment_table[col].to_numpy(),
                                          whole.segment_table[col].to_numpy())
        cols = ["asset_id", "worst_utilization_p95", "band_driver", "band_driver_rho"]
        assert run.assets[cols].equals(whole.assets[cols])
        assert "utilization_p95" in run.hazards
