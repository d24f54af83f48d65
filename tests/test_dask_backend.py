"""The Dask backend: same rows as the local backend, whole assets, worker failures.

The reference for every check is the local backend on the same inputs: the
contract of the partitioned backend is that per-asset results do not depend
on which other assets share a run (corridor.pipeline.subset_inputs), so a
partitioned run must give every row of the whole run. Tolerance rtol 1e-9
(as the scale issue asks): partitions change only which assets share one
batched solve, so only the order of floating-point sums could differ.

The demo corridor (config/demo.toml) and a small synthetic network
(benchmarks/network.py, 200 km of lines, 1000 km of assets) are the inputs.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import shapely

distributed = pytest.importorskip(
    "distributed", reason="dask.distributed is not installed (pip install 'corridor[dask]')")

from corridor.backends import override_run  # noqa: E402
from corridor.backends.dask_backend import compute_dask  # noqa: E402
from corridor.compute import compute, finalize  # noqa: E402
from corridor.config import load_config  # noqa: E402
from corridor.io.layers import read_inputs  # noqa: E402
from corridor.io.outputs import sha256_file  # noqa: E402
from corridor.partitions import plan_partitions  # noqa: E402
from corridor.steps import asset_stages, run_stages  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "config" / "demo.toml"
sys.path.insert(0, str(REPO / "benchmarks"))
import network  # noqa: E402

#: Tables compared row by row: Run attribute or extra_tables key.
TABLES = ("segment_table", "exposure_table", "sites", "grounding_sites",
          "assets", "hazards")


@pytest.fixture(scope="module")
def cluster():
    """A LocalCluster of two worker processes, one thread each."""
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=":0", host="127.0.0.1") as c:
        yield c.scheduler_address


@pytest.fixture(scope="module")
def net_config(tmp_path_factory) -> Path:
    return network.write(tmp_path_factory.mktemp("net"), 200.0, 1000.0, seed=11)


def local_run(cfg):
    inputs = read_inputs(cfg)
    return finalize(compute(cfg, inputs, asset_stages()), run_stages())


def dask_run(cfg, tmp_path, stages=None, **settings):
    cfg = override_run(cfg, backend="dask", **settings)
    inputs = read_inputs(cfg)
    return finalize(compute_dask(cfg, inputs, stages or asset_stages(), work_dir=tmp_path),
                    run_stages())


def table(run, name):
    return getattr(run, name)


def assert_same_rows(a, b, where: str = "") -> None:
    """Same columns, dtypes, rows and order; numbers to rtol 1e-9; geometry exact."""
    a = a.reset_index(drop=True)
    b = b.reset_index(drop=True)
    assert list(a.columns) == list(b.columns), where
    assert len(a) == len(b), where
    for col in a.columns:
        if col == "geometry":
            ga, gb = np.asarray(a[col]), np.asarray(b[col])
            # WKB carries doubles bit for bit: exact equality
            assert shapely.equals_exact(ga, gb, tolerance=0.0).all(), f"{where}: {col}"
            continue
        assert a[col].dtype == b[col].dtype, f"{where}: {col}"
        va, vb = a[col].to_numpy(), b[col].to_numpy()
        if va.dtype.kind in "fc":
            np.testing.assert_allclose(vb, va, rtol=1e-9, atol=0.0, equal_nan=True,
                                       err_msg=f"{where}: {col}")
        else:
            assert pd.Series(va).equals(pd.Series(vb)), f"{where}: {col}"


def assert_runs_equal(a, b) -> None:
    for name in TABLES:
        ta, tb = table(a, name), table(b, name)
        assert_same_rows(ta, tb, name)
    assert a.inputs.rejected.rows == b.inputs.rejected.rows
    for key, value in a.counts.items():
        assert b.counts[key] == value, key


def test_demo_dask_equals_local(cluster, tmp_path):
    cfg = load_config(DEMO)
    a = local_run(cfg)
    b = dask_run(cfg, tmp_path, scheduler_address=cluster)
    assert b.counts["partitions"] == 2  # auto: max(2, segments / 500,000)
    assert_runs_equal(a, b)
    assert not list(tmp_path.iterdir()), "partition files left behind"


@pytest.mark.slow
def test_network_dask_equals_local(cluster, net_config, tmp_path):
    cfg = load_config(net_config)
    a = local_run(cfg)
    b = dask_run(cfg, tmp_path, scheduler_address=cluster, partitions=5)
    assert 3 <= b.counts["partitions"] <= 5
    assert a.counts["pairs"] > 0 and a.counts["exposures"] > 0  # the network is exposed
    assert_runs_equal(a, b)


def test_asset_reaching_over_other_partitions_is_solved_whole(cluster, tmp_path):
    cfg = load_config(DEMO)
    inputs = read_inputs(cfg)
    geoms = inputs.assets.geometry.to_numpy()
    n = len(geoms)
    parts = plan_partitions(geoms, cfg.run.segment_length_m, n)
    assert sorted(np.concatenate(parts).tolist()) == list(range(n))  # each asset once
    assert len(parts) >= 3  # cut by estimated segments: at most one per asset
    # the construct: the longest asset's bounding box overlaps another partition's hull
    longest = int(np.argmax(shapely.length(geoms)))
    box = shapely.box(*shapely.bounds(geoms[longest]))
    hulls = [shapely.convex_hull(shapely.union_all(geoms[p])) for p in parts
             if longest not in p]
    assert any(shapely.intersects(box, h) for h in hulls)
    a = local_run(cfg)
    b = dask_run(cfg, tmp_path, scheduler_address=cluster, partitions=n)
    aid = inputs.assets["asset_id"].iloc[longest]
    sa = a.segment_table[a.segment_table["asset_id"] == aid]
    sb = b.segment_table[b.segment_table["asset_id"] == aid]
    assert_same_rows(sa, sb, aid)
    # every segment present: lengths add up to the asset's length (hand geometry),
    # rtol 1e-9 for the rounding of many additions
    np.testing.assert_allclose(sb["length_m"].sum(), shapely.length(geoms[longest]), rtol=1e-9)
    assert (np.diff(sb["segment_index"].to_numpy()) == 1).all()
    assert_runs_equal(a, b)


@pytest.mark.slow
def test_worker_killed_mid_run_is_retried(tmp_path):
    """The first task kills its worker process (os._exit); Dask reschedules it on
    another worker (distributed.scheduler.allowed-failures, 3 by default)."""
    from tests.helpers.hooks import killing_stages

    marker = tmp_path / "killed"
    cfg = load_config(DEMO)
    a = local_run(cfg)
    work = tmp_path / "work"
    work.mkdir()
    b = dask_run(cfg, work, stages=killing_stages(asset_stages(), str(marker)),
                 scheduler_address="", dask_workers=2, dask_processes=True)
    assert marker.exists(), "no worker was killed"
    assert_runs_equal(a, b)


@pytest.mark.slow
def test_killed_worker_without_retries_fails_with_exit_3_and_keeps_outputs(tmp_path):
    """With no retries allowed the run fails: internal error (exit code 3, README),
    and the previous outputs stay byte for byte (SHA-256)."""
    cfg_path = network.write(tmp_path / "net", 100.0, 300.0, seed=5)
    text = cfg_path.read_text(encoding="utf-8")
    cfg_path.write_text(text.replace("[run]\n", '[run]\ncache_dir = ""\n', 1), encoding="utf-8")
    env = {**os.environ, "CORRIDOR_PROGRESS": "0"}
    first = subprocess.run([sys.executable, "-m", "corridor", "run", str(cfg_path), "-q"],
                           capture_output=True, text=True, env=env, cwd=cfg_path.parent,
                           timeout=120)
    assert first.returncode == 0, first.stderr
    out = cfg_path.parent / "out"
    before = {p.name: sha256_file(p) for p in sorted(out.iterdir()) if p.is_file()}
    text = cfg_path.read_text(encoding="utf-8")
    cfg_path.write_text(text.replace("[run]\n", '[run]\nbackend = "dask"\n', 1),
                        encoding="utf-8")
    env["DASK_DISTRIBUTED__SCHEDULER__ALLOWED_FAILURES"] = "0"
    helper = REPO / "tests" / "helpers" / "paused_run.py"  # the first worker ends itself
    second = subprocess.run([sys.executable, str(helper), "kill-worker",
                             str(tmp_path / "killed"), "0", "--", "run", str(cfg_path), "-q"],
                            capture_output=True, text=True, env=env, cwd=cfg_path.parent,
                            timeout=120)
    assert (tmp_path / "killed").exists(), second.stderr
    assert second.returncode == 3, second.stderr
    assert "internal error" in second.stderr
    after = {p.name: sha256_file(p) for p in sorted(out.iterdir()) if p.is_file()}
    assert after == before
    leftovers = [p.name for p in cfg_path.parent.iterdir() if p.name.startswith(".corridor-dask")]
    assert leftovers == []


def test_results_travel_as_files_and_come_back_unchanged(tmp_path):
    """A worker's tables go back to the client as (Geo)Parquet on shared storage: the
    item that travels holds a path and dtypes, no frame, and reading it gives the
    same table (an identity: Parquet stores float64 bit for bit)."""
    import geopandas as gpd

    from corridor.backends.dask_backend import from_wire, to_wire

    frame = gpd.GeoDataFrame({
        "asset_id": pd.Series(["A1", "A1", "B2"], dtype=object),
        "line_id": ["L1", "", "L2"],
        "part": np.array([0, 0, 1], np.int64),
        "v_fault_v": [1.0 / 3.0, np.nan, 1e-300],
        "high_reliability": [True, False, True],
        "fault_phase": pd.Series(["a", None, "c"], dtype=object),
    }, geometry=shapely.linestrings([[(0, 0), (50, 0)], [(50, 0), (100, 0)],
                                     [(0, 5), (0, 55)]]), crs="EPSG:32633")
    plain = pd.DataFrame(frame.drop(columns="geometry"))
    for table, name in ((frame, "segments"), (plain, "_counts")):
        item = to_wire(table, tmp_path, name)
        assert set(item) == {"path", "geo", "dtypes", "columns"}
        assert not any(isinstance(v, pd.DataFrame) for v in item.values())
        back = from_wire(item, frame.crs)
        assert type(back) is type(table)
        pd.testing.assert_frame_equal(pd.DataFrame(back).drop(columns="geometry",
                                                               errors="ignore"),
                                      pd.DataFrame(table).drop(columns="geometry",
                                                               errors="ignore"))
        if name == "segments":
            assert back.crs == frame.crs
            assert back.geometry.geom_equals_exact(frame.geometry, 0.0).all()


def test_in_process_cluster_threads_equals_local(tmp_path):
    # run.dask_processes = false: corridor starts a real in-process LocalCluster
    # (threads, dask's in-process transport); it used to be given a host and fail.
    cfg = load_config(DEMO)
    a = local_run(cfg)
    b = dask_run(cfg, tmp_path, scheduler_address="", dask_workers=2, dask_processes=False)
    assert b.counts["partitions"] == 2
    assert_runs_equal(a, b)
    assert not list(tmp_path.iterdir()), "partition files left behind"


def test_cluster_client_in_process_is_inproc(tmp_path):
    from corridor.backends.dask_backend import cluster_client

    cfg = override_run(load_config(DEMO), backend="dask", scheduler_address="",
                       dask_workers=1, dask_processes=False)
    with cluster_client(cfg) as client:
        assert client.scheduler.address.startswith("inproc://")
        assert client.submit(sum, [1, 2, 3]).result() == 6
