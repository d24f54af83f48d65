"""Cases summed by magnitude (the normal-load worst case over unknown relative angles,
docs/methods.md §8) against an independent solve of every case on its own.

Reference: SciPy's banded LU with partial pivoting (``scipy.linalg.solve_banded``,
LAPACK gbsv) on the same nodal matrix, one right-hand side per case, then the sums of
magnitudes written out. A summed case with no source on a chain is skipped there by the
solver, so the cases are given sources on some chains only.
"""

import numpy as np
from scipy.linalg import solve_banded

from corridor.network.response import ChainBatch, ChainSystem


def _system():
    rng = np.random.default_rng(17)
    n_seg = 120
    z = np.r_[np.full(50, 5e-5 + 6e-4j), np.full(40, 2e-4 + 8e-4j), np.full(30, 1e-4 + 7e-4j)]
    y = np.r_[np.full(50, 2e-5 + 1e-6j), np.full(40, 1e-9 + 3e-9j), np.full(30, 5e-6 + 0j)]
    node_shunt = np.zeros(n_seg + 4, complex)
    node_shunt[[60, 75, 100]] = 0.2  # grounds (fence-like middle chain, a rail)
    brk = np.zeros(n_seg, bool)
    brk[20] = True  # an insulating joint in the first chain
    batch = ChainBatch.from_arrays(rng.uniform(20, 80, n_seg), z, y, [0, 50, 70, 90],
                                   node_shunt, brk,
                                   start_termination_admittance_s=[1e-2, 0, 0.05, 0],
                                   end_termination_admittance_s=[0, 0.03, 0, 1e-3])
    return ChainSystem(batch), rng


def _reference(system, emf, node_current):
    batch = system.batch
    diag, off = system.tridiagonal
    ab = np.zeros((3, batch.n_nodes), complex)
    ab[0, 1:] = off[:-1]
    ab[1] = diag
    ab[2, :-1] = off[:-1]
    first = batch.segment_start_node
    v = np.zeros((batch.n_nodes, emf.shape[1]), complex)
    i_start = np.zeros((batch.n_segments, emf.shape[1]), complex)
    i_end = np.zeros_like(i_start)
    for k in range(emf.shape[1]):
        rhs = node_current[:, k].copy()
        j = emf[:, k] * system.injection_s
        np.add.at(rhs, first, -j)
        np.add.at(rhs, first + 1, j)
        v[:, k] = solve_banded((1, 1), ab, rhs)
        through = (v[first, k] - v[first + 1, k]) * system.y_series_s + j
        i_start[:, k] = system.y_half_s * v[first, k] + through
        i_end[:, k] = through - system.y_half_s * v[first + 1, k]
    return v, i_start, i_end


def test_kept_cases_and_sums_of_magnitudes_equal_separate_banded_solves():
    system, rng = _system()
    batch = system.batch
    n_case = 7
    emf = (rng.normal(size=(batch.n_segments, n_case))
           + 1j * rng.normal(size=(batch.n_segments, n_case)))
    chain = batch.segment_chain
    emf[:, 3][chain != 1] = 0  # summed cases with a source on some chains only
    emf[:, 4][chain == 0] = 0
    emf[:, 5] = 0
    node_current = np.zeros((batch.n_nodes, n_case), complex)
    node_current[:, 1] = rng.normal(size=batch.n_nodes)  # a kept case of injections only
    node_current[10, 5] = 2.0 - 1.0j  # a summed case whose only source is one node
    sol = system.solve(emf, node_current, sum_from=2)
    summed = sol.summed
    v, i_start, i_end = _reference(system, emf, node_current)
    np.testing.assert_allclose(sol.node_voltage_v, v[:, :2], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(sol.segment_current_start_a, i_start[:, :2], rtol=1e-9,
                               atol=1e-12)
    np.testing.assert_allclose(sol.segment_current_end_a, i_end[:, :2], rtol=1e-9,
                               atol=1e-12)
    np.testing.assert_allclose(summed.node_voltage_v, np.abs(v[:, 2:]).sum(axis=1),
                               rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(summed.segment_current_start_a,
                               np.abs(i_start[:, 2:]).sum(axis=1), rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(summed.segment_current_end_a,
                               np.abs(i_end[:, 2:]).sum(axis=1), rtol=1e-9, atol=1e-12)


def test_no_summed_cases_gives_zero_sums():
    system, rng = _system()
    emf = rng.normal(size=(system.batch.n_segments, 2)) + 0j
    sol = system.solve(emf, sum_from=2)
    summed = sol.summed
    v, _, _ = _reference(system, emf, np.zeros((system.batch.n_nodes, 2), complex))
    np.testing.assert_allclose(sol.node_voltage_v, v, rtol=1e-9, atol=1e-12)
    assert not summed.node_voltage_v.any() and not summed.segment_current_start_a.any()
