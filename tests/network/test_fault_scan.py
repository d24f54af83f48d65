"""Fault-position scan by superposition against the closed form of the matched line."""

import numpy as np
import pytest

from corridor.network import fault_scan
from corridor.network.response import ChainBatch, ChainSystem
from corridor.physics import faults

SEG_M = 100.0
PIPE_Z = 5e-5 + 6e-4j  # Ω/m, order of a coated steel pipe with earth return (from memory)
#: EMF per metre per ampere of earth-fault current, screening included (an asset some tens
#: of metres from the line: |Z_m| ≈ 0.25 mΩ/m at 50 Hz, k ≈ 0.7; order of magnitude).
E_PER_A = -(0.05 + 0.25j) / 1000 * 0.7


def _pipe_admittance(coating_ohm_m2, diameter_m=0.5):
    # y = πD/r_coat + jωC (docs/methods.md §5.7)
    c = 8.8541878128e-12 * 2.3 * np.pi * diameter_m / 0.003
    return np.pi * diameter_m / coating_ohm_m2 + 2j * np.pi * 50 * c


def _line_currents(positions_m, length_m=60e3, i_ka=20.0):
    z1, z0 = (0.03 + 0.3j) / 1000, (0.15 + 1.0j) / 1000
    e = 400e3 / np.sqrt(3)
    src = faults.source_admittances(i_ka * 1e3, i_ka * 1e3, e, z1 * length_m, z0 * length_m)
    x = np.asarray(positions_m, float)
    got = faults.slg_fault_currents(src.y1_start_s, src.y0_start_s, src.y1_end_s,
                                    src.y0_end_s, x * z1, x * z0, (length_m - x) * z1,
                                    (length_m - x) * z0, e)
    return got.residual_start_a, got.residual_end_a


def _exposure_setup(coating_ohm_m2, positions_m):
    """30 km pipeline, matched ends; parallel to a 60 km line along [10, 20] km of its chainage.

    Line position = chainage + 15 km, so the exposure is [25, 35] km along the line and the
    line's midpoint (30 km) is opposite the pipeline's 15 km node.
    """
    n = int(30e3 / SEG_M)
    y = _pipe_admittance(coating_ohm_m2)
    zc_inv = np.sqrt(y / PIPE_Z)
    batch = ChainBatch.from_arrays(np.full(n, SEG_M), PIPE_Z, y, [0],
                                   start_termination_admittance_s=zc_inv,
                                   end_termination_admittance_s=zc_inv)
    system = ChainSystem(batch)
    mid = (np.arange(n) + 0.5) * SEG_M
    sec = np.flatnonzero((mid > 10e3) & (mid < 20e3))
    i_a, i_b = _line_currents(np.asarray(positions_m))
    return system, sec, mid[sec] + 15e3, i_a, i_b, np.sqrt(PIPE_Z * y)


def _closed_form(i_a, i_b, gamma, x_f, a=25e3, b=35e3):
    # docs/methods.md §8 (superposing the matched line's Green's function, Sunde 1968):
    # V(x_f) = [E_A(1 − e^{−γ(x_f−a)}) + E_B(1 − e^{−γ(b−x_f)})]/(2γ)
    e_a, e_b = E_PER_A * i_a, E_PER_A * i_b
    return (e_a * (1 - np.exp(-gamma * (x_f - a))) + e_b * (1 - np.exp(-gamma * (b - x_f)))) / (
        2 * gamma)


@pytest.mark.parametrize("coating", [1e5, 2000.0])
def test_mid_exposure_fault_matches_the_closed_form(coating):
    # Acceptance check of issue 14 (within 2 %); the chain solve is exact for a piecewise
    # uniform EMF, so the agreement is in fact to round-off.
    towers = np.arange(25e3 - 250.0, 35e3 + 251.0, 250.0)
    positions = np.r_[0.0, towers, 60e3]
    system, sec, sec_pos, i_a, i_b, gamma = _exposure_setup(coating, positions)
    scan = fault_scan.scan_fault_positions(
        system, sec, np.zeros(len(sec), int), sec_pos, np.full(len(sec), E_PER_A * SEG_M),
        positions[None, :], i_a[None, :], i_b[None, :])
    k_mid = int(np.flatnonzero(positions == 30e3)[0])
    assert i_a[k_mid] == pytest.approx(i_b[k_mid], rel=1e-9)  # equal terminals, midpoint
    want = abs(_closed_form(i_a[k_mid], i_b[k_mid], gamma, 30e3))
    seg_mid = int(15e3 / SEG_M)  # the segment starting at the node opposite the fault
    assert scan.segment_voltage_v[seg_mid] == pytest.approx(want, rel=0.02)
    assert scan.segment_voltage_v[seg_mid] == pytest.approx(want, rel=1e-6)
    assert scan.segment_position[seg_mid] == k_mid
    assert scan.segment_case[seg_mid] == 0
    # nothing induced on the pipeline far from the exposure is missed: the scan's worst
    # value along the pipe is at least the mid-exposure one
    assert scan.segment_voltage_v.max() >= want * (1 - 1e-9)


def test_fault_at_the_line_start_gives_the_one_direction_end_voltage():
    # docs/methods.md §5.2 / §8 closed form: the whole exposure driven one way by the current
    # fed from the far end, E = −e·I_B(0): |V| at the exposure's ends = |E|(1 − e^{−γL})/(2|γ|)
    # with L = 10 km; there the voltage peaks (matched line).
    positions = np.array([0.0])
    system, sec, sec_pos, i_a, i_b, gamma = _exposure_setup(1e5, positions)
    scan = fault_scan.scan_fault_positions(
        system, sec, np.zeros(len(sec), int), sec_pos, np.full(len(sec), E_PER_A * SEG_M),
        positions[None, :], i_a[None, :], i_b[None, :])
    e = E_PER_A * i_b[0]
    want = abs(e * (1 - np.exp(-gamma * 10e3)) / (2 * gamma))
    end_seg = int(20e3 / SEG_M) - 1  # ends at the 20 km node
    assert scan.segment_voltage_v[end_seg] == pytest.approx(want, rel=1e-6)
    assert scan.segment_voltage_v.max() == pytest.approx(want, rel=1e-6)


@pytest.mark.parametrize("shuffled", [False, True])
def test_scan_equals_direct_solves_for_several_assets_and_lines(shuffled):
    # Reference computation: for each segment's governing case and position, the EMF of that
    # fault written out explicitly and solved directly with LAPACK's pivoting tridiagonal
    # solver (no superposition). Two chains of one asset group with two lines (cases 0, 1)
    # and a second asset (case 2); the sections may come in any order.
    rng = np.random.default_rng(3)
    seg_len = np.full(65, 80.0)
    y = np.r_[np.full(25, _pipe_admittance(2e4)), np.full(20, _pipe_admittance(3e3)),
              np.full(20, 1e-9 + 3e-9j)]
    z = np.r_[np.full(45, PIPE_Z), np.full(20, 2e-4 + 8e-4j)]
    chain_start = [0, 25, 45, 60]  # the fourth chain has no exposure
    node_shunt = np.zeros(69, complex)
    node_shunt[[50, 55, 64]] = 0.1  # grounds on the fence-like third and fourth chains
    batch = ChainBatch.from_arrays(seg_len, z, y, chain_start, node_shunt,
                                   start_termination_admittance_s=[1e-2, 0, 0, 0],
                                   end_termination_admittance_s=[np.sqrt(y[0] / z[0]), 0.05, 0,
                                                                 0])
    system = ChainSystem(batch)
    # sections: group 0 = chains 0 and 1 (cases 0 and 1), group 1 = chain 2 (case 2)
    sec_seg = np.r_[np.arange(3, 40), np.arange(10, 30), np.arange(46, 58)]
    sec_case = np.r_[np.zeros(37, int), np.ones(20, int), np.full(12, 2)]
    sec_pos = np.r_[np.linspace(1000, 4000, 37), np.linspace(7000, 5200, 20),
                    np.linspace(300, 1300, 12)]
    sec_emf = (rng.normal(size=69) + 1j * rng.normal(size=69)) * 0.02
    positions = np.full((3, 6), np.nan)
    positions[0, :5] = [0, 1200, 2500, 3300, 9000]
    positions[1, :4] = [0, 5000, 6000, 9000]
    positions[2, :6] = [0, 500, 800, 900, 1250, 2000]
    cur_a = rng.normal(size=(3, 6)) * 1e3 + 1j * rng.normal(size=(3, 6)) * 1e3
    cur_b = rng.normal(size=(3, 6)) * 1e3 + 1j * rng.normal(size=(3, 6)) * 1e3
    given = np.random.default_rng(11).permutation(69) if shuffled else np.arange(69)
    scan = fault_scan.scan_fault_positions(system, sec_seg[given], sec_case[given],
                                           sec_pos[given], sec_emf[given], positions, cur_a,
                                           cur_b)
    chain_of_seg = np.repeat([0, 1, 2, 3], [25, 20, 15, 5])
    group_of_chain = np.array([0, 0, 1, -1])
    case_group = np.array([0, 0, 1])
    checked = 0
    for s in range(65):
        c, k = scan.segment_case[s], scan.segment_position[s]
        if c < 0:
            assert chain_of_seg[s] == 3 and scan.segment_voltage_v[s] == 0
            continue
        assert case_group[c] == group_of_chain[chain_of_seg[s]]
        x = positions[c, k]
        mine = sec_case == c
        emf_sec = np.where(sec_pos < x, sec_emf * cur_a[c, k], -sec_emf * cur_b[c, k])
        emf = np.zeros(65, complex)
        np.add.at(emf, sec_seg[mine], emf_sec[mine])
        direct = system.solve(emf)
        assert scan.segment_voltage_v[s] == pytest.approx(direct.segment_voltage_v[s], rel=1e-9)
        assert scan.segment_current_a[s] == pytest.approx(direct.segment_current_a[s],
                                                          rel=1e-9)
        # and no other case/position of its group gives more on this segment
        for c2 in np.flatnonzero(case_group == case_group[c]):
            for k2 in range(int(np.isfinite(positions[c2]).sum())):
                m2 = sec_case == c2
                e2 = np.where(sec_pos < positions[c2, k2], sec_emf * cur_a[c2, k2],
                              -sec_emf * cur_b[c2, k2])
                emf2 = np.zeros(65, complex)
                np.add.at(emf2, sec_seg[m2], e2[m2])
                assert system.solve(emf2).segment_voltage_v[s] <= (
                    scan.segment_voltage_v[s] * (1 + 1e-9))
        checked += 1
    assert checked == 60
    assert scan.chain_case[3] == -1 and not scan.chain_node_voltage_v[65:].any()
    # every node's worst |V| and every chain's worst |Σ EMF| over all cases and positions
    node_max, chain_emf = np.zeros(69), np.zeros(4)
    starts = np.r_[chain_start, 65]
    for c2 in range(3):
        for k2 in range(int(np.isfinite(positions[c2]).sum())):
            m2 = sec_case == c2
            e2 = np.where(sec_pos < positions[c2, k2], sec_emf * cur_a[c2, k2],
                          -sec_emf * cur_b[c2, k2])
            emf2 = np.zeros(65, complex)
            np.add.at(emf2, sec_seg[m2], e2[m2])
            node_max = np.maximum(node_max, np.abs(system.solve(emf2).node_voltage_v))
            sums = np.abs(np.add.reduceat(emf2, starts[:-1]))
            chain_emf = np.maximum(chain_emf, sums)
    np.testing.assert_allclose(scan.node_voltage_worst_v, node_max, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(scan.chain_emf_v, chain_emf, rtol=1e-9, atol=1e-9)
    # each chain's governing profile is a real fault scenario: its peak equals the chain max
    for ch, (lo, hi) in enumerate([(0, 25), (25, 45), (45, 60)]):
        assert np.abs(scan.chain_node_voltage_v[lo + ch:hi + ch + 1]).max() == pytest.approx(
            scan.segment_voltage_v[lo:hi].max(), rel=1e-12)
