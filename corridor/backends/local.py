"""The local backend: the whole compute in this process.

With one thread this is :func:`corridor.pipeline.compute` itself. With more
(``run.threads``), the assets are cut into spatial partitions of whole assets
(the dask backend's planner) computed on a thread pool — GEOS, numpy and
LAPACK release the GIL for most of the work — and merged as the cache merges
cached and fresh rows, so the rows equal a single-threaded run's.
"""

from __future__ import annotations

from pathlib import Path

from corridor.config import Config
from corridor.io.layers import Inputs


def compute_local(cfg: Config, inputs: Inputs, stages: dict | None = None,
                  work_dir: Path | None = None):
    """Exposure geometry and every per-asset stage, in this process.

    Parameters
    ----------
    cfg : Config
    inputs : Inputs
        Validated inputs (:func:`corridor.io.layers.read_inputs`).
    stages : dict, optional
        Per-asset stages, name -> ``fn(run)`` (:func:`corridor.steps.asset_stages`).
    work_dir : Path, optional
        Unused; accepted so that every backend has one signature.

    Returns
    -------
    corridor.pipeline.Run
    """
    from corridor.pipeline import compute

    threads = local_threads(cfg, inputs)
    if threads <= 1:
        return compute(cfg, inputs, stages)
    return compute_threaded(cfg, inputs, stages, threads)


#: Below this many estimated segments a run stays on one thread.
THREADED_ABOVE_SEGMENTS = 300_000


def local_threads(cfg: Config, inputs: Inputs) -> int:
    """Threads for this run: ``run.threads``, or with 0 (auto) the CPUs, at most 2,
    when the run is large enough to gain from them."""
    import os

    from corridor.backends.dask_backend import estimated_segments

    wanted = int(cfg.run.get("threads", 0))
    if wanted > 0:
        return wanted
    n_seg = float(estimated_segments(inputs.assets.geometry.to_numpy(),
                                     cfg.run["segment_length_m"]).sum())
    return min(2, os.cpu_count() or 1) if n_seg >= THREADED_ABOVE_SEGMENTS else 1


def compute_threaded(cfg: Config, inputs: Inputs, stages: dict | None, threads: int):
    """Partitions of whole assets computed on ``threads`` threads, merged in input order."""
    import time
    from concurrent.futures import ThreadPoolExecutor

    import numpy as np
    import pandas as pd

    from corridor import cache as cache_mod
    from corridor.backends.dask_backend import merge_partitions, plan_partitions
    from corridor.pipeline import compute, subset_inputs

    t0 = time.perf_counter()
    parts = plan_partitions(inputs.assets.geometry.to_numpy(), cfg.run["segment_length_m"],
                            threads)

    def one(index):
        mask = np.zeros(len(inputs.assets), bool)
        mask[index] = True
        sub = subset_inputs(inputs, mask)
        run = compute(cfg, sub, stages)
        tables = dict(cache_mod._per_asset_tables(run))
        tables[cache_mod._REJECTED] = cache_mod._compute_rejections(sub,
                                                                    run.inputs.rejected.rows)
        tables[cache_mod._COUNTS] = cache_mod._geometry_counts(run)
        return {"tables": tables, "timings_s": run.timings_s, "counts": dict(run.counts),
                "after": run.segment_table_after_grounding}

    with ThreadPoolExecutor(threads) as pool:
        results = list(pool.map(one, parts))
    t1 = time.perf_counter()
    run = merge_partitions(cfg, inputs, results, wire=False)
    afters = [r["after"] for r in results if r["after"] is not None]
    if afters:
        run.segment_table_after_grounding = pd.concat(afters, ignore_index=True)
    # stage times: the slowest partition's (they ran side by side)
    for r in results:
        for k, v in r["timings_s"].items():
            run.timings_s[k] = max(run.timings_s.get(k, 0.0), v)
    run.timings_s["merge"] = round(time.perf_counter() - t1, 4)
    run.timings_s["compute_wall"] = round(t1 - t0, 4)
    run.counts["threads"] = threads
    run.counts["partitions"] = len(parts)
    return run
