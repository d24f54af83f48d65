"""Earth-return impedances checked against closed forms, textbooks and mpmath."""

import math

import mpmath as mp
import numpy as np
import pytest

from corridor.physics import carson
from corridor.physics import earth_return as er
from corridor.physics.constants import MU0_H_PER_M
from tests.physics.reference import carson_mutual_impedance


def _mp_carson_j(r, theta):
    """Carson's integral J(r, θ) by mpmath quadrature (independent reference)."""
    mp.mp.dps = 25
    r = mp.mpf(r)
    theta = mp.mpf(theta)
    p, q = r * mp.cos(theta), r * mp.sin(theta)

    def f(u):
        return mp.exp(-p * u) * mp.cos(q * u) / (u + mp.sqrt(u * u + 1j))

    if q <= p:  # decay dominates: plain quadrature on geometric sub-intervals
        pts = [0] + [mp.mpf(2) ** i / r for i in range(-3, 14)] + [mp.inf]
        return complex(mp.quad(f, pts))
    return complex(mp.quadosc(f, [0, mp.inf], omega=q))


@pytest.mark.slow
@pytest.mark.parametrize("r", [0.01, 0.1, 1.0, 3.0, 10.0])
@pytest.mark.parametrize("theta", [0.0, 0.7, 1.3, math.pi / 2])
def test_carson_integral_matches_mpmath_quadrature(r, theta):
    # Source: J. R. Carson (1926) integral, evaluated by mpmath quadrature.
    ref = _mp_carson_j(r, theta)
    got = complex(er.carson_correction_dimensionless(r, theta))
    # rtol 1e-6: the brief's reference accuracy; series/asymptotics reach ~1e-8.
    assert got == pytest.approx(ref, rel=1e-6)


def test_carson_at_zero_height_equals_sunde_surface_form():
    # Source: Sunde (1968) closed form equals Carson's integral at h = 0.
    a = np.geomspace(0.05, 2e4, 40)
    for rho, f in [(10.0, 50.0), (100.0, 60.0), (1e4, 50.0)]:
        carson = carson_mutual_impedance(1e-9, 1e-9, a, rho, f)
        sunde = er.surface_mutual_impedance(a, rho, f)
        # rtol 1e-6: two independent exact evaluations of the same integral.
        np.testing.assert_allclose(carson, sunde, rtol=1e-6)


def test_carson_tends_to_low_frequency_form_at_small_k():
    # Source: low-frequency limit of Carson's series (Gönen; Kersting ch. 4).
    rho, f = 1e4, 50.0
    x = np.array([0.5, 1.0, 3.0])
    carson = carson_mutual_impedance(10.0, 10.5, x, rho, f)  # k ≈ 0.004
    lf = er.low_frequency_mutual_impedance(np.hypot(x, 0.5), rho, f)
    # rtol 2e-3: first neglected series term (√2/6)(1+j)·k·cosθ is ≈ 5e-4 of Z here.
    np.testing.assert_allclose(lf, carson, rtol=2e-3)


def test_equivalent_earth_depth_constant():
    # Source: Gönen, Electric Power Transmission System Engineering: De = 658.9√(ρ/f).
    rho = np.array([10.0, 100.0, 1000.0])
    for f in (50.0, 60.0):
        # rtol 1e-4: the textbook constant is rounded to 4 digits (exact 658.87).
        np.testing.assert_allclose(
            er.equivalent_earth_depth_m(rho, f), 658.9 * np.sqrt(rho / f), rtol=1e-4
        )


@pytest.mark.parametrize(
    ("f", "r_ohm_per_km", "x_ohm_per_km_per_decade"),
    [(50.0, 0.0493, 0.1447), (60.0, 0.0592, 0.1736)],
)
def test_textbook_low_frequency_coefficients(f, r_ohm_per_km, x_ohm_per_km_per_decade):
    # Source: textbook coefficients (T. Gönen, Electric Power Transmission System Engineering):
    # 0.0493 + j0.1447·log10(De/d) Ω/km at 50 Hz, 0.0592 + j0.1736·log10(De/d) at 60 Hz.
    d = np.array([1.0, 10.0, 100.0])
    rho = 100.0
    de = er.equivalent_earth_depth_m(rho, f)
    z_km = er.low_frequency_mutual_impedance(d, rho, f) * 1e3
    expected = r_ohm_per_km + 1j * x_ohm_per_km_per_decade * np.log10(de / d)
    # rtol 1e-3: textbook coefficients carry 3–4 significant digits.
    np.testing.assert_allclose(z_km, expected, rtol=1e-3)


def test_surface_far_field_is_dc_spreading_term():
    # Source: Sunde (1968), far field Z → ρ/(πa²).
    a = np.array([2e4, 5e4, 1e5])
    rho, f = 100.0, 50.0
    z = er.surface_mutual_impedance(a, rho, f)
    # rtol 1e-3: K1 term is e^{-|γ|a/√2}-small there; 1e-3 is the closeness claimed.
    np.testing.assert_allclose(z, rho / (np.pi * a**2), rtol=1e-3)


def test_surface_small_separation_matches_low_frequency_limit():
    # Source: small-argument K1 expansion (DLMF 10.31.1) → LF form with d = a.
    a = np.array([1e-6, 1e-3, 0.01])
    z = er.surface_mutual_impedance(a, 100.0, 50.0)
    lf = er.low_frequency_mutual_impedance(a, 100.0, 50.0)
    # rtol 1e-6: next term is O((γa)² ln γa) ≤ 1e-9 here.
    np.testing.assert_allclose(z, lf, rtol=1e-6)
    assert np.all(np.isfinite(z))


def test_low_frequency_reactance_turns_negative_but_dispatcher_does_not():
    # Source: the LF form ln(De/d) turns negative beyond De = 658.87·√(ρ/f) ≈ 930 m in
    # 100 Ω·m at 50 Hz (Gönen);
    # reference is Carson's integral.
    rho, f = 100.0, 50.0
    x = np.array([1000.0, 1500.0, 3000.0])
    lf = er.low_frequency_mutual_impedance(np.hypot(x, 10.0), rho, f)
    ref = carson_mutual_impedance(20.0, 10.0, x, rho, f)
    prod = er.mutual_impedance(20.0, 10.0, x, rho, f)
    assert np.all(lf.imag < 0)
    assert np.all(ref.imag > 0)
    # rtol 1e-3: production accuracy required kilometres out.
    np.testing.assert_allclose(prod, ref, rtol=1e-3)
    assert np.all(np.abs(lf - ref) / np.abs(ref) > 0.1)


def _worst_case_lf_error(k):
    # ln(D/d) = 0 (conductor above a surface conductor, x = 0) is the worst geometry.
    theta = np.linspace(0, np.pi / 2, 46)
    kk = np.full_like(theta, k)
    ref = er.carson_correction_dimensionless(kk, theta)
    lf = carson._low_frequency_j(kk)
    return np.max(np.abs(lf - ref) / np.abs(ref))


def test_low_frequency_bound_is_where_error_reaches_one_percent():
    # Source: Carson's integral vs the LF form; definition of LOW_FREQUENCY_K_BOUND.
    assert _worst_case_lf_error(er.LOW_FREQUENCY_K_BOUND) <= 0.01
    assert _worst_case_lf_error(0.5 * er.LOW_FREQUENCY_K_BOUND) <= 0.01
    assert _worst_case_lf_error(1.3 * er.LOW_FREQUENCY_K_BOUND) > 0.01


def test_low_frequency_bound_holds_for_random_overhead_geometries():
    # Source: Carson's integral as reference; k ≤ bound keeps LF within 1 %.
    rng = np.random.default_rng(1)
    n = 2000
    hi = rng.uniform(0, 40, n)
    hj = rng.uniform(0, 40, n)
    rho = 10 ** rng.uniform(1, 4, n)
    f = rng.choice([50.0, 60.0], n)
    m = np.sqrt(2 * np.pi * f * MU0_H_PER_M / rho)
    big_d_max = er.LOW_FREQUENCY_K_BOUND / m
    x_max = np.sqrt(np.maximum(big_d_max**2 - (hi + hj) ** 2, 0))
    x = rng.uniform(0, 1, n) * x_max
    keep = (np.hypot(x, hi + hj) * m <= er.LOW_FREQUENCY_K_BOUND) & (np.hypot(x, hi - hj) > 0.1)
    assert keep.sum() > 500
    ref = carson_mutual_impedance(hi, hj, x, rho, f)[keep]
    lf = er.low_frequency_mutual_impedance(np.hypot(x, hi - hj), rho, f)[keep]
    assert np.max(np.abs(lf - ref) / np.abs(ref)) <= 0.01


def test_dispatcher_stays_right_kilometres_out():
    # Source: Carson's integral (reference implementation) as the truth.
    x = np.linspace(1000.0, 5000.0, 41)
    for rho in (10.0, 100.0, 1000.0, 1e4):
        for f in (50.0, 60.0):
            for hi, hj in [(20.0, -1.5), (30.0, 6.0), (25.0, 25.0), (0.0, -2.0)]:
                ref = carson_mutual_impedance(hi, hj, x, rho, f)
                prod = er.mutual_impedance(hi, hj, x, rho, f)
                # rtol 1e-3: production accuracy required kilometres out.
                np.testing.assert_allclose(prod, ref, rtol=1e-3)


def test_table_accuracy_against_reference():
    # Source: reference Carson integral; the table must hold 1e-4 relative.
    rng = np.random.default_rng(2)
    r = 10 ** rng.uniform(-4, 3, 20000)
    theta = rng.uniform(0, np.pi / 2, r.size)
    theta[:500] = np.pi / 2
    theta[500:1000] = 0.0
    ref = er.carson_correction_dimensionless(r, theta)
    fast = er.carson_correction_fast(r, theta)
    # rtol 1e-4: required accuracy of the production table.
    np.testing.assert_allclose(fast, ref, rtol=1e-4)


def test_reciprocity_and_broadcasting():
    # Source: reciprocity of mutual impedance (symmetry of Carson's integrand in hi, hj).
    hi = np.array([[5.0], [20.0]])
    hj = np.array([-1.0, 0.0, 12.0])
    x = 37.0
    z_ij = er.mutual_impedance(hi, hj, x, 300.0, 50.0)
    z_ji = er.mutual_impedance(hj, hi, -x, 300.0, 50.0)
    assert z_ij.shape == (2, 3)
    np.testing.assert_allclose(z_ij, z_ji.reshape(z_ij.shape), rtol=1e-12)  # exact symmetry


def test_self_impedance_overhead_and_buried():
    # Source: Carson self term (d → radius, D → 2h: Carson 1926) and Sunde's surface form
    # with a = radius; both reduce to ωμ0/8 + j(ωμ0/2π)ln(De/r) at small k (Gönen).
    w_f = 2 * np.pi * 50.0
    radius = 0.01
    for h, rho, rtol in [(10.0, 100.0, 1e-2), (30.0, 10.0, 1e-4)]:
        # h=10 m, 100 Ω·m: k = 0.04 ≤ bound → LF form, 1 % bound; h=30 m, 10 Ω·m: k = 0.38
        # → table, 1e-4 table accuracy.
        k = 2 * h * np.sqrt(w_f * MU0_H_PER_M / rho)
        jc = complex(er.carson_correction_dimensionless(k, 0.0))
        ref = 1e-4 + 1j * w_f * MU0_H_PER_M / (2 * np.pi) * (math.log(2 * h / radius) + 2 * jc)
        got = complex(er.self_impedance(h, radius, 1e-4, rho, 50.0))
        assert got == pytest.approx(ref, rel=rtol)
    z_buried = er.self_impedance(-1.0, 0.1, 0.0, 100.0, 50.0)
    lf = er.low_frequency_mutual_impedance(0.1, 100.0, 50.0)
    # rtol 1e-5: surface form differs from LF by O((γa)² ln γa) ≈ 1e-7.
    assert complex(z_buried) == pytest.approx(complex(lf), rel=1e-5)
