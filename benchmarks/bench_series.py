"""Cost of a load time series against the per-asset compute of one snapshot run.

``python benchmarks/bench_series.py --line-km 100 --asset-km 1000 --steps 8760``

On the synthetic benchmark network (``benchmarks/network.py``) at a reduced
scale: the per-asset compute of one snapshot run (expose, couple, respond,
assess, ground, as :func:`corridor.compute.compute` runs them) and then the
load-series stage (:func:`corridor.series.stage.stage_series`) on the same run
with an invented hourly series of ``--steps`` steps for every line. Both are
process CPU times (set ``OMP_NUM_THREADS=1`` for one thread). Both grow in
proportion to the segments, so their ratio carries over to the full network
(budget: the series adds no more than the per-asset compute, ratio ≤ 1).
"""

from __future__ import annotations

import argparse
import dataclasses
import hashlib
import logging
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))

import network  # noqa: E402

from corridor.compute import compute  # noqa: E402
from corridor.config import load_config  # noqa: E402
from corridor.io.layers import read_inputs  # noqa: E402
from corridor.series.settings import SeriesSettings  # noqa: E402
from corridor.series.stage import stage_series  # noqa: E402
from corridor.steps import asset_stages  # noqa: E402


def write_series(path: Path, line_ids, steps: int, seed: int = 11) -> None:
    """An invented hourly series for every line: daily and yearly cycles and noise."""
    rng = np.random.default_rng(seed)
    hours = np.arange(steps)
    daily = 0.75 + 0.25 * np.sin(2 * np.pi * (hours % 24 - 6) / 24)
    yearly = 0.85 + 0.15 * np.cos(2 * np.pi * hours / 8760)
    stamps = pd.Timestamp("2026-01-01T00:00:00Z") + pd.to_timedelta(hours, unit="h")
    text = stamps.strftime("%Y-%m-%dT%H:%M:%SZ").to_numpy()
    frames = []
    for line in line_ids:
        peak = rng.uniform(300.0, 1200.0)
        current = peak * daily * yearly * rng.uniform(0.9, 1.1, steps)
        frames.append(pd.DataFrame({"timestamp": text, "line_id": line,
                                    "current_a": np.round(current, 1)}))
    pd.concat(frames, ignore_index=True).to_csv(path, index=False)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--line-km", type=float, default=100.0)
    ap.add_argument("--asset-km", type=float, default=1000.0)
    ap.add_argument("--steps", type=int, default=8760)
    ap.add_argument("--screen-below", type=float, default=0.5,
                    help="[load_series] screen_below (0: step every segment)")
    ap.add_argument("--work", type=Path, default=Path("benchmarks/_work/series"))
    a = ap.parse_args()
    logging.getLogger("corridor").setLevel(logging.WARNING)
    cfg = load_config(network.write(a.work, a.line_km, a.asset_km))
    inputs = read_inputs(cfg)
    stages = asset_stages()
    stages.pop("series")
    c0 = time.process_time()
    run = compute(cfg, inputs, stages)
    snapshot_s = time.process_time() - c0
    path = a.work / "loads.csv"
    write_series(path, inputs.lines["line_id"].astype(str), a.steps)
    settings = SeriesSettings(path.resolve(), "csv",
                              sha256=hashlib.sha256(path.read_bytes()).hexdigest(),
                              screen_below=a.screen_below)
    run.config = dataclasses.replace(cfg, load_series=settings)
    from corridor.series.stage import load_series_of

    c1 = time.process_time()
    load_series_of(run.config, inputs.lines)
    read_s = time.process_time() - c1
    c2 = time.process_time()
    stage_series(run)
    series_s = time.process_time() - c2
    n_seg = run.counts["segments"]
    print(f"network: {a.line_km:.0f} km lines, {a.asset_km:.0f} km assets,"
          f" {len(inputs.assets)} assets, {n_seg} segments; series {a.steps} steps,"
          f" {len(inputs.lines)} lines")
    print(f"per-asset compute, snapshot: {snapshot_s:8.2f} s CPU"
          f"  ({', '.join(f'{k} {v:.2f}' for k, v in run.timings_s.items())})")
    print(f"load series read and check:  {read_s:8.2f} s CPU")
    print(f"load series stage:           {series_s:8.2f} s CPU (the read above not included)")
    total = read_s + series_s
    print(f"ratio (read + stage)/snapshot: {total / snapshot_s:6.2f} (budget <= 1)")
    print(f"per segment and step:        {series_s / max(n_seg * a.steps, 1) * 1e9:8.2f} ns")
    t = run.segment_table
    print(f"segments with hours above a limit: {(t['hours_above_limit_h'] > 0).sum()};"
          f" stepped {(~t['series_bounded']).sum()} (the rest bounded below"
          f" {settings.screen_below:g} x every limit)")


if __name__ == "__main__":
    main()
