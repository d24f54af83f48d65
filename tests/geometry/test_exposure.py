"""Exposure geometry against hand geometry (closed-form plane geometry)."""

import math

import numpy as np
import pytest
import shapely

from corridor.geometry.exposure import (
    LineEdges,
    build_exposures,
    equivalent_separation,
    find_pairs,
    split_sections,
)
from corridor.geometry.segments import split_lines


def expose(line_coords, asset_coords, distance_m=1000.0, seg_m=50.0, floor_m=1.0):
    lines = np.array([shapely.LineString(c) for c in line_coords])
    assets = np.array([shapely.LineString(c) for c in asset_coords])
    seg = split_lines(assets, seg_m)
    edges = LineEdges.from_geometries(lines)
    pairs = find_pairs(seg, edges, distance_m, floor_m, 10.0)
    sections = split_sections(pairs, floor_m, 3.0)
    eq = equivalent_separation(sections, len(pairs))
    return seg, pairs, sections, build_exposures(pairs, seg, eq)


def test_segments_bounded_and_chainage_continuous():
    # Hand geometry: a 120 m + 30 m polyline at 50 m maximum gives 3 x 40 m + 1 x 30 m.
    seg = split_lines(np.array([shapely.LineString([(0, 0), (120, 0), (120, 30)])]), 50.0)
    np.testing.assert_allclose(seg.length_m, [40, 40, 40, 30], rtol=1e-12)
    np.testing.assert_allclose(seg.chainage_m, [0, 40, 80, 120], rtol=1e-12)
    # consecutive segments share their vertices exactly
    assert np.array_equal(seg.x1_m[:-1], seg.x0_m[1:])


def test_parallel_at_100_m_over_5_km():
    # Hand geometry: a straight asset parallel at 100 m over 5 km gives 5,000 m of
    # parallel length at 100 m (issue acceptance: +-0.5 m).
    _, pairs, _, ex = expose([[(-2000, 0), (8000, 0)]], [[(0, 100), (5000, 100)]])
    assert len(ex) == 1
    assert ex.parallel_length_m[0] == pytest.approx(5000.0, abs=0.5)
    assert ex.min_separation_m[0] == pytest.approx(100.0, abs=0.5)
    assert ex.equivalent_separation_m[0] == pytest.approx(100.0, abs=0.5)
    assert np.all(pairs.exposure_class == 0)  # parallel
    assert np.all(pairs.offset_mid_m > 0)  # left of the line's direction


def test_crossing_at_30_degrees_projected_length():
    # Hand geometry: an asset of length L crossing at 30 deg projects L*cos(30 deg) on the line.
    length = 2000.0
    ang = math.radians(30.0)
    # shifted 10 m so the crossing falls inside a segment, not on a shared vertex
    a = (-0.5 * length * math.cos(ang) + 10.0, -0.5 * length * math.sin(ang))
    b = (0.5 * length * math.cos(ang) + 10.0, 0.5 * length * math.sin(ang))
    seg, pairs, sections, ex = expose([[(-5000, 0), (5000, 0)]], [[a, b]], seg_m=45.0)
    np.testing.assert_allclose(pairs.angle_deg, 30.0, atol=1e-9)
    assert ex.parallel_length_m.sum() == pytest.approx(length * math.cos(ang), rel=1e-12)
    assert sections.projected_length_m.sum() == pytest.approx(length * math.cos(ang), rel=1e-9)
    assert (pairs.exposure_class == 2).sum() == 1  # one segment crosses
    assert ex.min_separation_m[0] == pytest.approx(1.0)  # the floor at the crossing
    assert np.all(np.abs(sections.offset_m) >= 1.0)


def test_approach_900_to_50_m_split_by_factor_3():
    # ITU-T Directives practice: oblique sections whose end separations differ by at
    # most a factor of 3; the projections sum to the analytic projection (hand geometry).
    length = 6000.0
    seg, pairs, sections, ex = expose([[(-1000, 0), (8000, 0)]], [[(0, 900), (length, 50)]],
                                      seg_m=2000.0)
    ratio = np.maximum(sections.separation_start_m, sections.separation_end_m) / np.minimum(
        sections.separation_start_m, sections.separation_end_m)
    assert np.all(ratio <= 3.0 + 1e-9)
    assert len(sections) > len(pairs)  # the long segments were split
    np.testing.assert_allclose(np.abs(sections.offset_m),
                               np.sqrt(sections.separation_start_m * sections.separation_end_m))
    assert sections.projected_length_m.sum() == pytest.approx(length, rel=1e-9)
    assert ex.min_separation_m[0] == pytest.approx(50.0, rel=1e-9)
    # adjacent sections join: each ends where the next starts
    np.testing.assert_allclose(sections.separation_end_m[:-1], sections.separation_start_m[1:],
                               rtol=1e-9)


def test_beyond_line_end_projects_nothing():
    # Hand geometry: the part of an asset beyond the power line's end has no projection.
    _, pairs, _, ex = expose([[(0, 0), (1000, 0)]], [[(0, 50), (2000, 50)]])
    assert ex.parallel_length_m.sum() == pytest.approx(1000.0, rel=1e-9)


def test_out_of_reach_and_within_reach():
    _, pairs, _, ex = expose([[(0, 0), (1000, 0)]], [[(0, 1200), (1000, 1200)]])
    assert len(pairs) == 0 and len(ex) == 0
    _, pairs, _, ex = expose([[(0, 0), (1000, 0)]], [[(0, 999), (1000, 999)]])
    assert len(ex) == 1


def test_exposure_splits_into_runs():
    # An asset that leaves the screening zone and comes back forms two exposures.
    coords = [(0, 100), (2000, 100), (2000, 3000), (4000, 3000), (4000, 100), (6000, 100)]
    _, _, _, ex = expose([[(-100, 0), (7000, 0)]], [coords])
    assert len(ex) == 2
    assert ex.parallel_length_m[0] == pytest.approx(2000.0, abs=1e-6)
    assert ex.parallel_length_m[1] == pytest.approx(2000.0, abs=1e-6)


def test_determinism():
    args = ([[(0, 0), (3000, 500)], [(0, 300), (3000, 300)]],
            [[(0, 100), (3000, 150)], [(100, -400), (2900, 600)]])
    a = expose(*args)[3]
    b = expose(*args)[3]
    for name in ("asset", "line", "parallel_length_m", "equivalent_separation_m"):
        assert np.array_equal(getattr(a, name), getattr(b, name))
