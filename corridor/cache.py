"""Incremental re-screening: a cache of per-asset results keyed by their inputs.

Per-asset results are independent of the other assets (see
:func:`corridor.pipeline.subset_inputs`), so a rerun recomputes only the
assets whose inputs changed and loads the others from the cache.

Key of an asset
---------------
SHA-256 over the hashes of the components its results depend on:

``asset``
    the asset's geometry (WKB, in the run CRS, after cleaning) and every
    canonical attribute (kind defaults already applied);
``lines``
    every power line within reach (``screening_distance_m``; an STRtree
    ``dwithin`` query between asset and line geometries), whole geometry and
    attributes, and the towers of those lines;
``soil``
    the soil polygons within 1 m of the asset (soil is sampled at segment
    midpoints, which lie on the asset);
``grounds``
    the grounding items attached to the asset (by ``asset_id``);
``config``
    the resolved config without output paths and cache settings, the
    arrangements file's bytes, the limit set (name, overrides, file bytes),
    corridor's version and a fingerprint of corridor's source files (so an
    upgrade or a code edit recomputes everything).

Layout (open formats, no pickle; safe to delete at any time)::

    <cache>/index.json            format, generation, asset_id -> key, table schemas
    <cache>/<generation>/<table>.parquet   GeoParquet or Parquet, all assets of the run

One generation holds the rows of every asset of the last run (one file per
table, not per asset). A new generation is written when any asset was
recomputed or removed; ``index.json`` is replaced atomically and older
generations are deleted afterwards, so a killed run leaves a usable cache.
"""

from __future__ import annotations

import functools
import hashlib
import json
import logging
import os
import shutil
import time
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from corridor import __version__
from corridor.config import Config
from corridor.io.layers import Inputs

log = logging.getLogger(__name__)

FORMAT = 1
COMPONENTS = ("asset", "lines", "soil", "grounds", "config")
SOIL_REACH_M = 1.0

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
    "sites": ("extra:layer:sites", "asset_id", None),  # site ids: asset and position
    "grounding_sites": ("extra:csv:grounding_sites.csv", "asset_id", None),
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
_REJECTED = "_rejected"
_COUNTS = "_counts"


# -- hashing ---------------------------------------------------------------

def _sha(*parts: bytes) -> str:
    h = hashlib.sha256()
    for p in parts:
        h.update(p)
        h.update(b"\x1e")
    return h.hexdigest()


def _cell(v) -> str:
    if isinstance(v, float | np.floating):
        return repr(float(v))
    if v is None or (not isinstance(v, str) and pd.isna(v)):
        return "\x00"
    return str(v)


def row_digests(frame: gpd.GeoDataFrame | None) -> list[str]:
    """SHA-256 of each row: geometry WKB plus every attribute, in column order."""
    if frame is None or len(frame) == 0:
        return []
    cols = [c for c in frame.columns if c != frame.geometry.name]
    wkb = shapely.to_wkb(frame.geometry.to_numpy(), hex=False, output_dimension=2)
    values = [frame[c].to_numpy(dtype=object) for c in cols]
    header = "\x1f".join(map(str, cols)).encode()
    out = []
    for i in range(len(frame)):
        text = "\x1f".join(_cell(v[i]) for v in values).encode()
        out.append(_sha(header, text, wkb[i] if wkb[i] is not None else b""))
    return out


def _split_digests(frame: gpd.GeoDataFrame) -> tuple[list[str], list[str]]:
    """Per row: (geometry hash, attribute hash)."""
    cols = [c for c in frame.columns if c != frame.geometry.name]
    wkb = shapely.to_wkb(frame.geometry.to_numpy(), hex=False, output_dimension=2)
    values = [frame[c].to_numpy(dtype=object) for c in cols]
    header = "\x1f".join(map(str, cols)).encode()
    geo, att = [], []
    for i in range(len(frame)):
        geo.append(_sha(wkb[i] if wkb[i] is not None else b""))
        att.append(_sha(header, "\x1f".join(_cell(v[i]) for v in values).encode()))
    return geo, att


@functools.lru_cache(maxsize=1)
def code_fingerprint() -> str:
    """SHA-256 over corridor's own source files (names and bytes), once per process."""
    root = Path(__file__).resolve().parent
    h = hashlib.sha256()
    for p in sorted(root.rglob("*.py")):
        h.update(str(p.relative_to(root)).encode())
        h.update(p.read_bytes())
    return h.hexdigest()


def relevant_config(cfg: Config) -> dict:
    """The resolved config without output paths, cache settings and layer file paths."""
    res = json.loads(json.dumps(dict(cfg.resolved), default=str))
    run = res.get("run", {})
    for k in ("output_dir", "cache_dir", "change_threshold"):
        run.pop(k, None)
    res.pop("arrangements_file", None)
    layers = res.get("layers", {})
    for v in layers.values():
        for entry in (v if isinstance(v, list) else [v]):
            if isinstance(entry, dict):
                entry.pop("path", None)
    return res


def _limit_files(cfg: Config) -> list[Path]:
    from corridor.steps import LIMITS_DIR

    name = str(cfg.run["limit_set"])
    cands = [Path(LIMITS_DIR) / f"{name}.toml", Path(name), cfg.path.parent / name]
    out = []
    for p in cands:
        try:
            if p.is_file() and p.resolve() not in out:
                out.append(p.resolve())
        except OSError:
            continue
    return out


def config_parts(cfg: Config) -> dict[str, str]:
    """Hashes of the run-wide inputs of every per-asset result, by part."""
    cfg_json = json.dumps(relevant_config(cfg), sort_keys=True, default=str).encode()
    try:
        arr = cfg.arrangements_path.read_bytes()
    except OSError:
        arr = b""
    lim = [str(cfg.run["limit_set"]).encode(),
           json.dumps(dict(cfg.limit_overrides), sort_keys=True, default=str).encode()]
    for p in _limit_files(cfg):
        lim += [p.name.encode(), p.read_bytes()]
    from corridor.registry import registry

    # installed plugins (kinds, limit sets, methods) and their versions shape results too
    return {"config": _sha(cfg_json), "arrangements": _sha(arr), "limit_set": _sha(*lim),
            "code": _sha(__version__.encode(), code_fingerprint().encode(),
                         registry.fingerprint().encode())}


def config_hash(cfg: Config, parts: dict[str, str] | None = None) -> str:
    """Hash of everything run-wide a per-asset result depends on."""
    parts = config_parts(cfg) if parts is None else parts
    return _sha(*(f"{k}={v}".encode() for k, v in sorted(parts.items())))


@dataclass
class AssetKeys:
    """Per-asset keys and component hashes, in input order.

    Attributes
    ----------
    table : pandas.DataFrame
        asset_id, asset_geometry, asset_attributes, asset, lines, soil, grounds,
        config (component hashes) and key.
    reach_asset, reach_line : ndarray of int
        (asset index, line index) pairs within reach, sorted by asset then line.
    """

    table: pd.DataFrame
    reach_asset: np.ndarray
    reach_line: np.ndarray
    config_parts: dict
    line_geometry: list
    line_attributes: list

    def lines_of(self, i: int) -> np.ndarray:
        lo, hi = np.searchsorted(self.reach_asset, [i, i + 1])
        return self.reach_line[lo:hi]


def _grouped(n: int, group: np.ndarray, member: np.ndarray, digests: list[str]) -> list[str]:
    """Per group 0..n-1: hash of the digests of its members, in member order."""
    order = np.lexsort((member, group))
    g, m = group[order], member[order]
    bounds = np.searchsorted(g, np.arange(n + 1))
    empty = _sha(b"")
    out = []
    for i in range(n):
        lo, hi = bounds[i], bounds[i + 1]
        out.append(empty if lo == hi else _sha(*(digests[k].encode() for k in m[lo:hi])))
    return out


def asset_keys(cfg: Config, inputs: Inputs) -> AssetKeys:
    """Cache key and component hashes of every asset."""
    assets = inputs.assets
    n = len(assets)
    a_geo = assets.geometry.to_numpy()
    geo_h, att_h = _split_digests(assets)
    asset_h = [_sha(g.encode(), a.encode()) for g, a in zip(geo_h, att_h, strict=True)]
    # lines in reach, with their towers
    lines = inputs.lines
    line_d = row_digests(lines)
    if inputs.towers is not None and len(inputs.towers):
        tw = inputs.towers
        tw_d = row_digests(tw)
        pos = {v: i for i, v in enumerate(lines["line_id"])}
        t_line = np.array([pos.get(v, -1) for v in tw["line_id"]], dtype=np.int64)
        keep = t_line >= 0
        tower_h = _grouped(len(lines), t_line[keep], np.flatnonzero(keep),
                           [d for d, k in zip(tw_d, keep, strict=True) if k])
        line_d = [_sha(a.encode(), b.encode()) for a, b in zip(line_d, tower_h, strict=True)]
    reach = float(cfg.run["screening_distance_m"]) * (1.0 + 1e-6) + 1.0
    if len(lines):
        tree = shapely.STRtree(lines.geometry.to_numpy())
        ra, rl = tree.query(a_geo, predicate="dwithin", distance=reach)
    else:
        ra = rl = np.zeros(0, np.int64)
    order = np.lexsort((rl, ra))
    ra, rl = ra[order].astype(np.int64), rl[order].astype(np.int64)
    lines_h = _grouped(n, ra, rl, line_d)
    # soil polygons under the asset
    if inputs.soil is not None and len(inputs.soil):
        soil_d = row_digests(inputs.soil)
        stree = shapely.STRtree(inputs.soil.geometry.to_numpy())
        sa, sp = stree.query(a_geo, predicate="dwithin", distance=SOIL_REACH_M)
        soil_h = _grouped(n, sa.astype(np.int64), sp.astype(np.int64), soil_d)
    else:
        soil_h = [_sha(b"")] * n
    # grounding items of the asset
    if inputs.grounds is not None and len(inputs.grounds):
        g = inputs.grounds
        g_d = row_digests(g)
        pos = {v: i for i, v in enumerate(assets["asset_id"])}
        ga = np.array([pos.get(v, -1) for v in g["asset_id"]], dtype=np.int64)
        keep = ga >= 0
        grounds_h = _grouped(n, ga[keep], np.flatnonzero(keep),
                             [d for d, k in zip(g_d, keep, strict=True) if k])
    else:
        grounds_h = [_sha(b"")] * n
    parts = config_parts(cfg)
    cfg_h = config_hash(cfg, parts)
    if len(lines):
        lg, la = _split_digests(lines)
    else:
        lg, la = [], []
    key = [_sha(a.encode(), b.encode(), c.encode(), d.encode(), cfg_h.encode())
           for a, b, c, d in zip(asset_h, lines_h, soil_h, grounds_h, strict=True)]
    table = pd.DataFrame({
        "asset_id": assets["asset_id"].to_numpy(dtype=object),
        "asset_geometry": geo_h, "asset_attributes": att_h, "asset": asset_h,
        "lines": lines_h, "soil": soil_h, "grounds": grounds_h,
        "config": [cfg_h] * n, "key": key,
    })
    return AssetKeys(table, ra, rl, parts, lg, la)


# -- storage ---------------------------------------------------------------

def _file_name(name: str) -> str:
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
    return _restore_dtypes(frame.reset_index(drop=True), meta["dtypes"])


class Cache:
    """A cache folder of per-asset results.

    Parameters
    ----------
    folder : Path
    """

    def __init__(self, folder: Path):
        self.folder = Path(folder)
        self.index_path = self.folder / "index.json"
        self.index = self._load_index()

    def _load_index(self) -> dict:
        try:
            idx = json.loads(self.index_path.read_text(encoding="utf-8"))
        except FileNotFoundError:
            return {}
        except (OSError, ValueError) as exc:
            log.warning("cache index %s unreadable (%s); recomputing every asset",
                        self.index_path, exc)
            return {}
        if idx.get("format") != FORMAT or not isinstance(idx.get("assets"), dict):
            log.warning("cache %s has another format; recomputing every asset", self.folder)
            return {}
        return idx

    @property
    def keys(self) -> dict[str, str]:
        return self.index.get("assets", {}) if self.index else {}

    def load(self, asset_ids: set[str]) -> dict[str, pd.DataFrame] | None:
        """Rows of the given assets of every cached table, or None when unreadable."""
        if not asset_ids:
            return {}
        gen = self.folder / str(self.index.get("generation", ""))
        out = {}
        try:
            for name, meta in self.index.get("tables", {}).items():
                frame = read_table(gen / meta["file"], meta)
                frame = frame[frame["asset_id"].astype(object).isin(asset_ids).to_numpy()]
                out[name] = frame.reset_index(drop=True)
        except (OSError, ValueError, KeyError, ImportError) as exc:
            log.warning("cache %s unreadable (%s); recomputing every asset", self.folder, exc)
            return None
        return out

    def store(self, keys: pd.DataFrame, tables: dict[str, pd.DataFrame]) -> None:
        """Write a new generation with ``tables`` (all assets) and switch the index to it."""
        self.folder.mkdir(parents=True, exist_ok=True)
        gen = f"g{int(time.time() * 1000):x}-{os.getpid()}"
        gdir = self.folder / gen
        gdir.mkdir()
        metas = {}
        for name, frame in tables.items():
            fname = _file_name(name)
            metas[name] = {"file": fname, **write_table(frame, gdir / fname)}
        index = {"format": FORMAT, "corridor": __version__, "generation": gen,
                 "written_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                 "tables": metas,
                 "assets": dict(zip(keys["asset_id"].astype(str), keys["key"], strict=True))}
        tmp = self.index_path.with_suffix(f".json.tmp-{os.getpid()}")
        tmp.write_text(json.dumps(index), encoding="utf-8")
        os.replace(tmp, self.index_path)
        self.index = index
        for p in self.folder.iterdir():
            if p.is_dir() and p.name != gen:
                shutil.rmtree(p, ignore_errors=True)
            elif p.name.startswith("index.json.tmp-"):
                p.unlink(missing_ok=True)


def _restore_dtypes(frame: pd.DataFrame, dtypes: dict[str, str]) -> pd.DataFrame:
    for col, dt in dtypes.items():
        if col in frame.columns and str(frame[col].dtype) != dt and col != "geometry":
            if dt == "object":
                s = frame[col].astype(object)
                frame[col] = s.where(s.notna(), None) if s.isna().any() else s
            else:
                try:
                    frame[col] = frame[col].astype(dt)
                except (TypeError, ValueError):
                    pass
    return frame


# -- incremental compute -----------------------------------------------------

def _per_asset_tables(run) -> dict[str, pd.DataFrame]:
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


def _place(run, name: str, table) -> None:
    if name in PER_ASSET_TABLES:
        where = PER_ASSET_TABLES[name][0]
    else:
        where = name
    if where.startswith("extra:"):
        run.extra_tables[where.split(":", 1)[1]] = table
    else:
        setattr(run, where, table)


def _order_rows(frame: pd.DataFrame, name: str, asset_pos: dict) -> pd.DataFrame:
    order_kind, renumber = (PER_ASSET_TABLES.get(name, ("", "input", None))[1:])
    if len(frame) == 0:
        return frame.reset_index(drop=True)
    if order_kind == "asset_id":
        frame = frame.sort_values("asset_id", kind="stable", key=lambda s: s.astype(str))
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


def _compute_rejections(sub_inputs, rows: list[dict]) -> pd.DataFrame:
    """Rejections made while computing, attached to their asset (grounding items)."""
    asset_of = {}
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
    if g is None or len(g) == 0:
        return pd.DataFrame(columns=cols, dtype=object)
    known = set(inputs.assets["asset_id"])
    bad = ~g["asset_id"].isin(known).to_numpy()
    rows = [{"asset_id": "", "layer": cfg.grounds.label, "feature_id": fid, "field": "asset_id",
             "reason": f"asset {aid!r} is not among the screened assets"}
            for fid, aid in zip(g["feature_id"][bad], g["asset_id"][bad], strict=True)]
    return pd.DataFrame(rows, columns=cols, dtype=object)


def _geometry_counts(run) -> pd.DataFrame:
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
    rej = merged.get(_REJECTED)
    orphans = _orphan_ground_rejections(cfg, inputs)
    if len(orphans):
        rej = (orphans if rej is None or len(rej) == 0
               else pd.concat([rej, orphans], ignore_index=True))
    rows = []
    if rej is not None and len(rej):
        g = inputs.grounds
        gpos = {}
        if g is not None:
            for i, fid in enumerate(g["feature_id"].astype(str)):
                gpos.setdefault(fid, i)
        rej = rej.iloc[np.argsort([gpos.get(str(f), len(gpos)) for f in rej["feature_id"]],
                                  kind="stable")]
        rows = [{**{k: r[k] for k in ("layer", "feature_id", "field", "reason")},
                 "role": "grounds"} for r in rej.to_dict("records")]  # grounding items only
    inputs.rejected.rows.extend(rows)
    counts = merged.get(_COUNTS)
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


def incremental_compute(cfg: Config, inputs: Inputs, stages: dict | None, folder: Path,
                        keys: AssetKeys | None = None, compute_fn=None):
    """Compute the per-asset results, recomputing only assets whose key changed.

    Parameters
    ----------
    cfg, inputs, stages
        As for :func:`corridor.pipeline.compute`.
    folder : Path
        The cache folder (created when missing).
    keys : AssetKeys, optional
        Precomputed :func:`asset_keys`.
    compute_fn : callable, optional
        ``fn(cfg, inputs, stages) -> Run`` for the changed assets (a backend);
        default :func:`corridor.pipeline.compute`.

    Returns
    -------
    corridor.pipeline.Run
        The merged run, ready for :func:`corridor.pipeline.finalize`, with
        ``counts["assets_recomputed"]`` and ``counts["assets_from_cache"]``.
    """
    from corridor.pipeline import Run, subset_inputs
    from corridor.pipeline import compute as local_compute

    compute = compute_fn or local_compute
    t0 = time.perf_counter()
    timings = {}
    if keys is None:
        keys = asset_keys(cfg, inputs)
        timings["hash"] = round(time.perf_counter() - t0, 4)
    cache = Cache(folder)
    old = cache.keys
    ids = keys.table["asset_id"].astype(str).to_numpy()
    hit = np.array([old.get(a) == k for a, k in zip(ids, keys.table["key"], strict=True)],
                   dtype=bool)
    cached: dict[str, pd.DataFrame] = {}
    if hit.any():
        t_read = time.perf_counter()
        loaded = cache.load(set(ids[hit]))
        timings["cache_read"] = round(time.perf_counter() - t_read, 4)
        if loaded is None or _REJECTED not in loaded or _COUNTS not in loaded:
            hit[:] = False
        else:
            cached = loaded
    changed = ~hit
    asset_pos = {a: i for i, a in enumerate(inputs.assets["asset_id"])}
    fresh: dict[str, pd.DataFrame] = {}
    if changed.any():
        sub = subset_inputs(inputs, changed)
        part = compute(cfg, sub, stages)
        timings.update(part.timings_s)
        try:
            fresh = dict(_per_asset_tables(part))
        except NotCacheable as exc:
            log.warning("%s; computing every asset without the cache", exc)
            full = compute(cfg, inputs, stages)
            full.counts["assets_recomputed"] = len(inputs.assets)
            full.counts["assets_from_cache"] = 0
            return full
        fresh[_REJECTED] = _compute_rejections(sub, part.inputs.rejected.rows)
        fresh[_COUNTS] = _geometry_counts(part)
    names = list(dict.fromkeys([*fresh, *cached]))
    run = Run(cfg, inputs=inputs)
    merged = {}
    for name in names:
        frames = [f for f in (cached.get(name), fresh.get(name)) if f is not None]
        if len(frames) == 1:
            table = frames[0]
        else:
            if isinstance(frames[0], gpd.GeoDataFrame):
                table = gpd.GeoDataFrame(pd.concat(frames, ignore_index=True),
                                         geometry=frames[0].geometry.name, crs=inputs.crs)
            else:
                table = pd.concat(frames, ignore_index=True)
        table = _order_rows(table, name, asset_pos)
        if isinstance(table, gpd.GeoDataFrame) and table.crs is None:
            table = table.set_crs(inputs.crs)
        merged[name] = table
    for name, table in merged.items():
        if not name.startswith("_"):
            _place(run, name, table)
    finish_merged_run(cfg, inputs, run, merged)
    run.counts["assets_recomputed"] = int(changed.sum())
    run.counts["assets_from_cache"] = int(hit.sum())
    removed = set(old) - set(ids)
    if changed.any() or removed or not cache.index:
        t1 = time.perf_counter()
        cache.store(keys.table, merged)
        timings["cache_write"] = round(time.perf_counter() - t1, 4)
    run.timings_s.update(timings)
    log.info("assets recomputed: %d, from cache: %d", run.counts["assets_recomputed"],
             run.counts["assets_from_cache"])
    return run
