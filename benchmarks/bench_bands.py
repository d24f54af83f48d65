"""Cost of uncertainty bands: the demo's 32-member ensemble and the cost per member.

``python benchmarks/bench_bands.py`` measures

1. the demo with bands (``config/demo_bands.toml``, 32 members over soil polygons,
   coating, posts, grounds, load and fault current): the per-asset compute with and
   without the ensemble (budget: the ensemble under 30 s);
2. a reduced benchmark network (``benchmarks/network.py``, default 100 km of lines and
   1,000 km of assets) with a few members, twice: members that change the soil (every
   member solved again) and members that change only the load and fault currents (one
   solve, scaled); the cost per member and per segment, extrapolated to the full
   benchmark network (2,473,662 segments: DEVELOPERS.md, "Performance").

The figures go to DEVELOPERS.md ("Uncertainty bands: cost"). Not a unit test: nothing
here asserts a time.
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

#: Segments of the full benchmark network (10,000 km lines / 100,000 km assets).
FULL_NETWORK_SEGMENTS = 2_473_662


def _compute(cfg, inputs):
    """The per-asset compute: the run, its wall time and its process CPU time [s]."""
    from corridor.compute import compute
    from corridor.steps import asset_stages

    t0, c0 = time.perf_counter(), time.process_time()
    run = compute(cfg, inputs, asset_stages())
    return run, time.perf_counter() - t0, time.process_time() - c0


def demo(repeat: int) -> None:
    from corridor.config import load_config
    from corridor.io.layers import read_inputs

    cfg = load_config(ROOT / "config" / "demo_bands.toml")
    inputs = read_inputs(cfg)
    plain = dataclasses.replace(cfg, uncertainty=None)
    for i in range(repeat):
        _, base_s, base_cpu = _compute(plain, inputs)
        run, total_s, total_cpu = _compute(cfg, inputs)
        print(f"demo run {i + 1}: per-asset compute {base_s:.2f} s wall ({base_cpu:.2f} s CPU)"
              f" without bands, {total_s:.2f} s wall ({total_cpu:.2f} s CPU) with"
              f" {cfg.uncertainty.members} members (bands step {run.timings_s['bands']:.2f} s"
              f" wall; budget 30 s); {len(run.segment_table)} segments", flush=True)


def network(line_km: float, asset_km: float, members: int, work: Path) -> None:
    from bench_scale import network_config

    from corridor.config import load_config
    from corridor.io.layers import read_inputs
    from corridor.uncertainty.settings import Bands, Range

    cfg_path = network_config(work, line_km, asset_km, 7)
    cfg = load_config(cfg_path)
    inputs = read_inputs(cfg)
    _compute(cfg, inputs)  # warm-up: imports, limit set, caches
    runs = [_compute(cfg, inputs) for _ in range(2)]
    run, base_s, base_cpu = min(runs, key=lambda r: r[2])
    n_seg = len(run.segment_table)
    print(f"network {line_km:g} km lines / {asset_km:g} km assets: {n_seg} segments,"
          f" per-asset compute {base_s:.2f} s wall ({base_cpu:.2f} s CPU) without bands",
          flush=True)
    cases = {
        "soil, coating, load, fault (solved again per member)": (
            Range("soil_resistivity_factor", 0.5, 2.0, "log-uniform"),
            Range("coating_resistance_factor", 0.3, 3.0, "log-uniform"),
            Range("load_current_factor", 0.8, 1.2), Range("fault_current_factor", 0.85, 1.15)),
        "load and fault only (one solve, scaled)": (
            Range("load_current_factor", 0.8, 1.2), Range("fault_current_factor", 0.85, 1.15)),
    }
    for label, ranges in cases.items():
        cpu = {}
        for m in (members, 3 * members):
            banded = dataclasses.replace(cfg, uncertainty=Bands(m, 1, ranges))
            _, _, total_cpu = _compute(banded, inputs)
            cpu[m] = total_cpu - base_cpu
        per_member = (cpu[3 * members] - cpu[members]) / (2 * members)
        fixed = max(cpu[members] - members * per_member, 0.0)
        scale = FULL_NETWORK_SEGMENTS / n_seg
        print(f"  {label}: ensemble CPU {cpu[members]:.2f} s for {members} members,"
              f" {cpu[3 * members]:.2f} s for {3 * members}: {per_member:.3f} s per member"
              f" ({per_member / n_seg * 1e6:.1f} us per segment) plus {fixed:.2f} s once;"
              f" extrapolated to the full network ({scale:.0f}x): {per_member * scale:.0f} s"
              f" per member, {(fixed + 32 * per_member) * scale / 60:.1f} min CPU for 32",
              flush=True)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=2, help="demo runs")
    ap.add_argument("--line-km", type=float, default=100.0)
    ap.add_argument("--asset-km", type=float, default=1_000.0)
    ap.add_argument("--members", type=int, default=4, help="members on the network")
    ap.add_argument("--work", type=Path, default=HERE / "_work" / "bands")
    ap.add_argument("--skip-network", action="store_true")
    a = ap.parse_args()
    demo(a.repeat)
    if not a.skip_network:
        network(a.line_km, a.asset_km, a.members, a.work)


if __name__ == "__main__":
    main()
