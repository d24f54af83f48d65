"""Capacitive coupling, earth potential and internal impedances vs hand calculations."""

import math

import numpy as np
import pytest

from corridor.physics import capacitive as cap
from corridor.physics import conductive as cond
from corridor.physics import conductors
from corridor.physics.constants import EPS0_F_PER_M, MU0_H_PER_M


def test_single_conductor_ground_field_matches_image_method():
    # Source: method of images (any HV textbook, e.g. Glover/Sarma/Overbye ch. 4):
    # q = 2πε0·V/ln(2h/r), E = q/(2πε0)·2h/(h² + x²).
    h, r, v = 15.0, 0.02, 230e3
    x = np.array([0.0, 5.0, 20.0, 60.0])
    q = 2 * math.pi * EPS0_F_PER_M * v / math.log(2 * h / r)
    hand = q / (2 * math.pi * EPS0_F_PER_M) * 2 * h / (h * h + x * x)
    got = cap.ground_level_electric_field([0.0], [h], [r], [v], x)
    np.testing.assert_allclose(got, hand, rtol=1e-12)  # same closed form, round-off only


def test_ground_field_under_400kv_line_is_several_kv_per_m():
    # Source: typical maximum ground-level field under 345–400 kV lines at minimum clearance,
    # several kV/m (≈3–10 kV/m, from memory). Flat 400 kV line, 10 m phase spacing, 15 m
    # clearance, quad bundle equivalent radius 0.21 m.
    v = 400e3 / math.sqrt(3) * np.exp(1j * np.array([0.0, -2 * np.pi / 3, 2 * np.pi / 3]))
    x = np.linspace(-40, 40, 161)
    e = cap.ground_level_electric_field([-10.0, 0.0, 10.0], [15.0] * 3, [0.21] * 3, v, x)
    e_max_kv_per_m = np.max(np.abs(e)) / 1e3
    assert 3.0 < e_max_kv_per_m < 12.0
    assert np.abs(e[0]) < 0.2 * np.max(np.abs(e))  # falls off 40 m out


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


def test_ladder_impedance_is_fixed_point_of_ladder():
    # Source: infinite ladder property: Z∞ = Zs + Rt·Z∞/(Rt + Z∞) (Endrenyi 1967, memory).
    zs, rt = 0.4 + 0.8j, 10.0
    zinf = complex(cond.ladder_impedance_ohm(zs, rt))
    assert zinf == pytest.approx(zs + rt * zinf / (rt + zinf), rel=1e-12)
    share = abs(complex(cond.tower_current_share(zs, rt)))
    assert 0.0 < share < 0.5  # METHODS.md §4: typically 5–30 % (from memory)


def test_pipe_skin_depth_and_internal_impedance():
    # Source: δ = √(2ρ/(ωμ0μr)), evaluated independently here; thin-skin
    # Z = (1+j)/(πD)·√(ωμ0μrρ/2) (CIGRE TB 95 style, memory). For μr = 300,
    # ρ = 1.7e-7 Ω·m, 50 Hz the formula gives δ ≈ 1.69 mm (the brief's "≈0.85 mm" does not
    # follow from these values).
    w = 2 * math.pi * 50
    delta = math.sqrt(2 * 1.7e-7 / (w * MU0_H_PER_M * 300))
    assert delta == pytest.approx(1.694e-3, rel=1e-3)
    assert float(conductors.skin_depth_m(1.7e-7, 300, 50)) == pytest.approx(delta, rel=1e-12)
    z = complex(conductors.pipe_internal_impedance(0.5))
    expected = (1 + 1j) / (math.pi * 0.5) * math.sqrt(w * MU0_H_PER_M * 300 * 1.7e-7 / 2)
    assert z == pytest.approx(expected, rel=1e-12)
    thick = complex(conductors.pipe_internal_impedance(0.5, wall_thickness_m=10e-3))
    assert thick == pytest.approx(expected, rel=1e-3)  # t ≈ 6δ: coth(qt) → 1
    thin = complex(conductors.pipe_internal_impedance(0.5, wall_thickness_m=1e-5))
    # t ≪ δ: DC resistance ρ/(πDt); rel 1e-3 since the next term is O((t/δ)²).
    assert thin.real == pytest.approx(1.7e-7 / (math.pi * 0.5 * 1e-5), rel=1e-3)


def test_round_conductor_internal_reactance_solid_wire():
    # Source: GMR of a solid round conductor r·e^{−1/4} → X_int = ωμ0/(8π) (Glover ch. 4).
    z = complex(conductors.round_conductor_internal_impedance(1e-4, frequency_hz=50))
    assert z.imag == pytest.approx(2 * math.pi * 50 * MU0_H_PER_M / (8 * math.pi), rel=1e-12)
    z2 = complex(conductors.round_conductor_internal_impedance(1e-4, 0.01, 0.01 * math.exp(-0.25)))
    assert z2 == pytest.approx(z, rel=1e-12)


def test_rail_equivalent_in_typical_range():
    # Source: single-rail 50 Hz impedance ≈ 0.1–0.2 Ω/km resistance (from memory).
    rail = conductors.rail_equivalent()
    assert 0.05e-3 < rail.internal_impedance_ohm_per_m.real < 0.2e-3
    assert rail.dc_resistance_ohm_per_m < rail.internal_impedance_ohm_per_m.real
    assert 0.05 < rail.equivalent_radius_m < 0.15
