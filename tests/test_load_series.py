"""Load time series (docs/methods.md §15): superposition against independent full solves.

The reference for every check is the production snapshot solver itself run
independently, step by step, with the step's circuit currents written into the
power-line layer (per-circuit load, flow direction and phase offset): the
series must equal it because node voltages are linear in the circuit current
phasors (superposition, a closed-form property of linear networks; Sunde,
Earth Conduction Effects in Transmission Systems, 1968, treats the asset as
a linear earth-return line).
"""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from corridor.compute import compute
from corridor.config import load_config
from corridor.io.layers import read_inputs
from corridor.pipeline import run_screening
from corridor.steps import asset_stages, run_stages, stage_assess, stage_couple, stage_respond

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "config" / "demo_series.toml"


def _config(tmp_path: Path, frame: pd.DataFrame, extra_run: str = "outage_scenario = false",
            section: str = "\nscreen_below = 0.0") -> Path:
    """demo_series.toml with absolute paths, another series file and extra settings.

    By default every segment is stepped (``screen_below = 0``): the checks compare exact
    values.
    """
    series = tmp_path / "loads.csv"
    frame.to_csv(series, index=False)
    text = DEMO.read_text(encoding="utf-8")
    text = text.replace('"../sample_layers/', f'"{ROOT / "sample_layers"}/')
    text = text.replace('"../out/demo_series"', f'"{tmp_path / "out"}"')
    text = text.replace("[run]\n", f"[run]\n{extra_run}\n")
    text = text.replace('path = "' + str(ROOT / "sample_layers") + '/brackenford_vale_loads.csv"',
                        f'path = "{series}"' + section)
    path = tmp_path / "series.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _rows(times, values):
    """Rows of a series: values[(line, circuit)] = list of (current, direction, offset)."""
    rows = []
    for (line, circuit), steps in values.items():
        for t, (i, d, o) in zip(times, steps, strict=True):
            rows.append({"timestamp": t, "line_id": line, "circuit": circuit, "current_a": i,
                         "flow_direction": d, "phase_offset_deg": o})
    return pd.DataFrame(rows)


def _times(n):
    return [f"2026-01-01T{h:02d}:00:00Z" for h in range(n)]


def _snapshot_v(cfg, inputs, loads) -> np.ndarray:
    """Independent full solve (couple, respond, assess) with per-circuit loads set on the layer."""
    sub = copy.copy(inputs)
    lines = inputs.lines.copy()
    for col in ("circuit_load_current_a", "circuit_flow_direction", "circuit_phase_offset_deg"):
        lines[col] = None
    for li, line in enumerate(lines["line_id"]):
        per = loads[line]
        lines.loc[li, "circuit_load_current_a"] = ";".join(repr(float(x[0])) for x in per)
        lines.loc[li, "circuit_flow_direction"] = ";".join(repr(float(x[1])) for x in per)
        lines.loc[li, "circuit_phase_offset_deg"] = ";".join(repr(float(x[2])) for x in per)
    sub.lines = lines
    run = compute(cfg, sub, {"couple": stage_couple, "respond": stage_respond,
                             "assess": stage_assess})
    return run.segment_table["v_normal_v"].to_numpy(float)


def _series_run(path):
    cfg = load_config(path)
    return cfg, run_screening(cfg, asset_stages(), run_stages())


STEPS = {  # (current A, direction, offset deg) per step, invented
    ("VPC-345-A", 1): [(900, 1, 0), (1200, 1, 0), (300, -1, 10), (1500, 1, 0), (0, 1, 0),
                       (800, 1, -20)],
    ("VPC-345-A", 2): [(900, 1, 0), (700, 1, 0), (1100, 1, 0), (1450, -1, 0), (600, 1, 0),
                       (800, -1, 5)],
    ("VPC-138-B", 1): [(600, 1, 0), (100, 1, 0), (650, 1, 30), (300, 1, 0), (900, 1, 0),
                       (450, -1, 0)],
}


@pytest.fixture(scope="module")
def varied(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("varied")
    cfg, run = _series_run(_config(tmp, _rows(_times(6), STEPS)))
    inputs = read_inputs(cfg)
    per_step = []
    for k in range(6):
        loads = {"VPC-345-A": [STEPS[("VPC-345-A", 1)][k], STEPS[("VPC-345-A", 2)][k]],
                 "VPC-138-B": [STEPS[("VPC-138-B", 1)][k]]}
        per_step.append(_snapshot_v(cfg, inputs, loads))
    return cfg, run, np.array(per_step)


def test_peak_equals_independent_full_solves(varied):
    """The series' peak per segment equals the largest of six independent full solves."""
    _, run, v = varied
    t = run.segment_table
    expect = v.max(axis=0)
    got = t["v_normal_peak_v"].to_numpy(float)
    assert np.allclose(got, expect, rtol=1e-9, atol=1e-12 * expect.max())
    # time of the worst instant: the step of that largest solve, where it is clear
    order = np.sort(v, axis=0)
    clear = (order[-1] - order[-2]) > 1e-6 * order[-1]
    when = np.array(_times(6))[v.argmax(axis=0)]
    assert (t["v_normal_peak_utc"].to_numpy(dtype=str)[clear] == when[clear]).all()
    assert clear.sum() > 100


def test_sampled_steps_by_the_production_evaluation(varied):
    """Each sampled step alone, through evaluate_series on the run's factors, equals its solve."""
    from corridor.series.evaluate import SeriesInputs, evaluate_series, unit_columns
    from corridor.series.stage import load_series_of
    from corridor.series.unit_emf import circuit_phasors, unit_emf
    from corridor.steps.couple import line_loading

    cfg, run, v = varied
    rs, lines = run.response, run.inputs.lines
    series = load_series_of(cfg, lines)
    ue = unit_emf(cfg, run.inputs, run.geometry)
    group = line_loading(cfg, lines, {n: a.n_circuits for n, a in cfg.arrangements.items()}).group
    line = ue.line_of_circuit[ue.circuit]
    slot = np.where(ue.part == 0, group[line], len(lines) + 1 + line)
    rhs, cc, cs = unit_columns(rs.model.feature, ue, slot, rs.model.emf_scale)
    n = len(rs.model.feature)
    for k in (0, 2, 5):
        ph = circuit_phasors(cfg, lines, series, slice(k, k + 1))
        res = evaluate_series(rs.system, rs.model.feature, rs.model.chain_of_segment, rhs, cc,
                              cs, SeriesInputs(np.full((n, 0), np.inf), np.zeros(n, bool),
                                               np.zeros(n, bool), ph, 1))
        assert np.allclose(res.peak_v, v[k], rtol=1e-9, atol=1e-12 * v[k].max()), k


def test_hours_above_count_the_solves_over_the_limit(varied):
    """Hours above the steady-state voltage limit = steps whose full solve reaches it × 1 h."""
    _, run, v = varied
    t = run.segment_table
    permitted = run.assessment["permitted"]["steady_state_voltage"]
    ok = np.isfinite(permitted)
    expect = (v >= permitted[None, :]).sum(axis=0)
    got = t["hours_above_steady_state_voltage_h"].to_numpy(float)
    assert np.array_equal(got[ok], expect[ok].astype(float))
    assert np.isnan(got[~ok]).all()
    assert expect.max() > 0 and expect.min() < 6  # the case is not trivial


def test_constant_series_reproduces_the_snapshot(tmp_path):
    """A series at the layer's loads every hour gives the snapshot's voltage and ratios."""
    const = {("VPC-345-A", 1): [(900, 1, 0)] * 30, ("VPC-345-A", 2): [(900, 1, 0)] * 30,
             ("VPC-138-B", 1): [(600, 1, 0)] * 30}
    frame = _rows([f"2026-01-{1 + h // 24:02d}T{h % 24:02d}:00:00Z" for h in range(30)], const)
    frame = frame.drop(columns=["flow_direction", "phase_offset_deg"])
    cfg, run = _series_run(_config(tmp_path, frame))
    t = run.segment_table
    snap = t["v_normal_v"].to_numpy(float)
    assert np.allclose(t["v_normal_peak_v"].to_numpy(float), snap, rtol=1e-12,
                       atol=1e-12 * snap.max())
    for name in ("steady_state_voltage", "steady_state_current", "ac_corrosion_voltage"):
        ratio = t[f"ratio_{name}"].to_numpy(float)
        hours = t[f"hours_above_{name}_h"].to_numpy(float)
        judged = np.isfinite(ratio)
        # steps counted where the snapshot ratio is clearly above or below 1
        sure = judged & (np.abs(ratio - 1.0) > 1e-9)
        assert np.array_equal(hours[sure], np.where(ratio[sure] >= 1.0, 30.0, 0.0)), name
    # the ISO 18086 mean of a constant series is the snapshot's density ratio
    iso = t["ratio_ac_corrosion_density"].to_numpy(float)
    mean = t["iso18086_mean_ratio"].to_numpy(float)
    pipe = np.isfinite(iso)
    assert pipe.any() and np.allclose(mean[pipe], iso[pipe], rtol=1e-9)
    assert np.isnan(mean[~pipe]).all()


def test_screen_bounds_the_unstepped_segments(varied, tmp_path):
    """With the default screen, a segment not stepped has an upper bound and 0 hours; the rest
    are the same as with every segment stepped."""
    _, exact, v = varied
    _, run = _series_run(_config(tmp_path, _rows(_times(6), STEPS), section=""))
    t, e = run.segment_table, exact.segment_table
    bounded = t["series_bounded"].to_numpy(bool)
    assert bounded.any() and (~bounded).any()
    peak, true_peak = t["v_normal_peak_v"].to_numpy(float), v.max(axis=0)
    assert (peak[bounded] >= true_peak[bounded] * (1 - 1e-12)).all()  # an upper bound
    assert np.allclose(peak[~bounded], true_peak[~bounded], rtol=1e-9)
    assert (t["v_normal_peak_utc"].to_numpy(dtype=str)[bounded] == "").all()
    for col in [c for c in e.columns if c.startswith("hours_above")]:
        assert np.array_equal(t[col].to_numpy(float), e[col].to_numpy(float),
                              equal_nan=True), col
    # below half of every threshold at every step: the bound is below half the smallest
    permitted = run.assessment["permitted"]["steady_state_voltage"]
    ok = bounded & np.isfinite(permitted)
    assert (peak[ok] < 0.5 * permitted[ok]).all()


def test_run_without_the_section_is_unchanged():
    """demo.toml has no [load_series]: no series column, record or table appears."""
    cfg = load_config(ROOT / "config" / "demo.toml")
    assert cfg.load_series is None and "load_series" not in cfg.resolved
    run = run_screening(cfg, asset_stages(), run_stages())
    cols = [c for c in run.segment_table.columns
            if c.startswith("hours_above") or c.startswith("v_normal_peak")
            or "mean" in c]
    assert cols == []
    assert "load_series" not in run.record
    assert not run.extra_tables
    assert "hours_above_limit_h" not in run.assets.columns


def test_outputs_and_report_of_the_demo_series(tmp_path):
    """The demo series config: run.json, curves CSV with the caution, layers and report."""
    import json

    import pyogrio

    from corridor.io.outputs import read_csv
    from corridor.runner import publish

    text = DEMO.read_text(encoding="utf-8").replace('"../', f'"{ROOT}/').replace(
        f'"{ROOT}/out/demo_series"', f'"{tmp_path / "out"}"')
    path = tmp_path / "demo_series.toml"
    path.write_text(text, encoding="utf-8")
    cfg = load_config(path)
    publish(cfg, cfg.output_dir, asset_stages(), run_stages())
    out = cfg.output_dir
    record = json.loads((out / "run.json").read_text(encoding="utf-8"))["load_series"]
    assert record["steps"] == 168 and record["step_h"] == 1.0 and record["problems"] == []
    assert "ISO 18086:2019 clause 7" in record["iso18086"]
    curves = read_csv(out / "load_series_curves.csv")
    header = (out / "load_series_curves.csv").read_text(encoding="utf-8").splitlines()[0]
    assert header.endswith('"caution"') and 0 < curves["asset_id"].nunique() <= 5
    for _, rows in curves.groupby("asset_id"):
        v = rows["v_normal_peak_v"].to_numpy(float)
        assert (np.diff(v) <= 1e-12).all()  # a duration curve falls
    assets = pyogrio.read_dataframe(out / "screening.gpkg", layer="assets")
    hazards = pyogrio.read_dataframe(out / "screening.gpkg", layer="hazards")
    assert "hours_above_limit_h" in assets.columns and "hours_above_limit_h" in hazards.columns
    # a pipeline of the demo is above its steady-state limit for part of the week
    pipe = assets[assets["asset_kind"] == "pipeline"]
    assert (pipe["hours_above_limit_h"] > 0).any()
    html = (out / "report.html").read_text(encoding="utf-8")
    assert 'id="load-series"' in html and "Hours above limit" in html
    assert html.count("<svg") >= 2  # overview map, profiles ... and the duration curve
    assert "Duration curve of the peak normal-load voltage" in html
