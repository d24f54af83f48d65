"""The per-kind line constants production uses, against closed forms and published values.

Every model here is the one ``corridor.steps.respond`` calls for the kind.
"""

import math

import mpmath
import numpy as np
import pytest

from corridor.errors import InputError
from corridor.network import asset_models as am
from corridor.network.response import matched_termination_admittance, propagation_constant
from corridor.physics import conductors
from corridor.physics import earth_return as er
from corridor.physics.constants import EPS0_F_PER_M, MU0_H_PER_M

STEEL_OHM_M, PIPE_MU_R = 1.7e-7, 300.0


def _gonen_earth_return(radius_m, rho_ohm_m, frequency_hz, r_ohm_per_km, x_per_decade_ohm_per_km):
    """Low-frequency Carson self impedance from the published per-km coefficients [Ω/m].

    T. Gönen, Electric Power Transmission System Engineering: 0.0493 +
    j0.1447·log10(De/r) Ω/km at 50 Hz, 0.0592 + j0.1736·log10(De/r) at 60 Hz,
    De = 658.9·√(ρ/f) m.
    """
    de_m = 658.9 * math.sqrt(rho_ohm_m / frequency_hz)
    return (r_ohm_per_km + 1j * x_per_decade_ohm_per_km * math.log10(de_m / radius_m)) / 1000


def _skin_surface_impedance(rho_ohm_m, mu_r, frequency_hz, perimeter_m):
    """(1 + j)ρ/(p·δ), δ = √(2ρ/(ωμ0μr)): current in a skin of depth δ [Ω/m].

    S. Ramo, J. R. Whinnery, T. Van Duzer, Fields and Waves in Communication
    Electronics (surface impedance of a good conductor).
    """
    delta = math.sqrt(2 * rho_ohm_m / (2 * math.pi * frequency_hz * MU0_H_PER_M * mu_r))
    return (1 + 1j) * rho_ohm_m / (perimeter_m * delta)


def test_wire_internal_impedance_against_mpmath_bessel():
    # Reference: the round-wire formula Z = kρ/(2πr)·I0(kr)/I1(kr) (Ramo, Whinnery,
    # Van Duzer) evaluated with mpmath's Bessel functions (independent library); rtol 1e-12.
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
    # Deep skin effect → surface impedance (1 + j)ρ/(2πr·δ). r/δ ≈ 150 here, the
    # next term is ~δ/(4r) ≈ 0.2 %, hence rtol 5e-3.
    r_big_m = 0.25
    z_skin = am.wire_internal_impedance(r_big_m, 50.0, rho, 300.0)
    np.testing.assert_allclose(z_skin, _skin_surface_impedance(rho, 300.0, 50.0,
                                                               2 * math.pi * r_big_m), rtol=5e-3)


@pytest.mark.parametrize(("frequency_hz", "r_ohm_per_km", "x_ohm_per_km"),
                         [(50.0, 0.0493, 0.1447), (60.0, 0.0592, 0.1736)])
def test_pipeline_series_impedance_is_skin_plus_carson_earth_return(frequency_hz, r_ohm_per_km,
                                                                    x_ohm_per_km):
    # z = Z_int + Z_earth. Z_int: a 9.5 mm wall is 5.6 skin depths thick, so the
    # thick-wall surface impedance (1 + j)ρ/(πDδ) holds to |coth(qt) − 1| ≈ 3e-5
    # (Ramo, Whinnery, Van Duzer; CIGRE TB 95, memory). Z_earth of a conductor of
    # radius D/2 on the surface: Gönen's published low-frequency coefficients
    # (4 digits), which the exact Sunde form meets within (γa)² ≈ 1e-6. rtol 1e-3.
    d_m, rho_soil = 0.508, 100.0
    lc = am.pipeline_line_constants(d_m, 0.0095, 1e5, -1.5, rho_soil, frequency_hz)
    z_int = _skin_surface_impedance(STEEL_OHM_M, PIPE_MU_R, frequency_hz, math.pi * d_m)
    z_earth = _gonen_earth_return(d_m / 2, rho_soil, frequency_hz, r_ohm_per_km, x_ohm_per_km)
    np.testing.assert_allclose(lc.z_ohm_per_m, z_int + z_earth, rtol=1e-3)
    # Pipe steel at 50 Hz: skin depth ≈ 1.7 mm, internal R ≈ 0.06 Ω/km for DN 500
    # (CIGRE TB 95 order of magnitude, from memory).
    assert 0.03 < z_int.real * 1000 < 0.1


def test_pipeline_thin_wall_tends_to_dc_resistance():
    # t ≪ δ: the finite-wall form ρq·coth(qt)/(πD) → ρ/(πDt), the DC resistance of
    # the wall's cross-section πDt (Ohm's law); the next term is O((t/δ)²) ≈ 4e-5
    # of it here, rtol 1e-3 with the earth-return part (ωμ0/8, Carson) removed.
    d_m, t_m, f_hz = 0.5, 1e-5, 50.0
    lc = am.pipeline_line_constants(d_m, t_m, 1e5, -1.0, 100.0, f_hz)
    r_earth = 2 * math.pi * f_hz * MU0_H_PER_M / 8
    np.testing.assert_allclose(lc.z_ohm_per_m.real - r_earth,
                               STEEL_OHM_M / (math.pi * d_m * t_m), rtol=1e-3)


def test_pipeline_coating_admittance():
    # Leakage: the coated area per metre πD over the specific coating resistance,
    # G = πD/r_coat (CIGRE TB 95, memory; Ohm's law over the coating). Capacitance:
    # coaxial capacitor C = 2πε0εr/ln(1 + 2t/D) (electrostatics), 3 mm PE, εr 2.3.
    d_m, r_coat, f_hz = 0.5, 1e4, 50.0
    lc = am.pipeline_line_constants(d_m, 0.0095, r_coat, -1.0, 100.0, f_hz)
    np.testing.assert_allclose(lc.y_s_per_m.real, math.pi * d_m / r_coat, rtol=1e-12)
    c_coax = 2 * math.pi * EPS0_F_PER_M * 2.3 / math.log((d_m + 2 * 3e-3) / d_m)
    np.testing.assert_allclose(lc.y_s_per_m.imag, 2 * math.pi * f_hz * c_coax, rtol=1e-12)
    no_c = am.pipeline_line_constants(d_m, 0.0095, r_coat, -1.0, 100.0, f_hz,
                                      coating_thickness_m=None)
    assert no_c.y_s_per_m.imag == 0
    with pytest.raises(InputError):
        am.pipeline_line_constants(0.5, 0.0095, 0.0, -1.0, 100.0, f_hz)


def test_coating_capacitance_thin_limit_and_size():
    # A thin coaxial layer is a parallel-plate capacitor over the mean
    # circumference: C → ε·π(D + t)/t (electrostatics); the remaining
    # curvature term is ~(2t/D)²/12 ≈ 1e-5, hence rtol 1e-4.
    c = am.coating_capacitance(0.5, 3e-3, 2.3)
    np.testing.assert_allclose(c, EPS0_F_PER_M * 2.3 * math.pi * (0.5 + 3e-3) / 3e-3, rtol=1e-4)
    # About 10 nF/m for a DN 500 pipe under 3 mm of PE (order quoted for 3LPE, memory).
    assert 5e-9 < c < 20e-9


@pytest.mark.parametrize("coating_resistance_ohm_m2", [1e4, 3e4, 1e5])
def test_pipeline_propagation_constants_plausible(coating_resistance_ohm_m2):
    # Published range for well-coated steel pipelines at 50 Hz: γ of order
    # 1e-4 1/m (attenuation lengths of km) and |Zc| of a few Ω
    # (from memory; CIGRE-style AC-interference guides).
    lc = am.pipeline_line_constants(0.5, 0.0095, coating_resistance_ohm_m2, -1.0, 100.0, 50.0)
    g = propagation_constant(*lc)
    zc = np.sqrt(lc.z_ohm_per_m / lc.y_s_per_m)
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


@pytest.mark.parametrize(("frequency_hz", "r_ohm_per_km", "x_ohm_per_km"),
                         [(50.0, 0.0493, 0.1447), (60.0, 0.0592, 0.1736)])
def test_fence_series_impedance_is_bundle_over_carson_earth(frequency_hz, r_ohm_per_km,
                                                             x_ohm_per_km):
    # z = Z_int/n + Z_earth(GMR of the bundle): Gönen's published low-frequency
    # coefficients (4 digits, rtol 1e-3) for the earth-return part of a 1.5 m high
    # fence (k = 2h·√(ωμ0/ρ) ≈ 0.007, where the low-frequency form is exact to 1 %).
    n, r_w, rho = 4, 1.25e-3, 100.0
    lc = am.fence_line_constants(n, r_w, 3.0, 100.0, "metal", 1.5, rho, frequency_hz)
    gmr = am._collinear_bundle_gmr_m(n, r_w, 0.3)
    z_int = am.wire_internal_impedance(r_w, frequency_hz) / n
    np.testing.assert_allclose(lc.z_ohm_per_m - z_int,
                               _gonen_earth_return(gmr, rho, frequency_hz, r_ohm_per_km,
                                                   x_ohm_per_km), rtol=1e-3)


def test_fence_admittance_by_post_type():
    # Every post leaks through its resistance, whatever the material: y = 1/(R_post·spacing)
    # (posts smeared along the line, common practice) + jωC with C = 2πε0/ln(2h/r) of a
    # wire above a conducting earth (method of images, Glover/Sarma/Overbye ch. 4).
    # A wet wooden post is no insulator: a few kΩ (from memory, docs/methods.md §10).
    h, r_w, f_hz = 1.5, 1.25e-3, 50.0
    lc = am.fence_line_constants(4, r_w, [3.0, 3.0], [100.0, 5000.0], ["metal", "wood"],
                                 h, 100.0, f_hz)
    np.testing.assert_allclose(lc.y_s_per_m.real, [1 / 300.0, 1 / 15000.0], rtol=1e-12)
    c = 2 * math.pi * EPS0_F_PER_M / math.log(2 * h / r_w)
    np.testing.assert_allclose(lc.y_s_per_m.imag, 2 * math.pi * f_hz * c, rtol=1e-12)
    # Missing resistance: the material's typical value (metal 100 Ω, wet wood 5 kΩ; memory)
    lc = am.fence_line_constants(4, r_w, 3.0, [np.nan, np.nan], ["metal", "wood"], h, 100.0,
                                 f_hz)
    np.testing.assert_allclose(lc.y_s_per_m.real, [1 / 300.0, 1 / 15000.0], rtol=1e-12)
    with pytest.raises(InputError):
        am.fence_line_constants(4, r_w, 3.0, 100.0, "plastic", h, 100.0, f_hz)
    with pytest.raises(InputError):
        am.fence_line_constants(4, r_w, 3.0, 0.0, "wood", h, 100.0, f_hz)


def test_rail_pair_uses_the_geometric_mean_radius_of_two_rails():
    # GMR of two conductors of radius r_eq at centre distance s: √(r_eq·s) (Glover, Sarma,
    # Overbye ch. 4); s = 1.507 m for standard gauge (1435 mm + 72 mm head, from memory).
    rail = conductors.rail_equivalent(frequency_hz=50.0)
    lc = am.rail_line_constants(5.0, 0.0, 100.0, 50.0)
    gmr = math.sqrt(rail.equivalent_radius_m * 1.507)
    earth = _gonen_earth_return(gmr, 100.0, 50.0, 0.0493, 0.1447)
    np.testing.assert_allclose(lc.z_ohm_per_m - rail.internal_impedance_ohm_per_m / 2, earth,
                               rtol=1e-3)
    # Single-track loop impedance at 50 Hz: of the order 0.1–0.2 + j0.5–0.7 Ω/km as measured
    # by R. J. Hill and D. C. Carpenter, IEEE Trans. Vehicular Technology 42(2), 1993 (the
    # values from memory).
    z_km = complex(lc.z_ohm_per_m) * 1000
    assert 0.06 < z_km.real < 0.25
    assert 0.45 < z_km.imag < 0.75


def test_sheath_screening_factor():
    # k = (R_s·L + 2R_e)/(Z_s·L + 2R_e) (derived; ITU-T K.14 names the sheath resistance,
    # the grounding and the length as the parameters); ideal grounds: R_s/Z_s, the ITU-T
    # form R_s/|R_s + jωL_s| (from memory). An isolated sheath screens nothing.
    r_s = 1.0e-3  # 1 Ω/km, a lead or thin aluminium sheath (common practice)
    z_e = complex(er.self_impedance(-0.8, 0.02, 0.0, 100.0, 50.0))
    k = am._sheath_screening_factor(r_s, 0.02, -0.8, 100.0, 50.0,
                                    ["both_ends", "one_end", "isolated"], 5000.0)
    assert k[0] == pytest.approx(abs(r_s / (r_s + z_e)), rel=1e-12)
    np.testing.assert_array_equal(k[1:], [1.0, 1.0])
    # a 1 Ω/km sheath: about 0.8–0.9, the order the input default 0.8 assumed (from memory)
    assert 0.75 < k[0] < 0.95
    # end grounds of 10 Ω weaken the screening, less so on a longer exposure
    short, long_ = am._sheath_screening_factor(r_s, 0.02, -0.8, 100.0, 50.0, "both_ends",
                                               [1000.0, 20000.0], 10.0)
    assert k[0] < long_ < short < 1.0
    with pytest.raises(InputError):
        am._sheath_screening_factor(r_s, 0.02, -0.8, 100.0, 50.0, "bonded", 1000.0)


def test_wire_capacitance_range_and_floor():
    # Thin wires 0.5–10 m above ground: 2πε0/ln(2h/r) of some 5–12 pF/m, the order
    # quoted for overhead wires (from memory); a wire on the ground is taken at
    # 0.1 m (common practice).
    c = am.wire_capacitance(np.array([0.5, 2.0, 10.0]), 1.25e-3)
    assert np.all((c > 5e-12) & (c < 12e-12))
    assert am.wire_capacitance(0.0, 1e-3) == am.wire_capacitance(0.1, 1e-3)


def test_rail_constants_published_order_and_ballast():
    # Track–earth loop at 50 Hz about 0.15 + j0.6 Ω/km (from memory); ballast
    # leakage y = 1/(R_ballast·1 km) for 2–20 Ω·km (from memory); attenuation
    # lengths 1/Re(γ) of a few km for ballasted track (from memory).
    lc = am.rail_line_constants(np.array([2.0, 20.0]), 0.03, 100.0, 50.0)
    z_km = lc.z_ohm_per_m * 1000
    assert np.all((z_km.real > 0.05) & (z_km.real < 0.3))
    assert np.all((z_km.imag > 0.4) & (z_km.imag < 0.9))
    np.testing.assert_allclose(lc.y_s_per_m, [1 / 2000.0, 1 / 20000.0], rtol=1e-12)
    g = propagation_constant(*lc)
    assert np.all((1 / g.real > 1_000.0) & (1 / g.real < 20_000.0))
    # A rail resistance above the skin-effect value raises the resistive part by the
    # difference (the reactance stays).
    high = am.rail_line_constants(5.0, 1.0, 100.0, 50.0)
    low = am.rail_line_constants(5.0, 0.0, 100.0, 50.0)
    rail_int = _skin_surface_impedance(2.2e-7, 100.0, 50.0, 0.69) / 2  # UIC60, memory
    np.testing.assert_allclose(low.z_ohm_per_m - high.z_ohm_per_m,
                               rail_int.real - 1e-3, rtol=1e-9)
    with pytest.raises(InputError):
        am.rail_line_constants(0.0, 0.03, 100.0, 50.0)


def test_telecom_constants():
    # z = R_pair + Z_earth, R_pair of a 0.6 mm copper pair with both wires in
    # parallel: ρ_Cu/(2·π(0.3 mm)²) = 0.0304 Ω/m (annealed copper 1.72e-8 Ω·m,
    # IEC 60028); y = jω·80 nF/km (from memory). Earth part: Gönen's coefficients.
    f_hz, rho, rc = 50.0, 100.0, 0.01
    lc = am.telecom_line_constants(rc, -0.8, rho, f_hz)
    r_pair = 1.72e-8 / (2 * math.pi * 0.3e-3**2)
    np.testing.assert_allclose(lc.z_ohm_per_m - r_pair,
                               _gonen_earth_return(rc, rho, f_hz, 0.0493, 0.1447), rtol=1e-3)
    np.testing.assert_allclose(lc.y_s_per_m, 2j * math.pi * f_hz * 80e-12, rtol=1e-12)


def test_terminations():
    # open: 0; grounded: 1/R; continuing: the input admittance of a semi-infinite
    # line, 1/Zc = √(y/z) (Sunde 1968).
    z, y = 1e-4 + 5e-4j, 1e-4 + 0j
    labels = np.array(["open", "grounded", "continuing"])
    got = am.termination_admittance(labels, z, y, resistance_ohm=[np.inf, 10.0, np.inf])
    np.testing.assert_allclose(got, [0.0, 0.1, np.sqrt(y / z)], rtol=1e-12)
    # An unleaky line continuing without end draws nothing: 1/Zc → 0.
    assert matched_termination_admittance(z, 0.0) == 0
    with pytest.raises(InputError):
        am.termination_admittance("shorted", z, y)
    with pytest.raises(InputError):
        am.termination_admittance("grounded", z, y, resistance_ohm=0.0)
    assert set(am.TELECOM_GROUNDING_TERMINATIONS["one_end"]) == {"grounded", "open"}
