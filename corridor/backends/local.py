"""The local backend: the whole compute in this process.

A small run is :func:`corridor.pipeline.compute` itself. A large one (or one
with ``run.threads`` above 1) is cut into partitions of consecutive whole
assets (:func:`corridor.partitions.input_order_partitions`) of at most about
:data:`LOCAL_SEGMENTS_PER_PARTITION` segments, computed on a pool of
``run.threads`` threads — GEOS, numpy and the compiled chain loops release the GIL for most of
the work — and merged as the cache merges cached and fresh rows, so the rows
equal a single-partition run's. Only the partitions in flight hold their
working arrays (coupling, the response system, the grounding loop's state):
peak memory grows with the partition size and the thread count, not with the
network.
"""

from __future__ import annotations

import logging
import math
from pathlib import Path

import numpy as np

from corridor.config import Config
from corridor.io.layers import Inputs

#: Below this many estimated segments a run stays in one piece on one thread.
THREADED_ABOVE_SEGMENTS = 300_000

#: Estimated segments per partition of the local backend when
#: ``run.partitions`` is 0. A partition in flight holds about 3 kB of working
#: arrays per segment (measured on the benchmark network), so two threads on
#: 250,000-segment partitions hold about 1.5 GB besides the finished rows.
LOCAL_SEGMENTS_PER_PARTITION = 250_000

log = logging.getLogger(__name__)


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
    from corridor.compute import compute

    threads, n_parts = local_plan(cfg, inputs)
    if n_parts <= 1:
        return compute(cfg, inputs, stages)
    return compute_threaded(cfg, inputs, stages, threads, n_parts)


def local_threads(cfg: Config, inputs: Inputs) -> int:
    """Threads for this run: ``run.threads``, or with 0 (auto) the CPUs, at most 2,
    when the run is large enough to gain from them."""
    return local_plan(cfg, inputs)[0]


def local_plan(cfg: Config, inputs: Inputs) -> tuple[int, int]:
    """Threads and wanted partitions for this run.

    Returns
    -------
    threads : int
        ``run.threads``; with 0 (auto), the CPUs (at most 2) when the run has
        :data:`THREADED_ABOVE_SEGMENTS` estimated segments or more, else 1.
    partitions : int
        ``run.partitions`` when set; else 1 for a small run on one thread,
        and otherwise max(threads, ceil(segments / LOCAL_SEGMENTS_PER_PARTITION)).
    """
    import os

    from corridor.partitions import estimated_segments

    n_seg = float(estimated_segments(inputs.assets.geometry.to_numpy(),
                                     cfg.run.segment_length_m).sum())
    large = n_seg >= THREADED_ABOVE_SEGMENTS
    wanted = int(cfg.run.threads)
    threads = wanted if wanted > 0 else (min(2, os.cpu_count() or 1) if large else 1)
    fixed = int(cfg.run.partitions)
    if fixed > 0:
        return threads, min(fixed, max(len(inputs.assets), 1))
    if not large and threads <= 1:
        return threads, 1
    auto = math.ceil(n_seg / LOCAL_SEGMENTS_PER_PARTITION)
    return threads, min(max(threads, auto), max(len(inputs.assets), 1))


def compute_threaded(cfg: Config, inputs: Inputs, stages: dict | None, threads: int,
                     n_partitions: int | None = None):
    """Partitions of consecutive whole assets computed on ``threads`` threads, merged in
    input order (a concatenation: the partitions follow each other in input order).

    Parameters
    ----------
    n_partitions : int, optional
        Wanted partitions (default: ``threads``); see
        :func:`corridor.partitions.input_order_partitions`.
    """
    import threading
    import time
    from concurrent.futures import ThreadPoolExecutor

    from corridor import partitions, progress
    from corridor.compute import compute, subset_inputs
    from corridor.memory import release_free_memory

    t0 = time.perf_counter()
    # runs of consecutive assets: the merge then needs no reordering copy
    parts = partitions.input_order_partitions(inputs.assets.geometry.to_numpy(),
                                              cfg.run.segment_length_m, n_partitions or threads)
    lock = threading.Lock()
    bar = progress.bar("compute", total=len(parts))
    done = [0]
    log.info("%d assets in %d partitions of consecutive assets on %d thread(s)", len(inputs.assets),
             len(parts), threads)

    def one(index):
        t_part = time.perf_counter()
        mask = np.zeros(len(inputs.assets), bool)
        mask[index] = True
        sub = subset_inputs(inputs, mask)
        run = compute(cfg, sub, stages, step_log_level=logging.DEBUG)
        tables = partitions.partition_tables(run, sub)
        # segment_table_after_grounding travels as the per-asset table "after_grounding"
        out = {"tables": tables, "timings_s": run.timings_s, "counts": dict(run.counts)}
        with lock:
            done[0] += 1
            log.info("partition %d/%d done: %d assets, %d segments in %.1f s", done[0],
                     len(parts), len(index),
                     0 if run.segment_table is None else len(run.segment_table),
                     time.perf_counter() - t_part)
            bar.update()
        return out

    if threads <= 1:  # in this thread: nothing to gain from a pool, and profilers see it
        with bar:
            results = [one(p) for p in parts]
    else:
        with bar, ThreadPoolExecutor(threads) as pool:
            results = list(pool.map(one, parts))
    release_free_memory()  # the partitions' working arrays, before the merge copies
    t1 = time.perf_counter()
    pieces: dict[str, list] = {}
    for r in results:
        for name, table in r["tables"].items():
            pieces.setdefault(name, []).append(table)
        r["tables"] = {}  # the partitions' frames go as soon as their table is merged
    run = partitions.merge(cfg, inputs, pieces)
    release_free_memory()
    # stage times: summed over the partitions (CPU-side work), divided by the
    # threads that ran them side by side — an estimate of each stage's share of
    # the wall time; compute_wall is the measured wall time
    for r in results:
        for k, v in r["timings_s"].items():
            run.timings_s[k] = run.timings_s.get(k, 0.0) + v
    for k in list(run.timings_s):
        run.timings_s[k] = round(run.timings_s[k] / min(threads, len(parts)), 4)
    run.timings_s["merge"] = round(time.perf_counter() - t1, 4)
    run.timings_s["compute_wall"] = round(t1 - t0, 4)
    run.counts["threads"] = threads
    run.counts["partitions"] = len(parts)
    return run
