"""Full run vs rerun with nothing changed, on the synthetic benchmark network.

``python benchmarks/bench_incremental.py --line-km 2000 --asset-km 20000 --repeat 3``

Each repeat: a full run (cache deleted first), then a rerun with the cache
warm and no input changed; both through :func:`corridor.runner.publish`
(read, hash, compute or load, finalize, change report, write, swap). Prints
the medians and their ratio (target: rerun < 10 % of the full run).
"""

from __future__ import annotations

import argparse
import logging
import shutil
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import network  # noqa: E402

from corridor.config import load_config  # noqa: E402
from corridor.runner import cache_folder, publish  # noqa: E402
from corridor.steps import asset_stages, run_stages  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--line-km", type=float, default=2000.0)
    ap.add_argument("--asset-km", type=float, default=20000.0)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--work", type=Path, default=Path("benchmarks/_work/incremental"))
    a = ap.parse_args()
    logging.getLogger("corridor").setLevel(logging.WARNING)
    cfg_path = network.write(a.work, a.line_km, a.asset_km)
    cfg = load_config(cfg_path)
    out = cfg.output_dir
    cache = cache_folder(cfg, out)
    full, rerun, timings = [], [], {}
    for _ in range(a.repeat):
        if cache is not None and cache.exists():
            shutil.rmtree(cache)
        t0 = time.perf_counter()
        run = publish(cfg, out, asset_stages(), run_stages())
        full.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        run2 = publish(cfg, out, asset_stages(), run_stages())
        rerun.append(time.perf_counter() - t0)
        assert run2.counts["assets_recomputed"] == 0, run2.counts
        timings = {"full": run.timings_s, "rerun": run2.timings_s}
    mf, mr = statistics.median(full), statistics.median(rerun)
    print(f"network: {a.line_km:.0f} km lines, {a.asset_km:.0f} km assets,"
          f" {run.counts['assets']} assets, {run.counts['segments']} segments")
    print(f"full run   median {mf:7.2f} s  ({', '.join(f'{t:.2f}' for t in full)})")
    print(f"rerun      median {mr:7.2f} s  ({', '.join(f'{t:.2f}' for t in rerun)})")
    print(f"ratio rerun/full: {mr / mf:.3f} (target < 0.10)")
    for k, v in timings.items():
        print(f"stages {k}: {v}")


if __name__ == "__main__":
    main()
