"""Incremental re-screening: a cache of per-asset results keyed by their inputs.

Per-asset results are independent of the other assets (see
:func:`corridor.pipeline.subset_inputs`), so a rerun recomputes only the
assets whose inputs changed and loads the others from the cache.

Keys: :mod:`corridor.keys`.

Layout (open formats, no pickle; safe to delete at any time)::

    <cache>/corridor-cache.json            manifest: current generation, every file owned
    <cache>/<generation>/index.json        format, asset_id -> key, row counts and
                                           checksums per table, table schemas
    <cache>/<generation>/<table>.parquet   GeoParquet or Parquet, all assets of the run

The manifest marks the folder as corridor's: corridor deletes or replaces
only files it lists, and does not use a folder holding other files and no
manifest (see :class:`Cache`). One generation holds the rows of every asset
of the last run (one file per table, not per asset). A new generation is
listed in the manifest before it is written, then made current by replacing
the manifest atomically; older generations are deleted afterwards, so a
killed run leaves a usable cache. Each asset's rows are checked against
their row count and checksum on reading; an asset that fails is recomputed.
A cache that cannot be read or written only warns: the cache is optional.

The folder itself (manifest, generations, checksums, lock) is
:mod:`corridor.cache_store`; this module decides what to recompute.
"""

from __future__ import annotations

import logging
import time
from pathlib import Path

import numpy as np
import pandas as pd

from corridor.cache_store import FORMAT, Cache, asset_checksums, locked
from corridor.config import Config
from corridor.io.layers import Inputs
from corridor.keys import AssetKeys, asset_keys
from corridor.partitions import (
    COUNTS,
    PER_ASSET_TABLES,
    REJECTED,
    NotCacheable,
    merge_tables,
    partition_tables,
    read_table,
    run_from_tables,
    write_table,
)

log = logging.getLogger(__name__)

#: Names other modules and tests know from here (see :mod:`corridor.partitions` and
#: :mod:`corridor.cache_store`).
__all__ = ["FORMAT", "PER_ASSET_TABLES", "read_table", "write_table", "Cache",
           "asset_checksums", "incremental_compute", "locked"]


# -- incremental compute -----------------------------------------------------

def incremental_compute(cfg: Config, inputs: Inputs, stages: dict | None, folder: Path | None,
                        keys: AssetKeys | None = None, compute_fn=None):
    """Compute the per-asset results, recomputing only assets whose key changed.

    Parameters
    ----------
    cfg, inputs, stages
        As for :func:`corridor.pipeline.compute`.
    folder : Path or None
        The cache folder (created when missing). None, a folder that is not
        corridor's (:class:`Cache`) or one that cannot be read: every asset
        is computed, with a warning for the last two.
    keys : AssetKeys, optional
        Precomputed :func:`asset_keys`.
    compute_fn : callable, optional
        ``fn(cfg, inputs, stages) -> Run`` for the changed assets (a backend);
        default :func:`corridor.pipeline.compute`.

    Returns
    -------
    corridor.pipeline.Run
        The merged run, ready for :func:`corridor.pipeline.finalize`, with
        ``counts["assets_recomputed"]``, ``counts["assets_from_cache"]`` and
        ``counts["cache_entries_failed"]`` (cached assets whose rows failed
        their check and were recomputed).
    """
    from corridor.compute import compute as local_compute
    from corridor.compute import subset_inputs

    compute = compute_fn or local_compute
    t0 = time.perf_counter()
    timings = {}
    cache = Cache(folder) if folder is not None else None
    if cache is None or not cache.usable:
        run = compute(cfg, inputs, stages)
        run.counts["assets_recomputed"] = len(inputs.assets)
        run.counts["assets_from_cache"] = 0
        return run
    if keys is None:
        keys = asset_keys(cfg, inputs)
        timings["hash"] = round(time.perf_counter() - t0, 4)
    old = cache.keys
    ids = keys.table["asset_id"].astype(str).to_numpy()
    hit = np.array([old.get(a) == k for a, k in zip(ids, keys.table["key"], strict=True)],
                   dtype=bool)
    cached: dict[str, pd.DataFrame] = {}
    failed: set[str] = set()
    if hit.any():
        t_read = time.perf_counter()
        loaded = cache.load(set(ids[hit]))
        timings["cache_read"] = round(time.perf_counter() - t_read, 4)
        if loaded is None or REJECTED not in loaded[0] or COUNTS not in loaded[0]:
            hit[:] = False
        else:
            cached, failed = loaded
            if failed:
                hit &= ~np.isin(ids, list(failed))
    fresh: dict[str, pd.DataFrame] = {}
    while True:
        changed = ~hit
        if not changed.any():
            break
        sub = subset_inputs(inputs, changed)
        part = compute(cfg, sub, stages)
        timings.update(part.timings_s)
        try:
            fresh = partition_tables(part, sub)
        except NotCacheable as exc:
            log.warning("%s; computing every asset without the cache", exc)
            full = compute(cfg, inputs, stages)
            full.counts["assets_recomputed"] = len(inputs.assets)
            full.counts["assets_from_cache"] = 0
            return full
        if not hit.any() or set(fresh) == set(cached):
            break
        # the cached generation has other tables than this compute makes (other
        # stages): its rows cannot be merged; every asset is computed
        log.info("cache %s holds tables %s, this run makes %s; recomputing every asset",
                 folder, sorted(cached), sorted(fresh))
        hit[:] = False
        cached = {}
    names = list(dict.fromkeys([*fresh, *cached]))
    merged = merge_tables(inputs, {n: [cached.get(n), fresh.get(n)] for n in names})
    run = run_from_tables(cfg, inputs, merged)
    run.counts["assets_recomputed"] = int(changed.sum())
    run.counts["assets_from_cache"] = int(hit.sum())
    if failed:
        run.counts["cache_entries_failed"] = len(failed)
    removed = set(old) - set(ids)
    if changed.any() or removed or not cache.index:
        t1 = time.perf_counter()
        cache.store(keys.table, merged)
        timings["cache_write"] = round(time.perf_counter() - t1, 4)
    run.timings_s.update(timings)
    log.info("assets recomputed: %d, from cache: %d", run.counts["assets_recomputed"],
             run.counts["assets_from_cache"])
    return run
