"""Throughput of the earth-return mutual impedance paths (run: python benchmarks/bench_physics.py).

Prints the median of several repeats, in segment–conductor impedances per second on
one core. Pin BLAS/numexpr threads with OMP_NUM_THREADS=1 for a one-core figure.
"""

import os
import statistics
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from corridor.physics import earth_return as er  # noqa: E402
from corridor.physics.constants import MU0_H_PER_M  # noqa: E402


def _rate(fn, n, repeats=7):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return n / statistics.median(times)


def main():
    rng = np.random.default_rng(0)
    n = 1_000_000
    hi = rng.uniform(12.0, 40.0, n)  # conductors
    hj = rng.uniform(-2.0, 3.0, n)  # assets, buried or low
    x = rng.uniform(0.0, 3000.0, n)
    rho = 10 ** rng.uniform(1.0, 4.0, n)
    t0 = time.perf_counter()
    er.carson_correction_table.cache_clear()
    er.carson_correction_table()
    print(f"table build: {time.perf_counter() - t0:.3f} s")
    r = _rate(lambda: er.mutual_impedance(hi, hj, x, rho, 50.0), n)
    print(f"dispatcher mutual_impedance:          {r / 1e6:6.2f} M/s")
    r = _rate(lambda: er.mutual_impedance(hi, hj, x, rho, 50.0, low_frequency_k_bound=0.0), n)
    print(f"dispatcher without the LF form:       {r / 1e6:6.2f} M/s")
    r = _rate(lambda: er.low_frequency_mutual_impedance(np.hypot(x, hi - hj), rho, 50.0), n)
    print(f"low-frequency form:                   {r / 1e6:6.2f} M/s")
    m = 20_000
    k = np.hypot(x[:m], hi[:m] + hj[:m]) * np.sqrt(2 * np.pi * 50.0 * MU0_H_PER_M / rho[:m])
    theta = np.arctan2(x[:m], hi[:m] + hj[:m])
    r = _rate(lambda: er.carson_correction_dimensionless(k, theta), m, 3)
    print(f"exact Carson J (series/asymptotic):   {r / 1e3:6.1f} k/s  ({1e6 / r:.2f} µs each)")
    a = x[:m] + 1.0
    r = _rate(lambda: er.surface_mutual_impedance(a, rho[:m], 50.0), m, 3)
    print(f"Sunde surface form (scipy kv):        {r / 1e3:6.1f} k/s")


if __name__ == "__main__":
    main()
