"""The Dask backend: the per-asset compute on a ``dask.distributed`` cluster.

How a run is cut up
-------------------
1. **Partitions of whole assets.** Assets are ordered by the Hilbert distance
   of their centroid (:func:`corridor.partitions.hilbert_order`) and the ordered list is cut into
   ``run.partitions`` pieces of about equal estimated segment count
   (:func:`corridor.partitions.plan_partitions`). An asset never straddles two partitions, so the
   response solve of a partition always holds all of an asset's segments:
   this is how the solve's "group by asset" is met without a shuffle.
2. **Small layers broadcast.** Power lines, soil, towers and grounding items
   are scattered once to every worker (``client.scatter(..., broadcast=True)``).
3. **Assets through files.** The client writes each partition's assets to
   GeoParquet in a work folder the workers can reach (``run.work_dir``; by
   default beside the output folder) and each task reads only its own file;
   no asset frame is shipped from the client.
4. **Each task** builds an :class:`corridor.io.layers.Inputs` (the reader's
   validation already ran on the client) and runs the same
   :func:`corridor.pipeline.compute` as the local backend. The exposure
   search (an STRtree over the broadcast line edges, queried with the
   partition's segments and the screening distance) runs on the worker, so
   every line within reach of an asset is found whatever partition holds it.
   dask-geopandas' spatial join is deliberately not used: it takes no
   ``dwithin`` distance and drops matches between partitions whose hulls are
   disjoint but within reach.
5. **Results through files too.** The task writes its per-asset tables
   (GeoParquet for the layers, Parquet for the rest, plus geometry counts and
   the rows it rejected) into a folder of its own beside its partition file
   and returns only their paths, dtypes, counts and timings: no frame travels
   back through the scheduler.
6. **The client merges** them in input order with the cache's merge rules
   (:data:`corridor.partitions.PER_ASSET_TABLES`: row order, run-wide ids
   renumbered), then deletes the work folder; the caller runs
   :func:`corridor.pipeline.finalize`.

Per-asset results do not depend on which other assets are in the run, so the
merged rows are those of a local run. Shapely's GEOS calls and numpy/LAPACK
release the GIL: threads (``run.dask_processes = false``) or processes both
work on one machine.

Fault tolerance: a worker that dies mid-task has its task rescheduled by the
scheduler on another worker (Dask's ``distributed.scheduler.allowed-failures``,
3 by default); a task that keeps killing workers ends the run with
``distributed.KilledWorker``, an internal error (exit code 3) that leaves the
previous outputs in place.
"""

from __future__ import annotations

import dataclasses
import logging
import os
import shutil
import time
import uuid
from contextlib import contextmanager
from pathlib import Path
from types import MappingProxyType

import geopandas as gpd
import pandas as pd
import shapely

from corridor import partitions
from corridor.compute import Run
from corridor.compute import compute as pipeline_compute
from corridor.config import Config
from corridor.errors import CorridorError
from corridor.io.layers import Inputs, Rejected
from corridor.memory import release_free_memory
from corridor.partitions import plan_partitions

log = logging.getLogger(__name__)

#: Estimated segments per partition when ``run.partitions`` is 0 (auto).


class DaskUnavailable(CorridorError):
    """``run.backend = "dask"`` but dask.distributed cannot be imported."""


# -- what travels to the workers -------------------------------------------------

def _pack(obj):
    """A picklable copy: read-only mappings become ``('__mapping__', dict)``."""
    if isinstance(obj, MappingProxyType):
        return ("__mapping__", {k: _pack(v) for k, v in obj.items()})
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return ("__dataclass__", type(obj),
                {f.name: _pack(getattr(obj, f.name)) for f in dataclasses.fields(obj)})
    if isinstance(obj, tuple):
        return ("__tuple__", [_pack(v) for v in obj])
    if isinstance(obj, list):
        return [_pack(v) for v in obj]
    if isinstance(obj, dict):
        return {k: _pack(v) for k, v in obj.items()}
    return obj


def _unpack(obj):
    if isinstance(obj, tuple) and obj and isinstance(obj[0], str):
        tag = obj[0]
        if tag == "__mapping__":
            return MappingProxyType({k: _unpack(v) for k, v in obj[1].items()})
        if tag == "__dataclass__":
            return obj[1](**{k: _unpack(v) for k, v in obj[2].items()})
        if tag == "__tuple__":
            return tuple(_unpack(v) for v in obj[1])
    if isinstance(obj, list):
        return [_unpack(v) for v in obj]
    if isinstance(obj, dict):
        return {k: _unpack(v) for k, v in obj.items()}
    return obj


def pack_config(cfg: Config):
    """The config in a form pickle accepts (:class:`types.MappingProxyType` is not)."""
    return _pack(cfg)


def unpack_config(packed) -> Config:
    """Inverse of :func:`pack_config`."""
    return _unpack(packed)


def to_wire(frame: pd.DataFrame, folder: Path | None = None, name: str = "") -> dict:
    """A table for the trip back to the client.

    With ``folder`` (on storage the client reaches), the table is written there
    as (Geo)Parquet with its dtypes and only the path travels; without, the
    table itself goes as plain columns with the geometry as WKB."""
    if folder is not None:
        path = Path(folder) / partitions.table_file_name(name)
        return {"path": str(path), **partitions.write_table(frame, path)}
    if isinstance(frame, gpd.GeoDataFrame) and frame.geometry.name in frame.columns:
        gname = frame.geometry.name
        plain = pd.DataFrame(frame).copy()
        plain[gname] = shapely.to_wkb(frame.geometry.to_numpy())
        return {"frame": plain, "geometry": gname}
    return {"frame": pd.DataFrame(frame), "geometry": None}


def from_wire(item: dict, crs) -> pd.DataFrame:
    if "path" in item:
        frame = partitions.read_table(Path(item["path"]), item)
        if item["geo"] and frame.crs is None:
            frame = frame.set_crs(crs)
        return frame
    frame = item["frame"]
    name = item["geometry"]
    if name is None:
        return frame
    frame = frame.copy()
    frame[name] = shapely.from_wkb(frame[name].to_numpy(dtype=object))
    return gpd.GeoDataFrame(frame, geometry=name, crs=crs)


# -- the task ------------------------------------------------------------------

def compute_partition(packed_cfg, shared: dict, path: str, kinds: dict, stages: dict | None):
    """One task: read a partition's assets, compute them, return plain tables.

    Parameters
    ----------
    packed_cfg
        :func:`pack_config` of the run's config.
    shared : dict
        The broadcast layers: ``crs``, ``lines``, ``soil``, ``grounds``, ``towers``,
        ``counts``.
    path : str
        The partition's GeoParquet file.
    kinds : dict
        :func:`corridor.partitions.column_kinds` of the client's asset frame.
    stages : dict or None
        Per-asset stages.

    Returns
    -------
    dict
        ``tables`` (name -> where the table is: a (Geo)Parquet file in a folder of
        this attempt's own beside ``path``, so a retried task never mixes files; the
        names of :func:`corridor.partitions.partition_tables`), ``timings_s``,
        ``counts``, ``assets``, ``worker_pid``. Only paths and numbers travel back to the client.
    """
    cfg = unpack_config(packed_cfg)
    t0 = time.perf_counter()
    assets = gpd.read_parquet(path)
    assets = partitions.restore_dtypes(assets.reset_index(drop=True), kinds)
    if assets.crs is None or assets.crs != shared["crs"]:
        assets = assets.set_crs(shared["crs"], allow_override=True)
    grounds = shared["grounds"]
    if grounds is not None:
        grounds = grounds[grounds["asset_id"].isin(assets["asset_id"])].reset_index(drop=True)
    inputs = Inputs(crs=shared["crs"], lines=shared["lines"], assets=assets,
                    soil=shared["soil"], grounds=grounds, towers=shared["towers"],
                    rejected=Rejected(), counts=dict(shared["counts"]), warnings=[],
                    substations=shared.get("substations"))
    read_s = time.perf_counter() - t0
    run = pipeline_compute(cfg, inputs, stages)
    tables = partitions.partition_tables(run, inputs)
    t1 = time.perf_counter()
    out = Path(path).with_name(f"{Path(path).stem}-results-{uuid.uuid4().hex[:8]}")
    out.mkdir()
    wire = {k: to_wire(v, out, k) for k, v in tables.items()}
    write_s = time.perf_counter() - t1
    return {"tables": wire,
            "timings_s": {"partition_read": round(read_s, 4), **run.timings_s,
                          "partition_results_write": round(write_s, 4)},
            "counts": dict(run.counts), "assets": len(assets), "worker_pid": os.getpid()}


# -- the client side --------------------------------------------------------------

@contextmanager
def cluster_client(cfg: Config):
    """A ``distributed.Client``: to ``run.scheduler_address``, or to a LocalCluster
    of ``run.dask_workers`` workers, one thread each, processes unless
    ``run.dask_processes`` is false. A LocalCluster is closed on exit."""
    try:
        from distributed import Client, LocalCluster
    except ImportError as exc:
        raise DaskUnavailable(f"{cfg.path.name}: run.backend: 'dask' needs dask.distributed"
                              " and dask-geopandas: pip install 'corridor[dask]'"
                              f" ({exc})") from None
    address = str(cfg.run.scheduler_address)
    if address:
        log.info("dask: connecting to the scheduler at %s", address)
        with Client(address, timeout="30s") as client:
            yield client
        return
    processes = bool(cfg.run.dask_processes)
    n_workers = int(cfg.run.dask_workers)
    log.info("dask: starting a LocalCluster of %d workers (%s)", n_workers,
             "processes" if processes else "threads")
    # Worker processes talk over TCP on the loopback interface only; an in-process
    # cluster (threads) talks over dask's in-process transport, which takes no host
    # (given one, its scheduler fails to start).
    where = {"host": "127.0.0.1"} if processes else {}
    with LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=processes,
                      dashboard_address=":0", **where) as cluster, \
            Client(cluster) as client:
        yield client


def _work_folder(cfg: Config, work_dir: Path | None) -> Path:
    value = str(cfg.run.work_dir)
    if value:
        root = (cfg.path.parent / value).resolve()
    elif work_dir is not None:
        root = Path(work_dir)
    else:
        import tempfile

        root = Path(tempfile.gettempdir())
    folder = root / f".corridor-dask-{os.getpid()}-{uuid.uuid4().hex[:8]}"
    folder.mkdir(parents=True)
    return folder


def _code_identity() -> tuple[str, str]:
    from corridor import __version__
    from corridor.keys import code_fingerprint

    return __version__, code_fingerprint()


def _check_workers(client) -> None:
    """The workers must run the same corridor as the client (else other rows).

    Another version is an error; the same version with other source files (an
    edited checkout) is logged as a warning.
    """
    version, fingerprint = _code_identity()
    theirs = client.run(_code_identity)
    other = sorted(w for w, (v, _fp) in theirs.items() if v != version)
    if other:
        raise CorridorError(f"dask workers {', '.join(other)} run another corridor version than"
                            f" this client ({version}); install the same corridor there")
    edited = sorted(w for w, (_v, fp) in theirs.items() if fp != fingerprint)
    if edited:
        log.warning("dask workers %s run corridor %s from other source files than this"
                    " client; results may differ", ", ".join(edited), version)


def compute_dask(cfg: Config, inputs: Inputs, stages: dict | None = None,
                 work_dir: Path | None = None) -> Run:
    """Exposure geometry and every per-asset stage, partitioned over a Dask cluster.

    Parameters
    ----------
    cfg : Config
        ``run.scheduler_address``, ``run.dask_workers``, ``run.dask_processes``,
        ``run.partitions`` and ``run.work_dir`` select the cluster and the cut.
    inputs : Inputs
        Validated inputs (:func:`corridor.io.layers.read_inputs`), on the client.
    stages : dict, optional
        Per-asset stages (:func:`corridor.steps.asset_stages`); must be picklable
        (module-level functions are).
    work_dir : Path, optional
        Where the partition files go when ``run.work_dir`` is empty (the runner
        passes the output folder's parent); must be reachable by the workers.

    Returns
    -------
    corridor.pipeline.Run
        The merged run, ready for :func:`corridor.pipeline.finalize`. Its
        ``timings_s`` holds the client's steps (``partition_plan``,
        ``partition_write``, ``cluster_start``, ``cluster_compute`` wall time,
        ``merge``) and, per per-asset stage, the largest time any one
        partition spent on it [s].
    """
    timings: dict[str, float] = {}
    t0 = time.perf_counter()
    assets = inputs.assets
    parts = plan_partitions(assets.geometry.to_numpy(), cfg.run.segment_length_m,
                            int(cfg.run.partitions))
    timings["partition_plan"] = round(time.perf_counter() - t0, 4)
    folder = _work_folder(cfg, work_dir)
    try:
        t0 = time.perf_counter()
        kinds = partitions.column_kinds(assets)
        paths = []
        for k, idx in enumerate(parts):
            p = folder / f"assets-{k:05d}.parquet"
            assets.iloc[idx].reset_index(drop=True).to_parquet(p, index=False)
            paths.append(str(p))
        timings["partition_write"] = round(time.perf_counter() - t0, 4)
        log.info("dask: %d assets in %d partitions written to %s", len(assets), len(parts),
                 folder)
        t0 = time.perf_counter()
        with cluster_client(cfg) as client:
            timings["cluster_start"] = round(time.perf_counter() - t0, 4)
            _check_workers(client)
            t0 = time.perf_counter()
            shared = {"crs": inputs.crs, "lines": inputs.lines, "soil": inputs.soil,
                      "grounds": inputs.grounds, "towers": inputs.towers,
                      "substations": inputs.substations, "counts": dict(inputs.counts)}
            shared_f, cfg_f = client.scatter([shared, pack_config(cfg)], broadcast=True,
                                             hash=False)
            futures = [client.submit(compute_partition, cfg_f, shared_f, p, kinds, stages,
                                     key=f"corridor-partition-{k:05d}-{uuid.uuid4().hex[:6]}",
                                     pure=False)
                       for k, p in enumerate(paths)]
            results = client.gather(futures)
            timings["cluster_compute"] = round(time.perf_counter() - t0, 4)
        t0 = time.perf_counter()
        run = merge_partitions(cfg, inputs, results)  # reads the workers' result files
        release_free_memory()
        timings["merge"] = round(time.perf_counter() - t0, 4)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    stage_max: dict[str, float] = {}
    for r in results:
        for name, dt in r["timings_s"].items():
            stage_max[name] = max(stage_max.get(name, 0.0), float(dt))
    run.timings_s = {**{k: round(v, 4) for k, v in stage_max.items()}, **timings}
    run.counts["partitions"] = len(parts)
    run.counts["assets_recomputed"] = len(assets)
    run.counts["assets_from_cache"] = 0
    return run


def merge_partitions(cfg: Config, inputs: Inputs, results: list[dict],
                     wire: bool = True) -> Run:
    """One run from the partitions' tables (:func:`corridor.partitions.merge`).

    ``wire=False`` takes the tables as frames (partitions computed in this
    process) instead of their wire form. The ``tables`` of ``results`` are
    emptied while merging, so that each partition frame is freed once its
    table is merged."""
    crs = inputs.crs
    pieces: dict[str, list] = {}
    for r in results:
        for name, item in r["tables"].items():
            pieces.setdefault(name, []).append(from_wire(item, crs) if wire else item)
        r["tables"] = {}  # the partitions' frames go as soon as their table is merged
    return partitions.merge(cfg, inputs, pieces)
