"""Single line-to-earth faults fed from both terminals, against published examples and limits."""

import numpy as np
import pytest

from corridor.physics import faults, induction

FT = 0.3048
MILE = 1609.344
A_OP = np.exp(2j * np.pi / 3)
#: Symmetrical-component transformation, phase = A·sequence (order 0, 1, 2).
A_MAT = np.array([[1, 1, 1], [1, A_OP**2, A_OP], [1, A_OP, A_OP**2]])

# W. H. Kersting, Distribution System Modeling and Analysis, Example 4.1 (values from
# memory): four-wire line, phases at (0, 29), (2.5, 29), (7, 29) ft, neutral at (4, 25) ft;
# 336,400 26/7 ACSR phases (GMR 0.0244 ft, 0.306 Ω/mile), 4/0 6/1 ACSR neutral (GMR
# 0.00814 ft, 0.592 Ω/mile); 100 Ω·m, 60 Hz. Kersting's results in Ω/mile:
KERSTING_PRIMITIVE_DIAG = [0.4013 + 1.4133j, 0.4013 + 1.4133j, 0.4013 + 1.4133j,
                           0.6873 + 1.5465j]
KERSTING_REDUCED = np.array([
    [0.4576 + 1.0780j, 0.1560 + 0.5017j, 0.1535 + 0.3849j],
    [0.1560 + 0.5017j, 0.4666 + 1.0482j, 0.1580 + 0.4236j],
    [0.1535 + 0.3849j, 0.1580 + 0.4236j, 0.4615 + 1.0651j]])
KERSTING_Z0 = 0.7735 + 1.9373j
KERSTING_Z1 = 0.3061 + 0.6270j


def _kersting_primitive_ohm_per_mile():
    x = np.array([0.0, 2.5, 7.0, 4.0]) * FT
    h = np.array([29.0, 29.0, 29.0, 25.0]) * FT
    gmr = np.array([0.0244, 0.0244, 0.0244, 0.00814]) * FT
    r = np.array([0.306, 0.306, 0.306, 0.592]) / MILE
    return induction.impedance_matrix(x, h, gmr, r, 100.0, 60.0) * MILE


def test_sequence_impedances_of_kersting_example_from_the_physics_core():
    # Kersting Example 4.1 (from memory): the primitive matrix, the Kron-reduced phase
    # matrix and z0, z1 to the 4 decimals printed. Kersting uses the modified Carson
    # equations; the physics core's Carson evaluation agrees to the printed digits.
    z = _kersting_primitive_ohm_per_mile()
    np.testing.assert_allclose(np.diag(z), KERSTING_PRIMITIVE_DIAG, atol=1e-4)
    reduced = faults.kron_reduce(z, [0, 1, 2], [3])
    np.testing.assert_allclose(reduced, KERSTING_REDUCED, atol=1.5e-4)
    z1, z0 = faults.sequence_impedances(reduced)
    assert abs(z0 - KERSTING_Z0) < 1e-4
    assert abs(z1 - KERSTING_Z1) < 1e-4


def test_sequence_impedances_are_the_diagonal_of_the_transformed_matrix():
    # Source: symmetrical components, z012 = A⁻¹·z_abc·A (Glover/Sarma/Overbye ch. 8;
    # Kersting ch. 4); for Kersting's reduced matrix the diagonal gives z0, z1, z2 = z1.
    z012 = np.linalg.solve(A_MAT, KERSTING_REDUCED @ A_MAT)
    z1, z0 = faults.sequence_impedances(KERSTING_REDUCED)
    assert z0 == pytest.approx(z012[0, 0], rel=1e-13)
    assert z1 == pytest.approx(z012[1, 1], rel=1e-13)
    assert z1 == pytest.approx(z012[2, 2], rel=1e-13)


def test_kron_reduce_without_earth_wires_keeps_the_phase_block():
    # Source: Kron reduction with no earthed conductor to eliminate (Kersting ch. 4).
    z = _kersting_primitive_ohm_per_mile()
    np.testing.assert_array_equal(faults.kron_reduce(z, [0, 1, 2], []), z[:3, :3])


def test_glover_single_line_to_ground_example():
    # Glover, Sarma, Overbye, Power System Analysis and Design, Example 9.3 (values from
    # memory): bolted fault from phase a to ground at a bus with Thevenin sequence
    # impedances Z0 = j0.25, Z1 = j0.13893, Z2 = j0.14562 per unit and V_F = 1.05 per
    # unit: I0 = I1 = I2 = −j1.96427 and I_a = 3·I0 = −j5.8928 per unit.
    # Here the bus is terminal A and terminal B has no source (admittance 0).
    got = faults.slg_fault_currents(1 / 0.13893j, 1 / 0.25j, 0.0, 0.0, 0.0, 0.0, 0.1j, 0.3j,
                                    1.05, y2_start_s=1 / 0.14562j, y2_end_s=0.0)
    assert got.fault_a / 3 == pytest.approx(-1.96427j, abs=1e-5)
    assert got.fault_a == pytest.approx(-5.8928j, abs=1e-4)
    # all of it comes from A: faulted phase and residual
    assert got.phase_start_a == pytest.approx(got.fault_a, rel=1e-14)
    assert got.residual_start_a == pytest.approx(got.fault_a, rel=1e-14)
    assert got.phase_end_a == 0


def _phase_domain_reference(z1a, z0a, z1b, z0b, z1_line, z0_line, length, x, e):
    """Independent reference: nodal analysis of the faulted network in phase coordinates.

    Buses A and B behind balanced EMFs E·(1, a², a) and their phase source impedances
    A·diag(Z0, Z1, Z1)·A⁻¹; the line as two balanced 3x3 series impedances (x and L − x)
    meeting at the fault point F, whose phase a is tied to earth. Returns the phase-a and
    residual currents flowing from A into F and from B into F.
    """
    def phase(z0, z1):
        return A_MAT @ np.diag([z0, z1, z1]) @ np.linalg.inv(A_MAT)

    emf = e * np.array([1, A_OP**2, A_OP])
    ysa, ysb = np.linalg.inv(phase(z0a, z1a)), np.linalg.inv(phase(z0b, z1b))
    y1 = np.linalg.inv(phase(z0_line * x, z1_line * x))
    y2 = np.linalg.inv(phase(z0_line * (length - x), z1_line * (length - x)))
    # unknowns: V_A (3), V_B (3), V_F phases b and c (phase a of F is 0)
    y = np.zeros((9, 9), complex)
    rhs = np.zeros(9, complex)
    y[0:3, 0:3] = ysa + y1
    y[3:6, 3:6] = ysb + y2
    rhs[0:3] = ysa @ emf
    rhs[3:6] = ysb @ emf
    keep = [1, 2]  # F's phases b, c
    y[0:3, 6:9][:, :2] = -y1[:, keep]
    y[3:6, 6:9][:, :2] = -y2[:, keep]
    y[6:8, 0:3] = -y1[keep, :]
    y[6:8, 3:6] = -y2[keep, :]
    y[6:8, 6:8] = (y1 + y2)[np.ix_(keep, keep)]
    y[8, 8] = 1.0
    v = np.linalg.solve(y, rhs)
    vf = np.array([0.0, v[6], v[7]])
    ia = y1 @ (v[0:3] - vf)
    ib = y2 @ (v[3:6] - vf)
    return ia[0], ib[0], ia.sum(), ib.sum()


@pytest.mark.parametrize("x_frac", [0.0, 0.2, 0.5, 0.9, 1.0])
def test_two_terminal_currents_match_a_phase_domain_network_solve(x_frac):
    # Independent reference computation: the same faulted network solved in phase
    # coordinates by nodal analysis (no sequence networks, no current division).
    length = 40e3
    z1_line, z0_line = (0.03 + 0.32j) / 1000, (0.2 + 1.05j) / 1000
    z1a, z0a = 2.0 + 18.0j, 1.5 + 25.0j
    z1b, z0b = 4.0 + 30.0j, 3.0 + 24.0j
    e = 230e3 / np.sqrt(3)
    # a zero-length section has no admittance matrix: terminal faults 1 mm inside
    x = min(max(x_frac * length, 1e-3), length - 1e-3)
    got = faults.slg_fault_currents(1 / z1a, 1 / z0a, 1 / z1b, 1 / z0b, x * z1_line,
                                    x * z0_line, (length - x) * z1_line, (length - x) * z0_line,
                                    e)
    ref = _phase_domain_reference(z1a, z0a, z1b, z0b, z1_line, z0_line, length, x, e)
    tol = 1e-8
    np.testing.assert_allclose([got.phase_start_a, got.phase_end_a, got.residual_start_a,
                                got.residual_end_a], ref, rtol=tol, atol=tol * abs(got.fault_a))
    assert got.phase_start_a + got.phase_end_a == pytest.approx(got.fault_a, rel=1e-12)
    assert got.residual_start_a + got.residual_end_a == pytest.approx(got.fault_a, rel=1e-12)


@pytest.mark.parametrize("i_start_ka, i_end_ka, xr_a, xr_b, k_a, k_b", [
    (20.0, 15.0, 10.0, 10.0, 1.0, 1.0),
    (40.0, 8.0, 15.0, 5.0, 0.8, 2.5),
    (10.0, 10.0, 10.0, 10.0, 1.0, 1.0),
    (8.0, 30.0, 30.0, 8.0, 3.0, 0.6),
])
@pytest.mark.parametrize("newton_steps", [40, 0])
def test_fault_at_a_terminal_reproduces_the_given_current(i_start_ka, i_end_ka, xr_a, xr_b,
                                                          k_a, k_b, newton_steps, monkeypatch):
    # Limit required by the source model (docs/methods.md §8.1): the fitted sources give,
    # for a fault at each terminal, the single line-to-earth current given for it (by
    # Newton's method, and by the bisection it falls back on).
    monkeypatch.setattr(faults, "_NEWTON_STEPS", newton_steps)
    length = 60e3
    z1, z0 = (0.028 + 0.31j) / 1000, (0.16 + 0.95j) / 1000
    e = 400e3 / np.sqrt(3)
    src = faults.source_admittances(i_start_ka * 1e3, i_end_ka * 1e3, e, z1 * length,
                                     z0 * length, xr_a, xr_b, k_a, k_b)
    assert bool(src.consistent)
    for x, given in ((0.0, i_start_ka), (length, i_end_ka)):
        got = faults.slg_fault_currents(src.y1_start_s, src.y0_start_s, src.y1_end_s,
                                        src.y0_end_s, x * z1, x * z0, (length - x) * z1,
                                        (length - x) * z0, e)
        assert abs(got.fault_a) == pytest.approx(given * 1e3, rel=1e-9)
    # the sources have the X/R and Z0/Z1 asked for
    assert (1 / src.y1_start_s).imag / (1 / src.y1_start_s).real == pytest.approx(xr_a)
    assert src.y1_end_s / src.y0_end_s == pytest.approx(k_b)


def test_equal_terminals_and_midpoint_fault_split_evenly():
    # Limit (symmetry): equal terminals, fault at the midpoint: I_A = I_B.
    length = 30e3
    z1, z0 = (0.03 + 0.3j) / 1000, (0.15 + 1.0j) / 1000
    e = 230e3 / np.sqrt(3)
    src = faults.source_admittances(12e3, 12e3, e, z1 * length, z0 * length)
    half = length / 2
    got = faults.slg_fault_currents(src.y1_start_s, src.y0_start_s, src.y1_end_s,
                                    src.y0_end_s, half * z1, half * z0, half * z1, half * z0, e)
    assert got.phase_start_a == pytest.approx(got.phase_end_a, rel=1e-9)
    assert got.residual_start_a == pytest.approx(got.residual_end_a, rel=1e-9)
    assert got.phase_start_a == pytest.approx(got.fault_a / 2, rel=1e-9)


def test_inconsistent_terminal_currents_drop_the_weaker_source():
    # A fault at B cannot draw less than terminal A's source pushes through the line
    # (physics of the network): such data are flagged; B's source is taken as absent, so
    # the current at B is the (larger) one fed through the line, and A's value still holds.
    length = 80e3
    z1, z0 = (0.03 + 0.3j) / 1000, (0.15 + 1.0j) / 1000
    e = 400e3 / np.sqrt(3)
    src = faults.source_admittances(40e3, 1e3, e, z1 * length, z0 * length)
    assert not bool(src.consistent)
    assert src.y1_end_s == 0 and src.y0_end_s == 0
    line1, line0 = length * z1, length * z0
    at_a = faults.slg_fault_currents(src.y1_start_s, src.y0_start_s, 0.0, 0.0, 0.0, 0.0, line1,
                                     line0, e)
    at_b = faults.slg_fault_currents(src.y1_start_s, src.y0_start_s, 0.0, 0.0, line1, line0,
                                     0.0, 0.0, e)
    assert abs(at_a.fault_a) == pytest.approx(40e3, rel=1e-9)
    assert abs(at_b.fault_a) > 1e3
    assert at_b.phase_end_a == 0
