"""Lines of known phase angle and unknown flow direction: the exact worst case (issue 15).

- :func:`corridor.steps.normal_signs.worst_over_signs` against brute-force enumeration
  of every sign vector (2ⁿ of them), for random phasors;
- a production run: two lines beside a pipeline, the second with its phase offset
  given (120°) and its flow direction unknown. The segment's normal-load EMF must be
  max(|E1 + E2|, |E1 − E2|), the brute force over the unknown sign, with E1 and E2 the
  EMFs of each line alone (superposition: the EMF is linear in the line currents,
  docs/methods.md §2.3), and no longer the bound |E1| + |E2| (docs/methods.md §18.5).
"""

import itertools

import geopandas as gpd
import numpy as np
import pytest
from shapely.geometry import LineString

from corridor.config import load_config
from corridor.pipeline import run_screening
from corridor.steps import asset_stages, run_stages
from corridor.steps.normal_signs import worst_over_signs
from tests.conftest import PROJECTED_CRS, X0_M, Y0_M


def test_worst_over_signs_matches_brute_force_enumeration():
    rng = np.random.default_rng(7)
    segs, emfs, fixed, want = [], [], [], []
    for s in range(400):
        n = int(rng.integers(0, 7))
        g = (rng.normal() + 1j * rng.normal()) * rng.choice([0.0, 1.0, 4.0])
        e = rng.normal(size=n) + 1j * rng.normal(size=n)
        if s % 5 == 0 and n > 1:  # collinear phasors: coinciding breakpoints
            e = e[0] * rng.normal(size=n)
        segs += [s] * n
        emfs += list(e)
        fixed.append(g)
        want.append(max(abs(g + np.dot(sv, e)) for sv in itertools.product((1, -1), repeat=n))
                    if n else abs(g))
    got = worst_over_signs(np.array(fixed), np.array(segs, int), np.array(emfs), 400)
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-12)


def _run(scenario, lines):
    rows = {"LINE_ID": [], "KV": [], "TOWER": [], "flow_direction": [], "phase_offset_deg": []}
    geoms = []
    for lid, y, direction, offset in lines:
        rows["LINE_ID"].append(lid)
        rows["KV"].append(138.0)
        rows["TOWER"].append(scenario.arrangement)
        rows["flow_direction"].append(direction)
        rows["phase_offset_deg"].append(offset)
        geoms.append(LineString([(X0_M, Y0_M + y), (X0_M + 10_000.0, Y0_M + y)]))
    frame = gpd.GeoDataFrame(rows, geometry=geoms, crs=PROJECTED_CRS)
    assets = gpd.GeoDataFrame({"AID": ["P1"], "KIND": ["pipeline"], "POST_OHM": [1.0]},
                              geometry=[LineString([(X0_M + 2_000.0, Y0_M),
                                                    (X0_M + 8_000.0, Y0_M)])],
                              crs=PROJECTED_CRS)
    cfg = scenario.build(lines=frame, assets=assets)
    cfg["run"].update({"limit_set": "ieee_na", "frequency_hz": 60.0, "crs": PROJECTED_CRS,
                       "default_soil_resistivity_ohm_m": 100.0})
    # no residual current: its angle is unknown on its own and would add |R| to both
    cfg["line_defaults"] = {"load_current_a": 500.0, "residual_current_pct": 0.0,
                            "fault_current_start_ka": 10.0, "fault_current_end_ka": 10.0,
                            "clearing_time_s": 0.5}
    run = run_screening(load_config(scenario.write_config(cfg)), asset_stages(), run_stages())
    return run.coupling.segment_emf_normal_v


@pytest.mark.parametrize("first_known", [True, False])
def test_known_angle_unknown_direction_is_the_worst_over_the_sign(scenario, tmp_path,
                                                                   first_known):
    def alone(name, lines):
        (tmp_path / name).mkdir()
        return _run(scenario.__class__(tmp_path / name), lines)

    e1 = alone("one", [("L1", 40.0, 1.0, 0.0)])
    e2 = alone("two", [("L2", -40.0, 1.0, 120.0)])
    both = _run(scenario, [("L1", 40.0, 1.0 if first_known else np.nan, 0.0),
                           ("L2", -40.0, np.nan, 120.0)])
    want = np.maximum(np.abs(e1 + e2), np.abs(e1 - e2))
    np.testing.assert_allclose(np.abs(both), want, rtol=1e-9)
    bound = np.abs(e1) + np.abs(e2)
    assert (np.abs(both) < 0.95 * bound).all()  # the sum bound of old was loose here
