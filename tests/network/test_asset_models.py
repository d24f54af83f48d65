"""Checks of the per-kind line constants against published forms and trade ranges."""

import math

import mpmath
import numpy as np
import pytest

from corridor.errors import InputError
from corridor.network import asset_models as am
from corridor.network.response import (
    characteristic_impedance,
    matched_termination_admittance,
    propagation_constant,
)
from corridor.physics.constants import EPS0_F_PER_M, MU0_H_PER_M


@pytest.mark.parametrize(
    ("frequency_hz", "r_ohm_per_km", "x_per_decade_ohm_per_km"),
    [
        # Gönen, Electric Power Transmission System Engineering, as quoted in
        # METHODS.md §1: 0.0493 + j0.1447·log10(De/d) Ω/km at 50 Hz,
        # 0.0592 + j0.1736·log10(De/d) Ω/km at 60 Hz.
        (50.0, 0.0493, 0.1447),
        (60.0, 0.0592, 0.1736),
    ],
)
def test_low_frequency_carson_matches_published_constants(frequency_hz, r_ohm_per_km,
                                                          x_per_decade_ohm_per_km):
    rho_ohm_m, radius_m = 100.0, 0.01
    z = am.earth_return_self_impedance_low_frequency(radius_m, rho_ohm_m, frequency_hz) * 1000
    de_m = 658.9 * math.sqrt(rho_ohm_m / frequency_hz)
    # rtol 1e-3: the published constants carry 3–4 significant digits.
    np.testing.assert_allclose(z.real, r_ohm_per_km, rtol=1e-3)
    np.testing.assert_allclose(z.imag, x_per_decade_ohm_per_km * math.log10(de_m / radius_m),
                               rtol=1e-3)


def test_wire_internal_impedance_against_mpmath_bessel():
    # Reference: the round-wire formula Z = kρ/(2πr)·I0(kr)/I1(kr) evaluated
    # with mpmath's Bessel functions (independent library); rtol 1e-12.
    radius_m, f_hz, rho, mu_r = 1.25e-3, 50.0, 1.7e-7, 100.0
    got = am.wire_internal_impedance(radius_m, f_hz, rho, mu_r)
    k = mpmath.sqrt(1j * 2 * mpmath.pi * f_hz * MU0_H_PER_M * mu_r / rho)
    ref = k * rho / (2 * mpmath.pi * radius_m) * mpmath.besseli(0, k * radius_m) / mpmath.besseli(
        1, k * radius_m)
    np.testing.assert_allclose(got, complex(ref), rtol=1e-12)


def test_wire_internal_impedance_limits():
    # Low frequency → DC resistance ρ/(πr²) (Ohm's law); rtol 1e-6 since the
    # first correction is (kr)⁴/192-sized.
    r_m, rho = 1.25e-3, 1.7e-7
    z_dc = am.wire_internal_impedance(r_m, 1e-3, rho, 100.0)
    np.testing.assert_allclose(z_dc.real, rho / (math.pi * r_m**2), rtol=1e-6)
    # Deep skin effect → surface impedance (1 + j)/(2πr)·√(ωμρ/2), which is the
    # pipe's thin-skin form with D = 2r (METHODS.md §1). r/δ ≈ 150 here, the
    # next term is ~δ/(4r) ≈ 0.2 %, hence rtol 5e-3.
    r_big_m = 0.25
    z_skin = am.wire_internal_impedance(r_big_m, 50.0, rho, 300.0)
    np.testing.assert_allclose(z_skin, am.pipe_internal_impedance(2 * r_big_m, 50.0, rho, 300.0),
                               rtol=5e-3)


def test_pipe_internal_impedance_skin_depth_form():
    # Deep skin effect: the current flows in a layer δ = √(2ρ/(ωμ)) thick, so
    # R = X = ρ/(πD·δ) (surface impedance (1 + j)ρ/δ over the circumference
    # πD; any electromagnetics text); rtol 1e-12 (same physics, other algebra).
    d_m, f_hz, rho, mu_r = 0.5, 50.0, 1.7e-7, 300.0
    delta_m = math.sqrt(2 * rho / (2 * math.pi * f_hz * MU0_H_PER_M * mu_r))
    z = am.pipe_internal_impedance(d_m, f_hz, rho, mu_r)
    np.testing.assert_allclose([z.real, z.imag], [rho / (math.pi * d_m * delta_m)] * 2, rtol=1e-12)
    # Skin depth of pipe steel at 50 Hz ≈ 1.7 mm (METHODS.md §1 premise, from memory).
    assert 1.0e-3 < delta_m < 2.5e-3


def test_coating_capacitance_thin_limit():
    # A thin coaxial layer is a parallel-plate capacitor over the mean
    # circumference: C → ε·π(D + t)/t (electrostatics); the remaining
    # curvature term is ~(2t/D)²/12 ≈ 1e-5, hence rtol 1e-4.
    c = am.coating_capacitance(0.5, 3e-3, 2.3)
    np.testing.assert_allclose(c, EPS0_F_PER_M * 2.3 * math.pi * (0.5 + 3e-3) / 3e-3, rtol=1e-4)


def test_pipeline_leakage_is_coating_conductance():
    # y = πD/r_coat (+ jωC) — METHODS.md §5.
    lc = am.pipeline_line_constants(0.5, 1e4, 50.0, soil_resistivity_ohm_m=100.0)
    np.testing.assert_allclose(lc.y_s_per_m.real, math.pi * 0.5 / 1e4, rtol=1e-12)
    no_c = am.pipeline_line_constants(0.5, 1e4, 50.0, soil_resistivity_ohm_m=100.0,
                                      coating_thickness_m=None)
    assert no_c.y_s_per_m.imag == 0
    # Caller-supplied earth-return impedance replaces the fallback exactly.
    z_er = 5e-5 + 5e-4j
    given = am.pipeline_line_constants(0.5, 1e4, 50.0, earth_return_self_ohm_per_m=z_er)
    np.testing.assert_allclose(given.z_ohm_per_m - am.pipe_internal_impedance(0.5, 50.0), z_er,
                               rtol=1e-12)


@pytest.mark.parametrize("coating_resistance_ohm_m2", [1e4, 3e4, 1e5])
def test_pipeline_propagation_constants_plausible(coating_resistance_ohm_m2):
    # Published range for well-coated steel pipelines at 50 Hz: γ of order
    # 1e-4 1/m (attenuation lengths of km) and |Zc| of a few Ω
    # (from memory; CIGRE-style AC-interference guides).
    lc = am.pipeline_line_constants(0.5, coating_resistance_ohm_m2, 50.0,
                                    soil_resistivity_ohm_m=100.0)
    g = propagation_constant(*lc)
    zc = characteristic_impedance(*lc)
    assert 5e-5 <= abs(g) <= 1e-3
    assert 1.0 <= abs(zc) <= 50.0
    assert g.real > 0 and zc.real > 0


def test_collinear_bundle_gmr_against_definition():
    # GMR = (Π_ij d_ij)^(1/n²) with d_ii = r (textbook definition of the
    # geometric mean radius, e.g. Gönen); rtol 1e-12.
    r_m, s_m = 1.25e-3, 0.3
    for n in range(1, 9):
        pos = np.arange(n) * s_m
        d = np.abs(pos[:, None] - pos[None, :])
        np.fill_diagonal(d, r_m)
        ref = np.exp(np.log(d).mean())
        np.testing.assert_allclose(am._collinear_bundle_gmr_m(n, r_m, s_m), ref, rtol=1e-12)


def test_fence_leakage_by_post_type():
    # Metal posts: y = 1/(R_post·spacing) (posts smeared along the line,
    # common practice); wood: only jωC, 10 pF/m (from memory).
    lc = am.fence_line_constants(4, 1.25e-3, [3.0, 3.0], [100.0, 100.0], ["metal", "wood"],
                                 50.0, soil_resistivity_ohm_m=100.0)
    np.testing.assert_allclose(lc.y_s_per_m.real, [1 / 300.0, 0.0], rtol=1e-12)
    np.testing.assert_allclose(lc.y_s_per_m.imag, 2 * math.pi * 50 * 10e-12, rtol=1e-12)
    with pytest.raises(InputError):
        am.fence_line_constants(4, 1.25e-3, 3.0, 100.0, "plastic", 50.0, 100.0)


def test_rail_defaults_are_the_documented_values():
    # 0.15 + j0.6 Ω/km track impedance and 2–20 Ω·km ballast (from memory).
    lc = am.rail_line_constants(ballast_resistance_ohm_km=[2.0, 20.0])
    np.testing.assert_allclose(lc.z_ohm_per_m, (0.15 + 0.6j) / 1000, rtol=1e-12)
    np.testing.assert_allclose(lc.y_s_per_m, [1 / 2000.0, 1 / 20000.0], rtol=1e-12)
    # Attenuation length 1/Re(γ) of a few km for ballasted track (from memory).
    g = propagation_constant(*lc)
    assert np.all((1 / g.real > 1_000.0) & (1 / g.real < 20_000.0))


def test_telecom_constants_and_screening():
    lc = am.telecom_line_constants(0.01, 50.0, soil_resistivity_ohm_m=100.0)
    assert lc.y_s_per_m.real == 0 and lc.y_s_per_m.imag > 0
    # Screening reduces the EMF by k (ITU-T Directives, from memory).
    np.testing.assert_allclose(am.screened_emf(100.0 + 0j, 0.8), 80.0, rtol=1e-12)
    with pytest.raises(InputError):
        am.screened_emf(100.0, 1.5)
    # A purely resistive sheath loop does not screen (k = R/Z = 1), and a
    # sheath with reactance equal to its resistance gives |k| = 1/√2.
    np.testing.assert_allclose(am.sheath_screening_factor(1e-3, 1e-3), 1.0, rtol=1e-12)
    np.testing.assert_allclose(abs(am.sheath_screening_factor(1e-3, 1e-3 + 1e-3j)),
                               1 / math.sqrt(2), rtol=1e-12)


def test_terminations():
    z, y = 1e-4 + 5e-4j, 1e-4 + 0j
    labels = np.array(["open", "grounded", "continuing"])
    got = am.termination_admittance(labels, z, y, resistance_ohm=[np.inf, 10.0, np.inf])
    np.testing.assert_allclose(got, [0.0, 0.1, 1 / characteristic_impedance(z, y)], rtol=1e-12)
    # An unleaky line continuing without end draws nothing: 1/Zc → 0.
    assert matched_termination_admittance(z, 0.0) == 0
    with pytest.raises(InputError):
        am.termination_admittance("shorted", z, y)
    assert am.default_terminations("pipeline") == ("continuing", "continuing")
    assert am.default_terminations("fence") == ("open", "open")
    assert am.default_terminations("rail") == ("continuing", "continuing")
    assert am.default_terminations("telecom", "one_end") == ("grounded", "open")
    assert am.default_terminations("telecom", "isolated") == ("open", "open")
    assert set(am.LINE_CONSTANT_MODELS) == {"pipeline", "fence", "rail", "telecom"}
