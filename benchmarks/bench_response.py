"""Benchmark of the batched chain solver (script, not a test).

Solves 2,000,000 nodes in 40,000 chains (49 segments of 50 m each, the
line constants of pipelines, rails and fences mixed, a few breaks and
grounds), and prints nodes per second, median of several repeats:

- ``full``: ``ChainSystem(ChainBatch.from_arrays(...)).solve`` as production
  calls it — validation, assembly of the exact pi, LU pivots, one solve,
  currents and per-segment maxima;
- ``assemble``: ``ChainSystem(batch)`` — the exact pi and the matrix only;
- ``factorise``: LU pivots kept for reuse;
- ``extra case``: one more EMF case on a factorised system (solve + outputs);
- ``thevenin``: Z_th at one node of every chain (one extra solve).

Run: ``python benchmarks/bench_response.py [--chains N] [--segments M] [--repeats R]``.
Target: ≥ 5,000,000 nodes/s for ``full``.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from corridor.network.asset_models import (
    fence_line_constants,
    pipeline_line_constants,
    rail_line_constants,
)
from corridor.network.response import (
    ChainBatch,
    ChainSystem,
    matched_termination_admittance,
)


def solve_chains(segment_emf_v, chain_start, **arrays):
    """Validation, assembly, factors and one solve, as production does them."""
    batch = ChainBatch.from_arrays(chain_start=chain_start, **arrays)
    return ChainSystem(batch).solve(segment_emf_v)


def make_inputs(n_chains: int, n_seg: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    kinds = [
        pipeline_line_constants(0.5, 0.0095, 1e5, -1.0, 100.0, 50.0),
        rail_line_constants(5.0, 0.03, 100.0, 50.0),
        fence_line_constants(4, 1.25e-3, 3.0, 100.0, "metal", 1.5, 100.0, 50.0),
    ]
    kind = rng.integers(0, len(kinds), n_chains)
    z_k = np.array([complex(k.z_ohm_per_m) for k in kinds])
    y_k = np.array([complex(k.y_s_per_m) for k in kinds])
    n_total = n_chains * n_seg
    seg_kind = np.repeat(kind, n_seg)
    lengths = rng.uniform(40.0, 60.0, n_total)
    emf = (rng.normal(size=n_total) + 1j * rng.normal(size=n_total)) * lengths
    brk = rng.random(n_total) < 1e-3
    n_nodes = n_total + n_chains
    y_node = np.where(rng.random(n_nodes) < 1e-2, 0.1, 0.0).astype(complex)
    y_match = matched_termination_admittance(z_k, y_k)[kind]
    return dict(
        segment_length_m=lengths,
        series_impedance_ohm_per_m=z_k[seg_kind],
        shunt_admittance_s_per_m=y_k[seg_kind],
        segment_emf_v=emf,
        chain_start=np.arange(n_chains) * n_seg,
        node_shunt_admittance_s=y_node,
        segment_break=brk,
        start_termination_admittance_s=y_match,
        end_termination_admittance_s=y_match,
    )


def _median_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--chains", type=int, default=40_000)
    parser.add_argument("--segments", type=int, default=49, help="segments per chain")
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args(argv)
    inputs = make_inputs(args.chains, args.segments)
    n_nodes = args.chains * (args.segments + 1)
    emf = inputs["segment_emf_v"]
    batch_kw = {k: v for k, v in inputs.items() if k != "segment_emf_v"}

    solve_chains(**inputs)  # warm-up
    t_full = _median_time(lambda: solve_chains(**inputs), args.repeats)
    batch = ChainBatch.from_arrays(**batch_kw)
    t_assemble = _median_time(lambda: ChainSystem(batch), args.repeats)
    system = ChainSystem(batch)

    def factorise():
        system._pivots = None
        return system.pivots

    t_factor = _median_time(factorise, args.repeats)
    t_case = _median_time(lambda: system.solve(emf), args.repeats)
    peaks = system.peak_node(system.solve(emf).node_voltage_v)
    t_th = _median_time(lambda: system.thevenin_impedance(peaks), args.repeats)

    print(f"{n_nodes:,} nodes in {args.chains:,} chains, median of {args.repeats} repeats")
    for label, t in (("full", t_full), ("assemble", t_assemble), ("factorise", t_factor),
                     ("extra case", t_case), ("thevenin", t_th)):
        print(f"  {label:13s} {t * 1e3:8.1f} ms  {n_nodes / t / 1e6:6.2f} M nodes/s")


if __name__ == "__main__":
    main()
