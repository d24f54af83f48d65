"""The streamed evaluation against direct computations on a small chain.

References: the node voltages of a single column come from the production
solver (ChainSystem.solve) once; the per-step values and the period means are
then recomputed here directly with numpy and pandas (``Series.rolling``), an
independent implementation of the same definitions (docs/methods.md §15), and
compared with the streamed, blocked evaluation for block lengths that split
the windows across blocks.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from corridor.network.response import ChainBatch, ChainSystem
from corridor.series.evaluate import SeriesInputs, evaluate_series


def _chain(n_seg=20):
    z = np.full(n_seg, 0.05 + 0.5j) / 1000.0  # Ω/m, a pipeline-like line (invented)
    y = np.full(n_seg, 1e-4 + 1e-5j)  # S/m
    batch = ChainBatch.from_arrays(np.full(n_seg, 50.0), z, y, np.array([0]))
    return ChainSystem(batch)


@pytest.mark.parametrize("block", [1, 5, 24, 1000])
@pytest.mark.parametrize("rolling", [True, False])
def test_streamed_values_equal_direct_ones(block, rolling):
    rng = np.random.default_rng(3)
    n_seg, n_t, w = 20, 100, 24
    system = _chain(n_seg)
    feature = np.zeros(n_seg, np.int64)
    chain = np.zeros(n_seg, np.int64)
    # two circuits in one component (phasors add), one in a second component
    rhs = np.zeros((n_seg, 3), complex)
    rhs[:8, 0] = 1.0 + 0.2j
    rhs[5:15, 1] = -0.5 + 0.1j
    rhs[10:, 2] = 0.3
    col_circuit = np.array([[0, 1, 2]])
    col_slot = np.array([[0, 0, 1]])
    ph = (rng.uniform(100, 900, (3, n_t))
          * np.exp(1j * rng.uniform(-0.3, 0.3, (3, n_t))))
    thr = rng.uniform(0.5, 1.5, (n_seg, 2)) * 1.0
    inp = SeriesInputs(thr, np.zeros(n_seg, bool), np.ones(n_seg, bool), ph, w, rolling,
                       block, np.array([0]), 11)
    res = evaluate_series(system, feature, chain, rhs, col_circuit, col_slot, inp)
    # direct: node voltages per column once, then every step by hand
    unit = system.solve(rhs, current_cases=[]).node_voltage_v
    node = np.abs(unit[:, :2] @ ph[:2]) + np.abs(unit[:, 2:] @ ph[2:])
    v = np.maximum(node[:-1], node[1:])  # one chain: segment s has nodes s, s + 1
    assert np.allclose(res.peak_v, v.max(axis=1), rtol=1e-12)
    assert np.array_equal(res.peak_step, v.argmax(axis=1))
    assert np.array_equal(res.steps_above, (v[:, None, :] >= thr[:, :, None]).sum(axis=2))
    assert np.array_equal(res.steps_above_any, (v >= thr.min(axis=1)[:, None]).sum(axis=1))
    assert res.asset_steps_above[0] == int((v >= thr.min(axis=1)[:, None]).any(axis=0).sum())
    means = pd.DataFrame(v.T).rolling(w).mean().to_numpy().T  # mean of the w steps ending at t
    if not rolling:
        keep = (np.arange(n_t) + 1) % w == 0
        means = np.where(keep[None, :], means, np.nan)
    assert np.allclose(res.mean_max_v, np.nanmax(means, axis=1), rtol=1e-12)
    assert np.array_equal(res.mean_end_step, np.nanargmax(means, axis=1))
    curve = np.sort(v.max(axis=0))[::-1][np.minimum((np.linspace(0, 1, 11) * n_t).astype(int),
                                                    n_t - 1)]
    assert np.allclose(res.asset_peak_v[0], curve, rtol=1e-12)


def test_screen_bound_is_an_upper_bound_and_hours_stay_exact():
    rng = np.random.default_rng(5)
    n_seg, n_t = 20, 60
    system = _chain(n_seg)
    rhs = np.zeros((n_seg, 1), complex)
    rhs[:6, 0] = 1.0
    ph = rng.uniform(0, 500, (1, n_t)).astype(complex)
    unit = system.solve(rhs, current_cases=[]).node_voltage_v
    node = np.abs(unit[:, :1] @ ph)
    v = np.maximum(node[:-1], node[1:])
    thr = np.full((n_seg, 1), np.median(v))
    thr[:10] = 10.0 * v.max()  # far above: these segments need no step
    common = (np.zeros(n_seg, np.int64), np.zeros(n_seg, np.int64), rhs, np.array([[0]]),
              np.array([[0]]))
    exact = evaluate_series(system, *common, SeriesInputs(
        thr, np.zeros(n_seg, bool), np.zeros(n_seg, bool), ph, 24))
    screened = evaluate_series(system, *common, SeriesInputs(
        thr, np.zeros(n_seg, bool), np.zeros(n_seg, bool), ph, 24, screen_below=0.5))
    b = screened.bounded
    assert b.any() and (~b).any()
    assert (screened.peak_v[b] >= exact.peak_v[b]).all()
    assert (screened.peak_v[b] < 0.5 * thr[b, 0]).all()
    assert np.array_equal(screened.steps_above, exact.steps_above)
    assert np.array_equal(screened.peak_v[~b], exact.peak_v[~b])
