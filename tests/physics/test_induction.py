"""Line impedance matrices, conductor currents, EMFs and screening factors.

Every function called here is the one a production run calls through
``corridor.steps.couple``; the references are published examples and
closed forms written out in the tests (or in ``tests/physics/reference.py``).
"""

import numpy as np
import pytest

from corridor.physics import earth_return as er
from corridor.physics import induction as ind
from tests.physics.reference import carson_impedance_matrix

FT_M = 0.3048


def _normal(load, phasing, pct):
    """All circuits of a line together: the sum of their balanced and residual rows."""
    cc = ind.circuit_phase_currents(load, phasing, pct)
    return (cc.balanced_a + cc.residual_a).sum(axis=0)

MILE_M = 1609.344


def _kersting_example_4_1():
    # Source: W. H. Kersting, Distribution System Modeling and Analysis, Example 4.1:
    # 4-wire line, ρ = 100 Ω·m, 60 Hz; phases 336,400 26/7 ACSR (GMR 0.0244 ft,
    # r 0.306 Ω/mile), neutral 4/0 6/1 ACSR (GMR 0.00814 ft, r 0.592 Ω/mile);
    # a(0,29) b(2.5,29) c(7,29) n(4,25) ft.
    x = np.array([0.0, 2.5, 7.0, 4.0]) * FT_M
    h = np.array([29.0, 29.0, 29.0, 25.0]) * FT_M
    gmr = np.array([0.0244, 0.0244, 0.0244, 0.00814]) * FT_M
    r = np.array([0.306, 0.306, 0.306, 0.592]) / MILE_M
    return x, h, gmr, r


def test_kersting_example_4_1_primitive_matrix():
    # The production matrix; at k = D·√(ωμ0/ρ) ≈ 0.04 the dispatcher uses the
    # low-frequency ("modified Carson") form, the one Kersting's example uses.
    z = ind.impedance_matrix(*_kersting_example_4_1(), 100.0, 60.0) * MILE_M
    # Values of Example 4.1 from memory: z_aa, z_ab, z_ac, z_an [Ω/mile].
    expected = {
        (0, 0): 0.4013 + 1.4133j,
        (0, 1): 0.0953 + 0.8515j,
        (0, 2): 0.0953 + 0.7266j,
        (0, 3): 0.0953 + 0.7524j,
    }
    for (i, j), value in expected.items():
        # rel 5e-3: 4-digit published values.
        assert z[i, j] == pytest.approx(value, rel=5e-3)
    np.testing.assert_allclose(z, z.T, rtol=1e-14)  # reciprocity


def test_kersting_example_4_1_full_carson_differs_only_slightly():
    # Source: Kersting Example 4.1 geometry, Carson's exact integral written out
    # in tests/physics/reference.py; k ≈ 0.04 so full Carson ≈ modified Carson.
    args = (*_kersting_example_4_1(), 100.0, 60.0)
    z_prod = ind.impedance_matrix(*args)
    z_full = carson_impedance_matrix(*args)
    rel = np.abs(z_full - z_prod) / np.abs(z_full)
    # 1 %: LOW_FREQUENCY_K_BOUND guarantees it; > 0: the forms are not identical.
    assert np.all(rel < 0.01)
    assert np.all(rel > 1e-5)


def test_kersting_example_4_1_kron_reduced_phase_matrix():
    # Source: Kersting Example 4.1, phase impedance matrix z_aa = 0.4576 + j1.0780 Ω/mile
    # (from memory). Kron reduction Z_pp − Z_ps Z_ss⁻¹ Z_sp = Z_pp + Z_ps·I_s(I_p = 1)
    # with the production earth-wire currents (Kersting eq. 4.13).
    z = ind.impedance_matrix(*_kersting_example_4_1(), 100.0, 60.0) * MILE_M
    p, s = [0, 1, 2], [3]
    zabc = z[np.ix_(p, p)] + z[np.ix_(p, s)] @ ind.earth_wire_currents(z, p, s, np.eye(3))
    # rel 5e-3: 4-digit published value.
    assert zabc[0, 0] == pytest.approx(0.4576 + 1.0780j, rel=5e-3)
    np.testing.assert_allclose(zabc, zabc.T, rtol=1e-12)  # reciprocity survives


def test_earth_wire_current_makes_earth_wire_voltage_zero():
    # Source: Kersting §4.1 (grounded neutral: zero voltage drop along it) — conservation
    # check on the currents production uses, in two soils.
    x, h, gmr, r = _kersting_example_4_1()
    i_p = _normal([400.0], ["ABC"], 10.0)
    cur = ind.conductor_currents(x, h, gmr, r, [0, 1, 2], [3], i_p[None, :], [100.0, 10.0], 60.0)
    for ri, rho in enumerate([100.0, 10.0]):
        z = ind.impedance_matrix(x, h, gmr, r, rho, 60.0)
        for i in (cur.normal_a[ri, 0], 2e3 * cur.fault_per_unit[ri, 1]):
            v_s = z[3] @ i
            # relative to the phase-coupled drop |z_sp·I_p| ~ 0.1 V/m; solve round-off.
            assert abs(v_s) < 1e-12 * np.abs(z[3, :3] @ i[:3])
    np.testing.assert_array_equal(cur.normal_a[:, 0, :3], [i_p, i_p])
    np.testing.assert_array_equal(cur.fault_per_unit[0, :, :3], np.eye(3))  # 1 A on one phase


def test_circuit_phase_currents_balanced_and_residual():
    # Source: definition (positive sequence A 0°, B −120°, C +120°; residual = total
    # earth-return current, common practice).
    i = _normal([100.0, 200.0], ["ABC", "CBA"], [0.0, 15.0])
    assert abs(i[:3].sum()) < 1e-9  # balanced: sums to zero
    assert i[3:].sum() == pytest.approx(0.15 * 200.0, rel=1e-12)  # residual 15 %
    a = np.exp(2j * np.pi / 3)
    assert i[3] - 10.0 == pytest.approx(200.0 * a, rel=1e-12)  # first conductor carries C


def _emf(x, h, i, xa, ha, rho, f):
    z = ind.asset_mutual_impedance(x, h, xa, ha, rho, f)
    return ind.emf_per_m(z, np.broadcast_to(i, z.shape))


def test_antisymmetric_currents_on_symmetric_line_give_zero_emf_on_axis():
    # Source: mirror symmetry. (Balanced three-phase currents do NOT vanish on the axis of
    # a flat line: E = −(Z_0 − Z_1)·I_B there; the antisymmetric pair (I, 0, −I) does.)
    x = np.array([-8.0, 0.0, 8.0])
    h = np.array([20.0, 20.0, 20.0])
    i = np.array([500.0, 0.0, -500.0], dtype=complex)
    e = _emf(x, h, i, np.array([0.0, 0.0, 30.0]), np.array([-1.0, 5.0, -1.0]), 100.0, 50.0)
    # atol 1e-12 V/m: round-off only (the off-axis EMF is ~0.1 V/m).
    assert np.all(np.abs(e[:2]) < 1e-12)
    assert abs(e[2]) > 1e-3


def test_balanced_currents_cancel_earth_terms_in_low_frequency_regime():
    # Source: balanced currents cancel the De terms of the low-frequency form
    # ωμ0/8 + j(ωμ0/2π)ln(De/d) (Σ I = 0): the EMF is the free-space one,
    # −j(ωμ0/2π)Σ I_k ln(1/d_k), independent of soil resistivity (Carson 1926).
    x = np.array([-5.0, 5.0, 0.0])
    h = np.array([20.0, 20.0, 20.0 + 5.0 * np.sqrt(3.0)])
    i = _normal([1000.0], ["ABC"], 0.0)
    xa = np.array([0.0, 3.0])
    ha = np.array([20.0 + 5.0 / np.sqrt(3.0), 12.0])  # circumcentre and a second point
    d = np.hypot(x[None, :] - xa[:, None], h[None, :] - ha[:, None])
    w = 2 * np.pi * 50.0
    free_space = -(1j * w * 2e-7 * np.log(1.0 / d)) @ i
    for rho in (1e3, 1e4):  # k ≤ bound for these distances: production uses the LF form
        e = _emf(x, h, i, xa, ha, rho, 50.0)
        # rtol 1e-9 / atol: exact cancellation up to round-off.
        np.testing.assert_allclose(e, free_space, rtol=1e-9, atol=1e-12)
    assert abs(free_space[0]) < 1e-12  # equidistant point: zero


def test_emf_is_linear_in_the_currents():
    # Source: E = −Σ Z·I is linear (superposition); several current cases per pair give
    # the EMF of each case.
    x = np.array([-8.0, 0.0, 8.0, 0.0])
    h = np.array([20.0, 20.0, 20.0, 28.0])
    z = ind.asset_mutual_impedance(x, h, [40.0, 25.0, 300.0], [-1.0, 0.5, 2.0],
                                   [100.0, 500.0, 30.0], 50.0)
    rng = np.random.default_rng(1)
    i1, i2 = rng.normal(size=(2, 3, 4)) + 1j * rng.normal(size=(2, 3, 4))
    e12 = ind.emf_per_m(z, np.stack([i1, i2, i1 + i2], axis=1))
    np.testing.assert_allclose(e12[:, 0], ind.emf_per_m(z, i1), rtol=1e-12)
    np.testing.assert_allclose(e12[:, 2], e12[:, 0] + e12[:, 1], rtol=1e-12)


def _one_exposure(x, h, gmr, r, p, s, offsets_m, asset_height_m, rho, f, i_fault_a):
    """Screening factor and EMF as production computes them, one section per exposure."""
    cur = ind.conductor_currents(x, h, gmr, r, p, s, np.zeros((1, len(p))), [rho], f)
    n = len(offsets_m)
    z = ind.asset_mutual_impedance(x, h, offsets_m, np.full(n, asset_height_m), rho, f)
    per_unit = np.broadcast_to(cur.fault_per_unit, (n,) + cur.fault_per_unit.shape[1:])
    fe = ind.fault_emf_per_m(z, per_unit, p, np.full(n, i_fault_a))
    ex = ind.exposure_fault_emf(fe.emf_v_per_m, fe.unscreened_emf_v_per_m, np.arange(n), n)
    return fe, ex


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
    # Source: ITU-T Directives vol. II, typical |k| ≈ 0.95 for steel and 0.6–0.7 for
    # ACSR/OPGW earth wires (from memory).
    x, h, gmr, r = _single_circuit_with_earth_wire(r_ohm_per_km * 1e-3, gmr_m)
    fe, ex = _one_exposure(x, h, gmr, r, [0, 1, 2], [3], np.array([30.0, 200.0, 1000.0]),
                           -1.5, 100.0, 50.0, 10e3)
    k = np.abs(ex.screening_factor)
    assert np.all((k > k_low) & (k < k_high))
    # the faulted phase is the one with the largest EMF (conservative choice)
    worst = np.abs(ex.section_emf_v)
    assert np.all(worst == np.max(np.abs(fe.emf_v_per_m), axis=1))


@pytest.mark.parametrize("earth_wires", [[3], [3, 4]])
def test_screening_factor_equals_closed_form(earth_wires):
    # Source: ITU-T Directives vol. II (memory): one earth wire
    # k = 1 − Z_ms·Z_sf/(Z_ss·Z_mf); several k = 1 − Z_fs Z_ss⁻¹ Z_sm / Z_fm.
    # Written out here from the earth-return impedances.
    x = np.array([-8.0, 0.0, 8.0, -5.0, 5.0])
    h = np.array([20.0, 20.0, 20.0, 28.0, 28.0])
    gmr = np.array([0.012, 0.012, 0.012, 0.006, 0.006])
    r = np.array([0.05e-3, 0.05e-3, 0.05e-3, 0.2e-3, 0.2e-3])
    s = np.array(earth_wires)
    keep = np.r_[0, 1, 2, s]
    x, h, gmr, r = x[keep], h[keep], gmr[keep], r[keep]
    s = np.arange(3, len(keep))
    rho, f, xa, ha = 100.0, 50.0, np.array([60.0, 400.0]), -1.5
    fe, _ = _one_exposure(x, h, gmr, r, [0, 1, 2], s, xa, ha, rho, f, 1e3)
    k = ind.screening_factor(fe.emf_v_per_m, fe.unscreened_emf_v_per_m)
    zss = ind.impedance_matrix(x, h, gmr, r, rho, f)[np.ix_(s, s)]
    for n in range(len(xa)):
        zsf = er.mutual_impedance(h[s], ha, x[s] - xa[n], rho, f)
        for m in range(3):
            zmf = er.mutual_impedance(h[m], ha, x[m] - xa[n], rho, f)
            zms = er.mutual_impedance(h[m], h[s], x[m] - x[s], rho, f)
            closed = 1 - zms @ np.linalg.solve(zss, zsf) / zmf
            if len(s) == 1:
                closed_scalar = 1 - zms[0] * zsf[0] / (zss[0, 0] * zmf)
                assert closed == pytest.approx(closed_scalar, rel=1e-14)  # same algebra
            # rel 1e-12: the same k by the earth-wire currents instead of the formula.
            assert k[n, m] == pytest.approx(complex(closed), rel=1e-12)


def test_two_earth_wires_screen_better_than_one():
    # Source: physics of screening (a second grounded wire adds a return path), common
    # practice.
    x = np.array([-8.0, 0.0, 8.0, -5.0, 5.0])
    h = np.array([20.0, 20.0, 20.0, 28.0, 28.0])
    gmr = np.array([0.012, 0.012, 0.012, 0.006, 0.006])
    r = np.array([0.05e-3, 0.05e-3, 0.05e-3, 0.2e-3, 0.2e-3])
    args = (np.array([50.0, 300.0]), -1.5, 100.0, 50.0, 10e3)
    one = [0, 1, 2, 3]
    _, k1 = _one_exposure(x[one], h[one], gmr[one], r[one], [0, 1, 2], [3], *args)
    _, k2 = _one_exposure(x, h, gmr, r, [0, 1, 2], [3, 4], *args)
    assert np.all(np.abs(k2.screening_factor) < np.abs(k1.screening_factor))


def test_exposure_takes_phase_of_largest_total_and_ratio_of_totals():
    # Source: definition of the resultant EMF of an exposure (ITU-T Directives vol. II,
    # memory): Σ over sections, the faulted phase giving the largest |Σ E|, and k the
    # ratio of the totals with and without earth wires. Hand-made numbers.
    e = np.array([[1 + 0j, 2 + 0j], [3 + 0j, -1 + 0j], [0j, 5j]])
    e0 = 2 * e + 1j
    ex = ind.exposure_fault_emf(e, e0, np.array([0, 0, 1]), 2)
    np.testing.assert_array_equal(ex.worst_phase, [0, 1])  # |4| > |1|; |5j| > 0
    np.testing.assert_array_equal(ex.section_emf_v, [1, 3, 5j])
    np.testing.assert_allclose(ex.screening_factor, [4 / (8 + 2j), 5j / (10j + 1j)], rtol=1e-15)
    # no unscreened EMF at all: no screening claimed
    assert ind.screening_factor(0j, 0j) == 1.0
