"""Partitions of a run: planning, the per-asset tables, and the one merge.

Per-asset results do not depend on the other assets
(:func:`corridor.pipeline.subset_inputs`), so a run may be computed in pieces
of whole assets and merged. Three callers do that, all through this module:

- the local backend (:mod:`corridor.backends.local`): partitions of consecutive assets on threads;
- the dask backend (:mod:`corridor.backends.dask_backend`): partitions on workers;
- the per-asset cache (:mod:`corridor.cache`): cached rows plus fresh rows.

Each piece's results are taken apart into named per-asset tables
(:func:`partition_tables`) and put together again by :func:`merge`: rows in
the order a full run gives, run-wide ids renumbered, dtypes kept
(:func:`concat_tables`), counts and grounding rejections rebuilt
(:func:`finish_merged_run`). Tables that travel through Parquet (cache files,
dask results) get their dtypes back through :func:`restore_dtypes`.
"""

from __future__ import annotations

import logging
import math
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from corridor.config import Config
from corridor.io.layers import Inputs
from corridor.ordering import in_asset_order

log = logging.getLogger(__name__)

#: Estimated segments per partition of the dask backend when ``run.partitions = 0``.
SEGMENTS_PER_PARTITION = 500_000
#: A per-asset table of at least this many values (rows x columns) over its pieces is
#: concatenated on a second thread beside the others (:func:`merge_tables`).
MERGE_THREAD_ABOVE_VALUES = 5_000_000
#: Hilbert curve level: 2**16 cells a side.
HILBERT_LEVEL = 16

#: Per-asset tables the cache keeps: name -> (where on the Run, row order of a full run,
#: run-wide id renumbered after merging: None, a column (0..n-1) or (column, format, first)).
#: Where: an attribute of the Run (``segment_table``) or ``extra:<key>`` for
#: ``run.extra_tables[key]``. Row order:
#: ``"input"`` (assets in input order, rows of one asset as computed) or ``"asset_id"``
#: (stable sort by asset id). Any other ``run.extra_tables`` entry with an ``asset_id``
#: column left by the per-asset stages is cached too, in input order.
PER_ASSET_TABLES: dict[str, tuple] = {
    "segments": ("segment_table", "input", None),
    "exposures": ("exposure_table", "asset_id", "exposure_id"),
    "sites": ("sites", "asset_id", None),  # site ids: asset and position
    "grounding_sites": ("grounding_sites", "asset_id", None),
    # the grounding stage's segment voltages with the proposed grounds (report profiles)
    "after_grounding": ("segment_table_after_grounding", "input", None),
    # the permitted value of every criterion per segment (report profiles)
    "limits": ("limits_table", "input", None),
}
#: Internal per-asset tables: rows of ``rejected.csv`` found while computing an asset
#: (grounding items) and the asset's geometry counts.
#: Counts the per-asset stages set on the run, rebuilt from the merged tables (a subset's
#: own count covers only the subset).
COUNTS_FROM_TABLES = {
    "grounding_sites": ("sites", len),
    "grounds_proposed": ("sites", lambda t: int(t["ground_resistance_ohm"].notna().sum())),
    "assets_unresolved": ("sites", lambda t: int(t["unresolved"].astype(bool).sum())),
}
#: Name of the internal table of rejections found while computing.
REJECTED = "_rejected"
#: Name of the internal table of per-asset geometry counts.
COUNTS = "_counts"


# -- planning --------------------------------------------------------------

def hilbert_order(geometries: np.ndarray) -> np.ndarray:
    """Order of geometries along a Hilbert curve through their centroids.

    Parameters
    ----------
    geometries : ndarray of shapely geometries
        In a metric CRS [m].

    Returns
    -------
    ndarray of int
        Indices that sort the geometries by the Hilbert distance of their
        centroid (stable: ties keep input order).

    Notes
    -----
    The distance is geopandas' :meth:`GeoSeries.hilbert_distance` of the
    centroids on a ``2**16`` grid over their common bounds; nearby centroids
    get nearby distances, so consecutive runs of the order are compact areas.

    References
    ----------
    D. Hilbert, "Ueber die stetige Abbildung einer Linie auf ein
    Flaechenstueck", Math. Ann. 38, 1891.
    """
    if len(geometries) == 0:
        return np.zeros(0, np.int64)
    cent = gpd.GeoSeries(shapely.centroid(np.asarray(geometries)))
    dist = cent.hilbert_distance(level=HILBERT_LEVEL).to_numpy(np.int64)
    return np.argsort(dist, kind="stable")


def estimated_segments(geometries: np.ndarray, segment_length_m: float) -> np.ndarray:
    """Estimated number of segments of each asset [-]: pieces of at most
    ``segment_length_m`` [m] plus one split at every vertex."""
    geoms = np.asarray(geometries)
    length_m = shapely.length(geoms)
    vertices = shapely.get_num_coordinates(geoms)
    return np.ceil(length_m / float(segment_length_m)).astype(np.int64) + np.maximum(
        vertices - 2, 0)


def auto_partitions(n_segments: int) -> int:
    """Partitions for ``run.partitions = 0``: max(2, ceil(segments / 500,000))."""
    return max(2, math.ceil(n_segments / SEGMENTS_PER_PARTITION))


def plan_partitions(geometries: np.ndarray, segment_length_m: float,
                    n_partitions: int = 0) -> list[np.ndarray]:
    """Cut the assets into spatial partitions of whole assets.

    Parameters
    ----------
    geometries : ndarray of shapely geometries
        Asset geometries in input order, metric CRS [m].
    segment_length_m : float
        Maximum segment length [m] (for the workload estimate).
    n_partitions : int
        Wanted partitions; 0 for :func:`auto_partitions`. Never more than the
        number of assets.

    Returns
    -------
    list of ndarray of int
        Per partition, the input indices of its assets, ascending. Every asset
        is in exactly one partition; no partition is empty. An asset heavier
        than a partition's share fills its slot alone, so there may be fewer
        than ``n_partitions`` partitions.

    Notes
    -----
    Assets are taken in Hilbert order and asset ``k`` goes to partition
    ``floor(n * W_k / W)``, where ``W_k`` is the estimated segment count of the
    assets before it in that order and ``W`` the total: partitions of about
    equal work, each a compact area.
    """
    n_assets = len(geometries)
    if n_assets == 0:
        return []
    weight = estimated_segments(geometries, segment_length_m).astype(float)
    n = int(n_partitions) if n_partitions else auto_partitions(int(weight.sum()))
    n = max(1, min(n, n_assets))
    order = hilbert_order(geometries)
    w = weight[order]
    before = np.cumsum(w) - w
    part = np.minimum((before * n / max(w.sum(), 1.0)).astype(np.int64), n - 1)
    out = []
    for p in range(n):
        idx = np.sort(order[part == p])
        if len(idx):
            out.append(idx)
    return out


def input_order_partitions(geometries: np.ndarray, segment_length_m: float,
                           n_partitions: int) -> list[np.ndarray]:
    """Cut the assets into runs of consecutive input indices of about equal work.

    The local backend's partitions: the merged tables of a run come out of a
    plain concatenation of the partitions' tables in the order a full run
    gives (assets in input order), so the merge makes no reordering copy of
    them (:func:`order_rows` finds the order already right). Per-asset results
    do not depend on the other assets in a partition, so the rows are those of
    :func:`plan_partitions`' spatial partitions or of one piece.

    Parameters
    ----------
    geometries : ndarray of shapely geometries
        Asset geometries in input order, metric CRS [m].
    segment_length_m : float
        Maximum segment length [m] (for the workload estimate).
    n_partitions : int
        Wanted partitions, at least 1; never more than the number of assets.

    Returns
    -------
    list of ndarray of int
        Per partition, consecutive input indices, ascending; the partitions
        follow each other in input order. Asset ``k`` goes to partition
        ``floor(n * W_k / W)`` (``W_k``: estimated segments of the assets
        before it, ``W`` the total); no partition is empty.
    """
    n_assets = len(geometries)
    if n_assets == 0:
        return []
    w = estimated_segments(geometries, segment_length_m).astype(float)
    n = max(1, min(int(n_partitions), n_assets))
    before = np.cumsum(w) - w
    part = np.minimum((before * n / max(w.sum(), 1.0)).astype(np.int64), n - 1)
    cuts = np.flatnonzero(np.diff(part)) + 1
    return [idx for idx in np.split(np.arange(n_assets), cuts) if len(idx)]


def column_kinds(frame: pd.DataFrame) -> dict[str, tuple[str, object]]:
    """Per column: dtype and, for object columns, the missing-value sentinel used
    (None when any value is None, else NaN); the geometry column is left out."""
    out: dict[str, tuple[str, object]] = {}
    geom = frame.geometry.name if isinstance(frame, gpd.GeoDataFrame) else None
    for col in frame.columns:
        if col == geom:
            continue
        dt = str(frame[col].dtype)
        sentinel: float | None = np.nan
        if dt == "object":
            for v in frame[col]:
                if v is None:
                    sentinel = None
                    break
        out[str(col)] = (dt, sentinel)
    return out


def restore_dtypes(frame: pd.DataFrame, kinds: dict) -> pd.DataFrame:
    """Give a table back the dtypes (and missing values) it had before a Parquet trip.

    Parameters
    ----------
    frame : DataFrame
        Changed in place and returned.
    kinds : dict
        Column -> dtype name (missing object values become None) or
        ``(dtype name, missing-value sentinel)`` (:func:`column_kinds`).
        Columns not in ``frame``, the ``geometry`` column and casts that fail
        are left as they are.
    """
    for col, kind in kinds.items():
        dt, sentinel = (kind, None) if isinstance(kind, str) else kind
        if col not in frame.columns or col == "geometry" or str(frame[col].dtype) == dt:
            continue
        if dt == "object":
            s = frame[col].astype(object)
            missing = s.isna().to_numpy()
            if missing.any():
                values = s.to_numpy(dtype=object, copy=True)
                values[missing] = sentinel
                s = pd.Series(values, index=s.index, dtype=object)
            frame[col] = s
        else:
            try:
                frame[col] = frame[col].astype(dt)
            except (TypeError, ValueError):
                pass
    return frame


def table_file_name(name: str) -> str:
    """A file name for the table ``name`` (characters other than letters, digits,
    ``-`` and ``_`` replaced)."""
    return "".join(c if c.isalnum() or c in "-_" else "_" for c in name) + ".parquet"


def write_table(frame: pd.DataFrame, path: Path) -> dict:
    """Write a table as GeoParquet (with a geometry column) or Parquet.

    Returns
    -------
    dict
        ``geo`` (bool), ``dtypes`` (column -> pandas dtype name) and ``columns``:
        what :func:`read_table` needs to give the same frame back.
    """
    geo = isinstance(frame, gpd.GeoDataFrame) and frame.geometry.name in frame.columns
    if geo:
        frame.to_parquet(path, index=False)
    else:
        pd.DataFrame(frame).to_parquet(path, index=False)
    return {"geo": geo, "dtypes": {str(c): str(frame[c].dtype) for c in frame.columns},
            "columns": [str(c) for c in frame.columns]}


def read_table(path: Path, meta: dict) -> pd.DataFrame:
    """Read a table written by :func:`write_table`, with its dtypes restored."""
    frame = gpd.read_parquet(path) if meta["geo"] else pd.read_parquet(path)
    return restore_dtypes(frame.reset_index(drop=True), meta["dtypes"])



# -- merging -----------------------------------------------------------------

def per_asset_tables(run) -> dict[str, pd.DataFrame]:
    """The per-asset tables a compute left on the run, by cache name."""
    out = {}
    taken = set()
    for name, (where, _order, _renumber) in PER_ASSET_TABLES.items():
        if where.startswith("extra:"):
            key = where.split(":", 1)[1]
            taken.add(key)
            table = run.extra_tables.get(key)
        else:
            table = getattr(run, where, None)
        if table is not None:
            out[name] = table
    for key, table in run.extra_tables.items():
        if key in taken:
            continue
        if isinstance(table, pd.DataFrame) and "asset_id" in table.columns:
            out[f"extra:{key}"] = table
        else:
            raise NotCacheable(f"per-asset stage left run.extra_tables[{key!r}] without an"
                               " asset_id column")
    return out


class NotCacheable(RuntimeError):
    """The per-asset stages left a result the cache cannot split by asset."""


def place_table(run, name: str, table) -> None:
    if name in PER_ASSET_TABLES:
        where = PER_ASSET_TABLES[name][0]
    else:
        where = name
    if where.startswith("extra:"):
        run.extra_tables[where.split(":", 1)[1]] = table
    else:
        setattr(run, where, table)


def order_rows(frame: pd.DataFrame, name: str, asset_pos: dict) -> pd.DataFrame:
    order_kind, renumber = (PER_ASSET_TABLES.get(name, ("", "input", None))[1:])
    if len(frame) == 0:
        return frame.reset_index(drop=True)
    if order_kind == "asset_id":
        frame = frame.sort_values("asset_id", kind="stable", key=lambda s: s.astype(str))
    elif in_asset_order(frame["asset_id"], asset_pos if isinstance(asset_pos, pd.Index)
                        else pd.Index(list(asset_pos))):
        pass  # partitions of consecutive assets, merged in input order: no reorder
    else:
        ids = asset_pos if isinstance(asset_pos, pd.Index) else pd.Index(list(asset_pos))
        pos = ids.get_indexer(frame["asset_id"]).astype(np.int64)
        pos[pos < 0] = len(ids)  # unknown ids last, as a map to NaN sorted them
        order = np.argsort(pos, kind="stable")
        if not np.array_equal(order, np.arange(len(order))):
            frame = frame.iloc[order]
    frame = frame.reset_index(drop=True)
    if isinstance(renumber, str):
        frame[renumber] = np.arange(len(frame), dtype=np.int64)
    elif renumber is not None:
        col, fmt, first = renumber
        if col in frame.columns:
            frame[col] = pd.Series([fmt.format(i + first) for i in range(len(frame))],
                                   index=frame.index, dtype=frame[col].dtype)
    return frame


def compute_rejections(sub_inputs, rows: list[dict]) -> pd.DataFrame:
    """Rejections made while computing, attached to their asset (grounding items)."""
    asset_of: dict[str, str] = {}
    g = sub_inputs.grounds
    if g is not None and len(g):
        for fid, aid in zip(g["feature_id"].astype(str), g["asset_id"].astype(str), strict=True):
            asset_of.setdefault(fid, aid)
    frame = pd.DataFrame(rows, columns=["layer", "feature_id", "field", "reason"])
    frame.insert(0, "asset_id", [asset_of.get(str(f), "") for f in frame["feature_id"]])
    return frame.astype(object)


def _orphan_ground_rejections(cfg: Config, inputs: Inputs) -> pd.DataFrame:
    """Grounding items naming no screened asset: a full run rejects them while responding,
    a subset never sees them (:func:`corridor.pipeline.subset_inputs` drops them)."""
    g = inputs.grounds
    cols = ["asset_id", "layer", "feature_id", "field", "reason"]
    # (grounding items are read only from a configured grounds layer)
    if g is None or len(g) == 0 or cfg.grounds is None:
        return pd.DataFrame(columns=cols, dtype=object)
    known = set(inputs.assets["asset_id"].astype(str))
    bad = ~g["asset_id"].astype(str).isin(known).to_numpy()
    rows = [{"asset_id": "", "layer": cfg.grounds.label, "feature_id": fid, "field": "asset_id",
             "reason": f"asset {aid!r} is not among the screened assets"}
            for fid, aid in zip(g["feature_id"][bad], g["asset_id"][bad], strict=True)]
    return pd.DataFrame(rows, columns=cols, dtype=object)


def geometry_counts(run) -> pd.DataFrame:
    geo = run.geometry
    if geo is None:  # a merged run (partitioned backend): the counts it merged
        if getattr(run, "asset_counts", None) is None:
            raise ValueError("run has neither geometry nor merged per-asset counts")
        return run.asset_counts
    n = len(run.inputs.assets)
    seg_feature = geo.segments.feature
    pairs = np.bincount(seg_feature[geo.pairs.segment], minlength=n) if len(geo.pairs) else \
        np.zeros(n, np.int64)
    if len(geo.sections):
        sec_asset = seg_feature[geo.pairs.segment[geo.sections.pair]]
        sections = np.bincount(sec_asset, minlength=n)
    else:
        sections = np.zeros(n, np.int64)
    return pd.DataFrame({"asset_id": run.inputs.assets["asset_id"].to_numpy(dtype=object),
                         "pairs": pairs.astype(np.int64), "sections": sections.astype(np.int64)})


def finish_merged_run(cfg: Config, inputs: Inputs, run, merged: dict) -> None:
    """Rejections and counts of a run merged from per-asset tables (cache, partitions).

    Grounding items naming no screened asset are rejected as a full run rejects
    them; rejected rows follow the grounds layer's order; counts are rebuilt
    from the merged tables.
    """
    rej = merged.get(REJECTED)
    orphans = _orphan_ground_rejections(cfg, inputs)
    if len(orphans):
        rej = (orphans if rej is None or len(rej) == 0
               else pd.concat([rej, orphans], ignore_index=True))
    rows = []
    if rej is not None and len(rej):
        g = inputs.grounds
        gpos: dict[str, int] = {}
        if g is not None:
            for i, fid in enumerate(g["feature_id"].astype(str)):
                gpos.setdefault(fid, i)
        rej = rej.iloc[np.argsort([gpos.get(str(f), len(gpos)) for f in rej["feature_id"]],
                                  kind="stable")]
        rows = [{**{k: r[k] for k in ("layer", "feature_id", "field", "reason")},
                 "role": "grounds"} for r in rej.to_dict("records")]  # grounding items only
    inputs.rejected.rows.extend(rows)
    counts = merged.get(COUNTS)
    run.asset_counts = counts
    run.counts["segments"] = len(run.segment_table) if run.segment_table is not None else 0
    run.counts["pairs"] = int(counts["pairs"].sum()) if counts is not None else 0
    run.counts["sections"] = int(counts["sections"].sum()) if counts is not None else 0
    run.counts["exposures"] = len(run.exposure_table) if run.exposure_table is not None else 0
    run.counts["grounds_rejected"] = len(rows)
    for cname, (tname, fn) in COUNTS_FROM_TABLES.items():
        if tname in merged:
            try:
                run.counts[cname] = fn(merged[tname])
            except (KeyError, TypeError, ValueError):
                pass


def _align_dtypes(frames: list[pd.DataFrame]) -> list[pd.DataFrame]:
    """Give all-null object columns the dtype the other frames have for that column.

    A subset in which no row has a value leaves a column untyped (object, all
    None) where a full run types it (float, int, bool, text): concatenating
    would turn the whole column into text.
    """
    cols = set().union(*(f.columns for f in frames))
    out = list(frames)
    for c in cols:
        typed = [f[c].dtype for f in frames if c in f.columns and f[c].dtype != object]
        if not typed:
            continue
        target = typed[0]
        for i, f in enumerate(out):
            if c in f.columns and f[c].dtype == object and f[c].isna().all():
                try:
                    col = f[c].astype(target)
                except (TypeError, ValueError):
                    continue
                out[i] = f.copy() if out[i] is frames[i] else out[i]
                out[i][c] = col
    return out


def concat_tables(frames: list[pd.DataFrame | None], crs=None) -> pd.DataFrame | None:
    """Rows of several per-asset tables of one kind in one table, types kept.

    Empty frames are left out (an empty frame of a subset may be untyped),
    unless all are empty (then the last one is the result); all-null untyped
    columns take the other frames' dtype (:func:`_align_dtypes`).

    Parameters
    ----------
    frames : list of DataFrame or GeoDataFrame (None entries are skipped)
    crs : optional
        CRS of the geometry of a GeoDataFrame result.
    """
    present = [f for f in frames if f is not None]
    if not present:
        return None
    full = [f for f in present if len(f)]
    if not full:
        return present[-1]
    if len(full) == 1:
        return full[0]
    full = _align_dtypes(full)
    if isinstance(full[0], gpd.GeoDataFrame):
        return gpd.GeoDataFrame(pd.concat(full, ignore_index=True),
                                geometry=full[0].geometry.name,
                                crs=crs if crs is not None else full[0].crs)
    return pd.concat(full, ignore_index=True)


def partition_tables(run, inputs: Inputs) -> dict[str, pd.DataFrame]:
    """Every per-asset table of a computed piece of a run, ready for :func:`merge`.

    :func:`per_asset_tables` plus :data:`REJECTED` (rejections found while
    computing, by asset) and :data:`COUNTS` (geometry counts per asset).

    Raises
    ------
    NotCacheable
        A per-asset stage left a table without an ``asset_id`` column.
    """
    tables = dict(per_asset_tables(run))
    tables[REJECTED] = compute_rejections(inputs, run.inputs.rejected.rows)
    tables[COUNTS] = geometry_counts(run)
    return tables


def merge_tables(inputs: Inputs, pieces: dict[str, list]) -> dict[str, pd.DataFrame]:
    """Each per-asset table of a run from its pieces' frames (partitions, cache, fresh rows).

    Parameters
    ----------
    inputs : Inputs
        The whole run's inputs (asset order, CRS).
    pieces : dict
        Table name -> list of the pieces' frames of that table (None entries are
        skipped). The lists are emptied while merging, so that each piece's
        frame is freed once its table is merged.

    Returns
    -------
    dict
        Table name -> the merged table: rows in the order a full run gives,
        run-wide ids renumbered (:func:`order_rows`), dtypes kept
        (:func:`concat_tables`).
    """
    from concurrent.futures import ThreadPoolExecutor

    crs = inputs.crs
    asset_pos = {a: i for i, a in enumerate(inputs.assets["asset_id"])}
    names = list(pieces)

    def one(frames: list) -> pd.DataFrame:
        table = concat_tables(frames, crs=crs)  # empty/untyped parts: types kept
        frames.clear()  # before the reorder copies the table
        return table

    def size(name: str) -> int:
        return sum(len(f) * max(f.shape[1], 1) for f in pieces[name] if f is not None)

    # the largest table (the segments) is concatenated on a second thread while this
    # one does the others: numpy copies without the GIL, and a concatenation is
    # mostly the copy into fresh memory (its page faults included)
    largest = max(names, key=size) if names else None
    tables: dict[str, pd.DataFrame | None] = {}
    with ThreadPoolExecutor(1) as pool:
        future = (pool.submit(one, pieces.pop(largest))
                  if largest is not None and size(largest) >= MERGE_THREAD_ABOVE_VALUES else None)
        for name in names:
            if future is None or name != largest:
                tables[name] = one(pieces.pop(name))
        if future is not None and largest is not None:
            tables[largest] = future.result()
    merged = {}
    for name in names:
        table = order_rows(tables.pop(name), name, asset_pos)
        if isinstance(table, gpd.GeoDataFrame) and table.crs is None:
            table = table.set_crs(crs)
        merged[name] = table
        del table
    return merged


def run_from_tables(cfg: Config, inputs: Inputs, merged: dict[str, pd.DataFrame]):
    """A run holding merged per-asset tables, its counts and grounding rejections rebuilt
    (:func:`finish_merged_run`); ready for :func:`corridor.pipeline.finalize`."""
    from corridor.compute import Run

    run = Run(cfg, inputs, merged["segments"], merged["exposures"])
    for name, table in merged.items():
        if not name.startswith("_") and name not in ("segments", "exposures"):
            place_table(run, name, table)
    finish_merged_run(cfg, inputs, run, merged)
    return run


def merge(cfg: Config, inputs: Inputs, pieces: dict[str, list]):
    """One run from its pieces' per-asset tables: :func:`merge_tables`, then
    :func:`run_from_tables`."""
    return run_from_tables(cfg, inputs, merge_tables(inputs, pieces))
