"""Benchmark: reading, exposure geometry and writing, in asset segments per second.

``python benchmarks/bench_exposure.py --line-km 10000 --asset-km 100000``
generates the synthetic network (benchmarks/network.py), then times each
step several times and prints medians and the peak memory of the process.
"""

from __future__ import annotations

import argparse
import resource
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

import network  # noqa: E402

from corridor.compute import segment_frame, stage_geometry  # noqa: E402
from corridor.config import load_config  # noqa: E402
from corridor.io.layers import read_inputs  # noqa: E402
from corridor.io.outputs import write_layer  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--line-km", type=float, default=10_000.0)
    ap.add_argument("--asset-km", type=float, default=100_000.0)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--work", type=Path, default=Path("benchmarks/_work/exposure"))
    a = ap.parse_args()
    t = time.perf_counter()
    cfg_path = network.write(a.work, a.line_km, a.asset_km)
    print(f"network generated in {time.perf_counter() - t:.1f} s")
    cfg = load_config(cfg_path)
    reads, geoms, writes = [], [], []
    n_seg = 0
    for _ in range(a.repeat):
        t = time.perf_counter()
        inputs = read_inputs(cfg)
        reads.append(time.perf_counter() - t)
        t = time.perf_counter()
        geo = stage_geometry(cfg, inputs)
        geoms.append(time.perf_counter() - t)
        n_seg = len(geo.segments)
        table = segment_frame(inputs, geo)
        with tempfile.TemporaryDirectory(dir=a.work) as tmp:
            t = time.perf_counter()
            write_layer(table, Path(tmp) / "s.gpkg", "segments")
            writes.append(time.perf_counter() - t)
        del table, geo
    peak_gb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024 ** 2
    print(f"assets {len(inputs.assets)}  segments {n_seg}  pairs: see run")
    for name, ts in (("read", reads), ("exposure", geoms), ("write", writes)):
        med = statistics.median(ts)
        print(f"{name:9s} median {med:7.2f} s   {n_seg / med:12,.0f} segments/s   (runs: "
              + ", ".join(f"{x:.2f}" for x in ts) + ")")
    print(f"peak memory {peak_gb:.2f} GB")


if __name__ == "__main__":
    main()
