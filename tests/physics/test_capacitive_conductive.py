"""Capacitive coupling, earth potential and internal impedances vs hand calculations."""

import math

import numpy as np
import pytest

from corridor.physics import capacitive as cap
from corridor.physics import conductive as cond
from corridor.physics import conductors
from corridor.physics.constants import EPS0_F_PER_M, MU0_H_PER_M


def test_phase_to_earth_voltages():
    # Source: balanced positive-sequence phasors U/√3·e^{jφ}, φ = 0, −120°, +120°
    # (Glover/Sarma/Overbye ch. 2); an earth wire carries no voltage.
    v = cap.phase_to_earth_voltages(400.0, ["A", "C", "B", ""])
    u = 400e3 / math.sqrt(3)
    np.testing.assert_allclose(v, [u, u * np.exp(2j * np.pi / 3), u * np.exp(-2j * np.pi / 3), 0],
                               rtol=1e-15, atol=1e-9)
    assert abs(v.sum()) < 1e-9 * u  # balanced


def test_asset_under_single_conductor_matches_image_method():
    # Source: method of images (Glover/Sarma/Overbye ch. 4): one conductor at height h,
    # radius r, voltage V carries q = 2πε0·V/ln(2h/r); an uncharged wire at (x, ha)
    # takes V_oc = q/(2πε0)·ln(D/d), D, d its distances to the image and the conductor.
    h, r, v = 15.0, 0.02, 230e3
    x = np.array([0.0, 5.0, 20.0, 60.0])
    ha = 2.0
    q = 2 * math.pi * EPS0_F_PER_M * v / math.log(2 * h / r)
    hand = q / (2 * math.pi * EPS0_F_PER_M) * np.log(np.hypot(x, h + ha) / np.hypot(x, h - ha))
    got = cap.capacitive_coupling([0.0], [h], [r], [v], x, ha, 0.005, 50.0)
    np.testing.assert_allclose(got.open_circuit_voltage_v, hand, rtol=1e-12)  # round-off only


def test_potential_coefficients_symmetric_and_match_formula():
    # Source: Maxwell potential coefficients with images, P_ij = ln(D/d)/(2πε0).
    p = cap.potential_coefficients([0.0, 6.0], [20.0, 24.0], [0.015, 0.01])
    k = 1 / (2 * math.pi * EPS0_F_PER_M)
    assert p[0, 0] == pytest.approx(k * math.log(40 / 0.015), rel=1e-14)
    assert p[0, 1] == pytest.approx(k * math.log(math.hypot(6, 44) / math.hypot(6, 4)), rel=1e-14)
    assert p[0, 1] == p[1, 0]


def test_capacitive_coupling_open_and_short_circuit():
    # Source: two-conductor capacitive divider (hand calculation): with line q = V/P_11,
    # uncharged wire V_oc = P_21 q; grounded wire q_w = −V_oc/(P_22 − P_21²/P_11),
    # I_sc = jω q_w.
    h1, r1, v = 20.0, 0.02, 100e3
    xa, ha, ra = np.array([10.0, 30.0]), np.array([5.0, 5.0]), 0.005
    res = cap.capacitive_coupling([0.0], [h1], [r1], [v], xa, ha, ra, 50.0)
    k = 1 / (2 * math.pi * EPS0_F_PER_M)
    p11 = k * math.log(2 * h1 / r1)
    p21 = k * np.log(np.hypot(xa, ha + h1) / np.hypot(xa, ha - h1))
    p22 = k * math.log(2 * 5.0 / ra)
    v_oc = p21 * v / p11
    i_sc = 1j * 2 * math.pi * 50 * (-v_oc / (p22 - p21**2 / p11))
    np.testing.assert_allclose(res.open_circuit_voltage_v, v_oc, rtol=1e-12)  # same algebra
    np.testing.assert_allclose(res.short_circuit_current_a_per_m, i_sc, rtol=1e-10)
    buried = cap.capacitive_coupling([0.0], [h1], [r1], [v], [10.0], [-1.0], ra, 50.0)
    assert buried.open_circuit_voltage_v[0] == 0  # earth screens buried assets


def test_capacitive_schur_complement_equals_full_solve():
    # Source: bordered-matrix algebra; compare with solving the (n+1)x(n+1) system directly.
    xc, hc, rc = np.array([-8.0, 0.0, 8.0, 0.0]), np.array([20.0, 20.0, 20.0, 28.0]), 0.02
    v = np.array([1.0, np.exp(-2j * np.pi / 3), np.exp(2j * np.pi / 3), 0.0]) * 230e3
    res = cap.capacitive_coupling(xc, hc, rc, v, [12.0], [2.0], 0.004, 50.0)
    p = cap.potential_coefficients(np.append(xc, 12.0), np.append(hc, 2.0), [rc] * 4 + [0.004])
    q = np.linalg.solve(p, np.append(v, 0.0))
    # rtol 1e-9: two algebraically identical solves.
    expected = 1j * 2 * np.pi * 50 * q[-1]
    assert res.short_circuit_current_a_per_m[0] == pytest.approx(expected, rel=1e-9)


def test_earth_potential_falls_as_one_over_r():
    # Source: hemisphere electrode in homogeneous soil, V = ρI/(2πr) (IEEE Std 80; Sunde).
    r = np.array([0.5, 1.0, 2.0, 10.0, 100.0])
    v = cond.earth_potential_hemisphere(1000.0, 100.0, r, 1.0)
    np.testing.assert_allclose(v[1:], 100.0 * 1000.0 / (2 * np.pi * r[1:]), rtol=1e-14)
    assert v[0] == v[1]  # inside the footing: electrode potential
    np.testing.assert_allclose(v[1:] * r[1:], v[1] * r[1], rtol=1e-14)  # 1/r law


def _dwight_horizontal_wire_ohm(rho, half_length_m, radius_m, s_m):
    """Dwight (1936), buried horizontal wire of length 2L at depth s/2 (from memory):
    R = ρ/(4πL)·[ln(4L/a) + ln(4L/s) − 2 + s/(2L) − s²/(16L²) + s⁴/(512L⁴)]."""
    big_l = half_length_m
    return rho / (4 * math.pi * big_l) * (
        math.log(4 * big_l / radius_m) + math.log(4 * big_l / s_m) - 2 + s_m / (2 * big_l)
        - s_m**2 / (16 * big_l**2) + s_m**4 / (512 * big_l**4))


@pytest.mark.parametrize(("resistance_ohm", "rho"), [(10.0, 300.0), (5.0, 300.0), (2.0, 50.0),
                                                     (20.0, 1000.0)])
def test_horizontal_electrode_meets_dwight(resistance_ohm, rho):
    # Source: H. B. Dwight, "Calculation of resistances to ground", AIEE Trans. 1936
    # (formula from memory). The production length, put back into Dwight's formula
    # (total length 2L = length, depth 0.8 m so s = 1.6 m, radius 5 mm), gives the
    # wanted resistance. Leading terms only (what production solves): to the solver's
    # round-off, rtol 1e-9; with Dwight's s/2L terms: within 1 % for these lengths.
    length = float(cond.horizontal_electrode_length_m(resistance_ohm, rho))
    depth, a = 0.8, 0.005
    leading = rho / (4 * math.pi * length / 2) * (
        math.log(2 * length / a) + math.log(2 * length / (2 * depth)) - 2)
    assert leading == pytest.approx(resistance_ohm, rel=1e-9)
    full = _dwight_horizontal_wire_ohm(rho, length / 2, a, 2 * depth)
    assert full == pytest.approx(resistance_ohm, rel=1e-2)
    assert length > 20.0


def test_pipe_skin_depth_and_internal_impedance():
    # Source: δ = √(2ρ/(ωμ0μr)), evaluated independently here; thick wall → thin-skin
    # Z = (1+j)/(πD)·√(ωμ0μrρ/2) (CIGRE TB 95, memory; Ramo/Whinnery/Van Duzer). For
    # μr = 300, ρ = 1.7e-7 Ω·m, 50 Hz: δ ≈ 1.69 mm.
    w = 2 * math.pi * 50
    delta = math.sqrt(2 * 1.7e-7 / (w * MU0_H_PER_M * 300))
    assert delta == pytest.approx(1.694e-3, rel=1e-3)
    assert float(conductors.skin_depth_m(1.7e-7, 300, 50)) == pytest.approx(delta, rel=1e-12)
    expected = (1 + 1j) / (math.pi * 0.5) * math.sqrt(w * MU0_H_PER_M * 300 * 1.7e-7 / 2)
    thick = complex(conductors.pipe_internal_impedance(0.5, 10e-3))
    assert thick == pytest.approx(expected, rel=1e-3)  # t ≈ 6δ: coth(qt) → 1
    very_thick = complex(conductors.pipe_internal_impedance(0.5, 0.2))
    assert very_thick == pytest.approx(expected, rel=1e-12)  # coth(qt) = 1 in floating point
    thin = complex(conductors.pipe_internal_impedance(0.5, 1e-5))
    # t ≪ δ: DC resistance ρ/(πDt); rel 1e-3 since the next term is O((t/δ)²).
    assert thin.real == pytest.approx(1.7e-7 / (math.pi * 0.5 * 1e-5), rel=1e-3)


def test_rail_equivalent_in_typical_range():
    # Source: single-rail 50 Hz impedance ≈ 0.1–0.2 Ω/km resistance (from memory).
    rail = conductors.rail_equivalent()
    assert 0.05e-3 < rail.internal_impedance_ohm_per_m.real < 0.2e-3
    assert rail.dc_resistance_ohm_per_m < rail.internal_impedance_ohm_per_m.real
    assert 0.05 < rail.equivalent_radius_m < 0.15
