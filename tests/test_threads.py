"""The local backend on two threads gives the rows of a one-thread run.

Per-asset results do not depend on which other assets are computed with them
(the project's design contract, also relied on by the cache and the dask
backend), so merged partitions must equal the single run row for row.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from corridor.backends import override_run
from corridor.backends.local import compute_local, local_threads
from corridor.compute import compute, finalize
from corridor.config import load_config
from corridor.io.layers import read_inputs
from corridor.steps import asset_stages, run_stages

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))

import network  # noqa: E402

TABLES = ("segment_table", "exposure_table", "sites", "grounding_sites",
          "assets", "hazards")


def _table(run, name):
    return getattr(run, name)


def _same(a, b, where):
    a, b = a.reset_index(drop=True), b.reset_index(drop=True)
    assert list(a.columns) == list(b.columns), where
    assert len(a) == len(b), where
    for col in a.columns:
        va, vb = a[col], b[col]
        if hasattr(va, "geom_equals_exact"):
            assert va.geom_equals_exact(vb, 0.0).all(), f"{where}: {col}"
        elif pd.api.types.is_float_dtype(va):
            # rtol 1e-12: the same arithmetic on the same rows
            np.testing.assert_allclose(vb, va, rtol=1e-12, equal_nan=True,
                                       err_msg=f"{where}: {col}")
        else:
            assert pd.Series(va).equals(pd.Series(vb)), f"{where}: {col}"


@pytest.mark.parametrize(("source", "threads", "partitions"), [
    ("demo", 2, 0), ("network", 2, 0),
    # many small partitions (the bounded-memory path of large runs), on one and two threads
    ("network", 1, 7), ("network", 2, 7)])
def test_partitions_equal_one_piece(source, threads, partitions, tmp_path):
    if source == "demo":
        cfg = load_config(ROOT / "config" / "demo.toml")
    else:
        cfg = load_config(network.write(tmp_path, 200.0, 1000.0, seed=3))
    inputs = read_inputs(cfg)
    one = finalize(compute(cfg, inputs, asset_stages()), run_stages())
    cfg2 = override_run(cfg, threads=threads, partitions=partitions)
    assert local_threads(cfg2, inputs) == threads
    two = finalize(compute_local(cfg2, read_inputs(cfg2), asset_stages()), run_stages())
    assert two.counts["partitions"] >= max(2, min(partitions, len(inputs.assets)))
    for name in TABLES:
        _same(_table(one, name), _table(two, name), name)
    assert one.inputs.rejected.rows == two.inputs.rejected.rows
    for key in ("segments", "pairs", "sections", "exposures", "grounding_sites",
                "assets_unresolved", "segments_exceeding"):
        assert one.counts[key] == two.counts[key], key


def test_threaded_merge_equals_one_piece(tmp_path, monkeypatch):
    """The largest table concatenated on a second thread beside the others (as on large
    runs) gives the rows of a run in one piece."""
    from corridor import partitions

    monkeypatch.setattr(partitions, "MERGE_THREAD_ABOVE_VALUES", 0)
    cfg = load_config(network.write(tmp_path, 200.0, 1000.0, seed=3))
    inputs = read_inputs(cfg)
    one = finalize(compute(cfg, inputs, asset_stages()), run_stages())
    cfg2 = override_run(cfg, threads=2, partitions=5)
    two = finalize(compute_local(cfg2, read_inputs(cfg2), asset_stages()), run_stages())
    assert two.counts["partitions"] == 5
    for name in TABLES:
        _same(_table(one, name), _table(two, name), name)


def test_auto_plan_bounds_partition_size(tmp_path, monkeypatch):
    """Large runs are cut into pieces of at most about LOCAL_SEGMENTS_PER_PARTITION
    segments whatever the thread count, so peak memory follows the partition size."""
    import math

    from corridor.backends import local
    from corridor.partitions import estimated_segments

    cfg = load_config(network.write(tmp_path, 200.0, 1000.0, seed=3))
    inputs = read_inputs(cfg)
    n_seg = int(estimated_segments(inputs.assets.geometry.to_numpy(),
                                   cfg.run.segment_length_m).sum())
    assert local.local_plan(cfg, inputs) == (1, 1)  # small: one piece, one thread
    monkeypatch.setattr(local, "THREADED_ABOVE_SEGMENTS", n_seg // 2)
    monkeypatch.setattr(local, "LOCAL_SEGMENTS_PER_PARTITION", n_seg // 5)
    threads, parts = local.local_plan(override_run(cfg, threads=1), inputs)
    assert (threads, parts) == (1, math.ceil(n_seg / (n_seg // 5)))
    threads, parts = local.local_plan(override_run(cfg, partitions=3), inputs)
    assert parts == 3


def test_release_free_memory_is_safe():
    """On glibc the allocator's trim is called; elsewhere it is a no-op (common practice
    for long-running Linux processes: malloc_trim(3))."""
    import platform

    from corridor.memory import release_free_memory

    blocks = [bytes(1000) for _ in range(100_000)]
    del blocks
    assert release_free_memory() is (sys.platform.startswith("linux")
                                      and platform.libc_ver()[0] == "glibc")


def test_input_order_partitions_cover_every_asset_once_in_order(tmp_path):
    """The local backend's partitions are runs of consecutive assets that together list
    every asset once, in input order (so the merge is a plain concatenation), each
    holding about 1/n of the estimated segments (an asset is never split)."""
    from corridor.partitions import estimated_segments, input_order_partitions

    cfg = load_config(network.write(tmp_path, 200.0, 1000.0, seed=3))
    geoms = read_inputs(cfg).assets.geometry.to_numpy()
    w = estimated_segments(geoms, cfg.run.segment_length_m)
    for n in (1, 2, 7, len(geoms), len(geoms) + 5):
        parts = input_order_partitions(geoms, cfg.run.segment_length_m, n)
        assert 1 <= len(parts) <= min(n, len(geoms))
        assert all(len(p) for p in parts)
        np.testing.assert_array_equal(np.concatenate(parts), np.arange(len(geoms)))
        if n == 7:  # each share within one asset's weight of W/n
            loads = np.array([w[p].sum() for p in parts])
            assert np.all(np.abs(loads - w.sum() / 7) <= w.max() + 1)
    assert input_order_partitions(geoms[:0], cfg.run.segment_length_m, 3) == []
