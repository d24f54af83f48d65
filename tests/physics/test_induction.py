"""Line impedance matrices, earth-wire currents and EMFs against published examples."""

import numpy as np
import pytest

from corridor.physics import earth_return as er
from corridor.physics import induction as ind

FT_M = 0.3048
MILE_M = 1609.344


def _kersting_example_4_1(method):
    # Source: W. H. Kersting, Distribution System Modeling and Analysis, Example 4.1:
    # 4-wire line, ρ = 100 Ω·m, 60 Hz; phases 336,400 26/7 ACSR (GMR 0.0244 ft,
    # r 0.306 Ω/mile), neutral 4/0 6/1 ACSR (GMR 0.00814 ft, r 0.592 Ω/mile);
    # a(0,29) b(2.5,29) c(7,29) n(4,25) ft.
    x = np.array([0.0, 2.5, 7.0, 4.0]) * FT_M
    h = np.array([29.0, 29.0, 29.0, 25.0]) * FT_M
    gmr = np.array([0.0244, 0.0244, 0.0244, 0.00814]) * FT_M
    r = np.array([0.306, 0.306, 0.306, 0.592]) / MILE_M
    return ind.impedance_matrix(x, h, gmr, r, 100.0, 60.0, method=method) * MILE_M


def test_kersting_example_4_1_primitive_matrix_modified_carson():
    z = _kersting_example_4_1("low_frequency")
    # Values of Example 4.1 from memory: z_aa, z_ab, z_ac, z_an [Ω/mile]. (The brief
    # recalled 0.0953+j0.7266 as z_an; with D_an = 5.657 ft it is z_ac, D_ac = 7 ft.)
    expected = {
        (0, 0): 0.4013 + 1.4133j,
        (0, 1): 0.0953 + 0.8515j,
        (0, 2): 0.0953 + 0.7266j,
        (0, 3): 0.0953 + 0.7524j,
    }
    for (i, j), value in expected.items():
        # rel 5e-3: 4-digit published values; the modified Carson form is the same formula.
        assert z[i, j] == pytest.approx(value, rel=5e-3)
    np.testing.assert_allclose(z, z.T, rtol=1e-14)  # reciprocity


def test_kersting_example_4_1_full_carson_differs_only_slightly():
    # Source: Kersting Example 4.1 geometry; k ≈ 0.03 so full Carson ≈ modified Carson.
    z_lf = _kersting_example_4_1("low_frequency")
    z_full = _kersting_example_4_1("carson")
    rel = np.abs(z_full - z_lf) / np.abs(z_lf)
    # 1 %: LOW_FREQUENCY_K_BOUND guarantees it; > 0: the forms are not identical.
    assert np.all(rel < 0.01)
    assert np.all(rel > 1e-5)
    np.testing.assert_allclose(z_full, z_full.T, rtol=1e-12)


def test_kersting_example_4_1_kron_reduced_phase_matrix():
    # Source: Kersting Example 4.1, phase impedance matrix z_aa = 0.4576 + j1.0780 Ω/mile
    # (from memory).
    z = _kersting_example_4_1("low_frequency")
    zabc = ind.kron_reduce(z, [0, 1, 2], [3])
    # rel 5e-3: 4-digit published value.
    assert zabc[0, 0] == pytest.approx(0.4576 + 1.0780j, rel=5e-3)


def test_earth_wire_current_makes_earth_wire_voltage_zero():
    # Source: Kersting §4.1 (grounded neutral: zero voltage drop along it) — conservation check.
    z = _kersting_example_4_1("carson") / MILE_M
    i_p = ind.normal_phase_currents([400.0], ["ABC"], 10.0)
    i_s = ind.earth_wire_currents(z, [0, 1, 2], [3], i_p)
    v_s = z[3, :3] @ i_p + z[3, 3] * i_s[0]
    # atol: relative to the phase-coupled drop |z_sp·I_p| ~ 0.1 V/m; solve round-off.
    assert abs(v_s) < 1e-12 * np.abs(z[3, :3] @ i_p)


def test_normal_phase_currents_balanced_and_residual():
    # Source: definition (positive sequence A 0°, B −120°, C +120°; residual = total
    # earth-return current, common practice).
    i = ind.normal_phase_currents([100.0, 200.0], ["ABC", "CBA"], [0.0, 15.0])
    assert abs(i[:3].sum()) < 1e-9  # balanced: sums to zero
    assert i[3:].sum() == pytest.approx(0.15 * 200.0, rel=1e-12)  # residual 15 %
    a = np.exp(2j * np.pi / 3)
    assert i[3] - 10.0 == pytest.approx(200.0 * a, rel=1e-12)  # first conductor carries C


def test_antisymmetric_currents_on_symmetric_line_give_zero_emf_on_axis():
    # Source: mirror symmetry. (Balanced three-phase currents do NOT vanish on the axis of
    # a flat line: E = −(Z_0 − Z_1)·I_B there; the antisymmetric pair (I, 0, −I) does.)
    x = np.array([-8.0, 0.0, 8.0])
    h = np.array([20.0, 20.0, 20.0])
    i = np.array([500.0, 0.0, -500.0], dtype=complex)
    e = ind.emf_per_m(x, h, i, np.array([0.0, 0.0, 30.0]), np.array([-1.0, 5.0, -1.0]), 100.0, 50.0)
    # atol 1e-12 V/m: round-off only (the off-axis EMF is ~0.1 V/m).
    assert np.all(np.abs(e[:2]) < 1e-12)
    assert abs(e[2]) > 1e-3


def test_balanced_currents_cancel_earth_terms_in_low_frequency_regime():
    # Source: METHODS.md §2 — balanced currents cancel the De terms: the LF EMF is the
    # free-space one, −j(ωμ0/2π)Σ I_k ln(1/d_k), independent of soil resistivity.
    x = np.array([-5.0, 5.0, 0.0])
    h = np.array([20.0, 20.0, 20.0 + 5.0 * np.sqrt(3.0)])
    i = ind.normal_phase_currents([1000.0], ["ABC"], 0.0)
    xa = np.array([0.0, 3.0])
    ha = np.array([20.0 + 5.0 / np.sqrt(3.0), 12.0])  # circumcentre and a second point
    d = np.hypot(x[None, :] - xa[:, None], h[None, :] - ha[:, None])
    w = 2 * np.pi * 50.0
    free_space = -(1j * w * 2e-7 * np.log(1.0 / d)) @ i
    for rho in (1e3, 1e4):  # k ≤ bound for these distances
        z = er.low_frequency_mutual_impedance(d, rho, 50.0)
        e = -(z @ i)
        # rtol 1e-9 / atol: exact cancellation up to round-off.
        np.testing.assert_allclose(e, free_space, rtol=1e-9, atol=1e-12)
    assert abs(free_space[0]) < 1e-12  # equidistant point: zero
    e_prod = ind.emf_per_m(x, h, i, xa[:1], ha[:1], 1e4, 50.0)
    # atol 1e-4 V/m: the exact forms differ slightly (D_k differ); single phase gives ~0.1 V/m.
    assert abs(e_prod[0]) < 1e-4


def test_emf_padding_and_per_pair_rows():
    # Source: definition E = −Σ Z·I (vectorised rows equal separate evaluations).
    x = np.array([[-8.0, 0.0, 8.0], [-5.0, 5.0, np.nan]])
    h = np.array([[20.0, 20.0, 20.0], [15.0, 15.0, np.nan]])
    i = np.array([[100.0, -50.0, -50.0], [30.0, -30.0, 0.0]], dtype=complex)
    e = ind.emf_per_m(x, h, i, np.array([40.0, 25.0]), np.array([-1.0, 0.5]), [100.0, 500.0], 50)
    e0 = ind.emf_per_m(x[0], h[0], i[0], [40.0], [-1.0], 100.0, 50)
    e1 = ind.emf_per_m(x[1, :2], h[1, :2], i[1, :2], [25.0], [0.5], 500.0, 50)
    np.testing.assert_allclose(e, np.concatenate([e0, e1]), rtol=1e-12)  # identical maths


def _single_circuit_with_earth_wire(r_earth_wire_ohm_per_m, gmr_earth_wire_m):
    x = np.array([-8.0, 0.0, 8.0, 0.0])
    h = np.array([20.0, 20.0, 20.0, 28.0])
    gmr = np.array([0.012, 0.012, 0.012, gmr_earth_wire_m])
    r = np.array([0.05e-3, 0.05e-3, 0.05e-3, r_earth_wire_ohm_per_m])
    return x, h, gmr, r


@pytest.mark.parametrize(
    ("r_ohm_per_km", "gmr_m", "k_low", "k_high"),
    [
        # Steel 7/16" (9.5 mm) earth wire, R ≈ 3–4 Ω/km (from memory): |k| ≈ 0.9–1.0.
        (3.5, 0.0015, 0.9, 1.0),
        # ACSR/OPGW earth wire, R ≈ 0.1–0.3 Ω/km (from memory): |k| ≈ 0.5–0.8.
        (0.2, 0.006, 0.5, 0.8),
    ],
)
def test_screening_factor_typical_ranges(r_ohm_per_km, gmr_m, k_low, k_high):
    # Source: METHODS.md §2 (typical |k| ≈ 0.95 steel, 0.6–0.7 ACSR/OPGW, from memory).
    x, h, gmr, r = _single_circuit_with_earth_wire(r_ohm_per_km * 1e-3, gmr_m)
    res = ind.fault_emf_per_m(
        x, h, gmr, r, [0, 1, 2], [3], 10e3, np.array([30.0, 200.0, 1000.0]), -1.5, 100.0, 50.0
    )
    k = np.abs(res.screening_factor)
    assert np.all((k > k_low) & (k < k_high))
    worst = np.abs(res.worst_emf_v_per_m)
    assert np.all(worst == np.max(np.abs(res.emf_v_per_m), axis=1))


def test_screening_factor_matrix_form_reduces_to_scalar_form():
    # Source: k = 1 − Z_fs Z_ss⁻¹ Z_sm / Z_fm reduces to the scalar ITU-T form for one wire.
    zmf, zms, zsf, zss = 1 + 2j, 0.5 + 1j, 0.4 + 0.9j, 2 + 3j
    k_scalar = ind.screening_factor(zmf, zms, zsf, zss)
    k_matrix = ind.screening_factor(zmf, np.array([zms]), np.array([zsf]), np.array([[zss]]))
    assert complex(k_matrix) == pytest.approx(complex(k_scalar), rel=1e-14)  # same algebra


def test_two_earth_wires_screen_better_than_one():
    # Source: physics of screening (a second grounded wire adds a return path), common
    # practice; matrix form k = 1 − Z_fs Z_ss⁻¹ Z_sm / Z_fm.
    x = np.array([-8.0, 0.0, 8.0, -5.0, 5.0])
    h = np.array([20.0, 20.0, 20.0, 28.0, 28.0])
    gmr = np.array([0.012, 0.012, 0.012, 0.006, 0.006])
    r = np.array([0.05e-3, 0.05e-3, 0.05e-3, 0.2e-3, 0.2e-3])
    args = (10e3, np.array([50.0, 300.0]), -1.5, 100.0, 50.0)
    k1 = ind.fault_emf_per_m(x, h, gmr, r, [0, 1, 2], [3], *args).screening_factor
    k2 = ind.fault_emf_per_m(x, h, gmr, r, [0, 1, 2], [3, 4], *args).screening_factor
    assert np.all(np.abs(k2) < np.abs(k1))
