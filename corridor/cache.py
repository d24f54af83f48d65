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
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import json
import logging
import os
import re
import secrets
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

FORMAT = 2
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
    # the grounding stage's segment voltages with the proposed grounds (report profiles)
    "after_grounding": ("segment_table_after_grounding", "input", None),
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
    from corridor.io.fingerprint import dataset_sha256

    arr = dataset_sha256(cfg.arrangements_path).encode()
    lim = [str(cfg.run["limit_set"]).encode(),
           json.dumps(dict(cfg.limit_overrides), sort_keys=True, default=str).encode()]
    for p in _limit_files(cfg):
        lim += [p.name.encode(), dataset_sha256(p).encode()]
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
    """Per group 0..n-1: hash of the digests of its members, in member order.

    ``member`` indexes ``digests`` (all rows, not only the grouped ones)."""
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
        pos = {str(v): i for i, v in enumerate(lines["line_id"])}
        t_line = np.array([pos.get(str(v), -1) for v in tw["line_id"]], dtype=np.int64)
        keep = t_line >= 0  # towers of unknown lines: ignored (the reader rejects them)
        tower_h = _grouped(len(lines), t_line[keep], np.flatnonzero(keep), tw_d)
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
        pos = {str(v): i for i, v in enumerate(assets["asset_id"])}
        ga = np.array([pos.get(str(v), -1) for v in g["asset_id"]], dtype=np.int64)
        keep = ga >= 0  # items naming no screened asset: ignored (rejected elsewhere)
        grounds_h = _grouped(n, ga[keep], np.flatnonzero(keep), g_d)
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

#: The cache's manifest, the only file corridor writes at the top of a cache folder.
MARKER = "corridor-cache.json"
#: Key of the manifest that marks a folder as corridor's cache (value: :data:`FORMAT`).
MARKER_KEY = "corridor_cache"
#: How per-asset checksums are made; a cache made another way is recomputed.
CHECKSUM = f"rows-v2-pandas-{pd.__version__}"
#: Files a desktop's file manager leaves in any folder it shows: a folder holding only
#: these counts as empty (they are never deleted).
DESKTOP_FILES = frozenset({".DS_Store", "Thumbs.db", "desktop.ini", ".directory"})
_GEN_NAME = re.compile(r"^g[0-9a-f]+-\d+(-\d+)?$")
_LEGACY_TMP = re.compile(r"^index\.json\.tmp-\d+$")
_MANIFEST_TMP = re.compile(rf"^\.{re.escape(MARKER)}\.tmp-\d+-[0-9a-f]+$")


def _file_name(name: str) -> str:
    return "".join(c if c.isalnum() or c in "-_" else "_" for c in name) + ".parquet"


def _plain_name(name) -> bool:
    """A file or folder name with no path in it (what the manifest may list)."""
    return (isinstance(name, str) and name not in ("", ".", "..") and "/" not in name
            and "\\" not in name and "\x00" not in name)


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


_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_S30, _S27, _S31 = np.uint64(30), np.uint64(27), np.uint64(31)


def _mix64(x: np.ndarray) -> np.ndarray:
    """The SplitMix64 finaliser (Steele, Lea, Flood 2014) on a uint64 array (wraps)."""
    x = x ^ (x >> _S30)
    x = x * _M1
    x = x ^ (x >> _S27)
    x = x * _M2
    return x ^ (x >> _S31)


def _value_hashes(s: pd.Series) -> np.ndarray:
    """A 64-bit hash of each value of a column (uint64)."""
    if isinstance(s.dtype, gpd.array.GeometryDtype):
        wkb = shapely.to_wkb(np.asarray(s.array, dtype=object), output_dimension=3)
        return pd.util.hash_array(np.asarray(wkb, dtype=object))
    if isinstance(s.dtype, np.dtype) and s.dtype.kind in "fiub":
        v = s.to_numpy()
        if v.dtype.itemsize != 8:
            v = v.astype(np.float64 if v.dtype.kind == "f" else np.int64)
        return _mix64(np.ascontiguousarray(v).view(np.uint64))
    return pd.util.hash_pandas_object(s, index=False).to_numpy(np.uint64)


def _row_hashes(frame: pd.DataFrame) -> np.ndarray:
    """A 64-bit hash of each row: every value, in column order (uint64)."""
    acc = np.zeros(len(frame), np.uint64)
    for i in range(frame.shape[1]):
        salt = np.uint64((0x9E3779B97F4A7C15 * (i + 1)) % (1 << 64))
        acc = _mix64(acc ^ (_value_hashes(frame.iloc[:, i]) + salt))
    return acc


def asset_checksums(frame: pd.DataFrame) -> dict[str, tuple[int, str]]:
    """Row count and checksum of each asset's rows of a table, by asset id (as str).

    The checksum is a SHA-256 (first 32 hex digits) over the column names and
    dtypes and a 64-bit hash of each of the asset's rows (every value), in row
    order: a changed value, type, row or row order changes it.
    """
    if frame is None or len(frame) == 0:
        return {}
    header = "\x1f".join(f"{c}:{frame[c].dtype}" for c in frame.columns).encode()
    rows_h = _row_hashes(frame)
    codes, uniques = pd.factorize(frame["asset_id"].astype(str).to_numpy(dtype=object))
    order = np.argsort(codes, kind="stable")
    bounds = np.searchsorted(codes[order], np.arange(len(uniques) + 1))
    sorted_h = rows_h[order]
    out = {}
    for k, aid in enumerate(uniques):
        h = hashlib.sha256(header)
        h.update(sorted_h[bounds[k]:bounds[k + 1]].tobytes())
        out[str(aid)] = (int(bounds[k + 1] - bounds[k]), h.hexdigest()[:32])
    return out


def _check_meta(meta) -> bool:
    return (isinstance(meta, dict) and _plain_name(meta.get("file"))
            and isinstance(meta.get("geo"), bool)
            and isinstance(meta.get("dtypes"), dict)
            and all(isinstance(k, str) and isinstance(v, str)
                    for k, v in meta["dtypes"].items())
            and isinstance(meta.get("columns"), list)
            and all(isinstance(c, str) for c in meta["columns"]))


def _check_entry(entry) -> bool:
    return (isinstance(entry, dict) and isinstance(entry.get("key"), str)
            and isinstance(entry.get("tables"), dict)
            and all(isinstance(k, str) and isinstance(v, list) and len(v) == 2
                    and isinstance(v[0], int) and not isinstance(v[0], bool)
                    and isinstance(v[1], str) for k, v in entry["tables"].items()))


class Cache:
    """A cache folder of per-asset results, owned by corridor through its manifest.

    The folder holds :data:`MARKER`, a JSON manifest naming the current
    generation and every file and folder the cache wrote; corridor deletes or
    replaces nothing else. A folder that exists and holds files but no
    manifest is not corridor's: it is not used (``usable`` is False, with a
    warning naming it and some of its files), and the run goes on without a
    cache. A folder in the layout of the previous cache format (``index.json``
    and generation folders of Parquet files only) is taken over.

    Parameters
    ----------
    folder : Path
    """

    def __init__(self, folder: Path):
        self.folder = Path(folder)
        self.manifest_path = self.folder / MARKER
        self.usable = True
        self.owned: dict[str, list[str] | None] = {}
        self.generation: str | None = None
        self.index: dict = {}
        try:
            self._open()
        except OSError as exc:
            self.usable = False
            log.warning("cache folder %s cannot be read (%s); running without the cache",
                        self.folder, exc)
            return
        if self.usable:
            self.index = self._load_index()

    # - ownership -
    def _open(self) -> None:
        if not self.folder.exists() and not self.folder.is_symlink():
            return
        if not self.folder.is_dir():
            self.usable = False
            log.warning("cache_dir %s is not a folder; running without the cache", self.folder)
            return
        if self.manifest_path.exists():
            self._read_manifest()
            return
        entries = sorted(p.name for p in self.folder.iterdir())
        if not [e for e in entries if e not in DESKTOP_FILES]:
            return  # empty (or only a file manager's view settings): taken, never touched
        legacy = self._legacy_layout(entries)
        if legacy is not None:
            self.owned = legacy
            log.info("cache %s is in an older format: taken over and recomputed", self.folder)
            return
        self.usable = False
        shown = ", ".join(entries[:5]) + (f" and {len(entries) - 5} more"
                                          if len(entries) > 5 else "")
        log.warning("cache folder %s holds files corridor did not write (%s) and no %s:"
                    " it is not used and nothing in it is touched; the run goes on without"
                    " a cache (set run.cache_dir to an empty or new folder)",
                    self.folder, shown, MARKER)

    def _read_manifest(self) -> None:
        try:
            data = json.loads(self.manifest_path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            log.warning("cache manifest %s unreadable (%s); starting the cache anew (files it"
                        " does not list are left in place)", self.manifest_path, exc)
            return
        if not isinstance(data, dict) or MARKER_KEY not in data:
            log.warning("cache manifest %s is damaged; starting the cache anew (files it"
                        " does not list are left in place)", self.manifest_path)
            return
        owned = data.get("owned")
        damaged = not isinstance(owned, dict)
        for name, files in (owned.items() if isinstance(owned, dict) else ()):
            if not _plain_name(name) or name == MARKER:
                damaged = True
            elif files is None:
                self.owned[name] = None
            elif isinstance(files, list):
                self.owned[name] = [f for f in files if _plain_name(f)]
                damaged |= len(self.owned[name]) != len(files)
            else:
                damaged = True
        gen = data.get("generation")
        if data.get(MARKER_KEY) != FORMAT:
            log.info("cache %s has another format; recomputing every asset", self.folder)
        elif gen is not None and not (isinstance(gen, str) and isinstance(self.owned.get(gen),
                                                                          list)):
            damaged = True
        else:
            self.generation = gen
        if damaged:
            log.warning("cache manifest %s is damaged (wrong types or entries); recomputing"
                        " every asset (files it does not list are left in place)",
                        self.manifest_path)
            self.generation = None

    def _legacy_layout(self, entries: list[str]) -> dict | None:
        """Owned entries of a cache of format 1 (no manifest), or None when not one."""
        owned: dict[str, list[str] | None] = {}
        for name in entries:
            p = self.folder / name
            if p.is_symlink():
                return None
            if name == "index.json" and p.is_file():
                try:
                    idx = json.loads(p.read_text(encoding="utf-8"))
                except (OSError, ValueError):
                    return None
                if not isinstance(idx, dict) or idx.get("format") != 1:
                    return None
                owned[name] = None
            elif _LEGACY_TMP.match(name) and p.is_file():
                owned[name] = None
            elif _GEN_NAME.match(name) and p.is_dir():
                files = sorted(f.name for f in p.iterdir())
                if not all(f.endswith(".parquet") and (p / f).is_file() for f in files):
                    return None
                owned[name] = files
            else:
                return None
        return owned if "index.json" in owned else None

    def _write_manifest(self) -> None:
        data = {MARKER_KEY: FORMAT, "written_by": f"corridor {__version__}",
                "about": "corridor's cache of per-asset results; corridor deletes only what"
                         " this file lists; safe to delete as a whole",
                "generation": self.generation, "owned": self.owned}
        tmp = self.folder / f".{MARKER}.tmp-{os.getpid()}-{secrets.token_hex(4)}"
        fh = open(tmp, "x", encoding="utf-8")  # "x": a new file, never someone else's
        try:
            with fh:
                fh.write(json.dumps(data, indent=1))
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, self.manifest_path)
        except BaseException:
            with contextlib.suppress(OSError):
                tmp.unlink()
            raise

    # - index -
    def _load_index(self) -> dict:
        if self.generation is None:
            return {}
        path = self.folder / self.generation / "index.json"
        try:
            idx = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            log.warning("cache index %s unreadable (%s); recomputing every asset", path, exc)
            return {}
        if not isinstance(idx, dict) or idx.get("format") != FORMAT:
            log.warning("cache %s has another format; recomputing every asset", self.folder)
            return {}
        if idx.get("checksum") != CHECKSUM:
            log.info("cache %s was checked another way (%s); recomputing every asset",
                     self.folder, idx.get("checksum"))
            return {}
        tables, assets = idx.get("tables"), idx.get("assets")
        if (not isinstance(tables, dict) or not isinstance(assets, dict)
                or not all(isinstance(k, str) and _check_meta(m) for k, m in tables.items())
                or not all(isinstance(k, str) and _check_entry(e) for k, e in assets.items())
                or not all(m["file"] in (self.owned.get(self.generation) or [])
                           for m in tables.values())):
            log.warning("cache index %s is damaged (wrong types or entries); recomputing"
                        " every asset", path)
            return {}
        return idx

    @property
    def keys(self) -> dict[str, str]:
        """Cache key of each cached asset, by asset id (as str)."""
        return {a: e["key"] for a, e in self.index.get("assets", {}).items()}

    def load(self, asset_ids: set[str]) -> tuple[dict[str, pd.DataFrame], set[str]] | None:
        """Rows of the given assets of every cached table, checked against the index.

        Returns
        -------
        (tables, failed) or None
            ``failed``: the asset ids whose rows do not match their row count
            and checksum (their rows are left out of ``tables``); None when a
            table cannot be read at all.
        """
        if not asset_ids:
            return {}, set()
        gen = self.folder / str(self.generation)
        assets = self.index.get("assets", {})
        out = {}
        failed: set[str] = set()
        try:
            for name, meta in self.index.get("tables", {}).items():
                frame = read_table(gen / meta["file"], meta)
                if ([str(c) for c in frame.columns] != meta["columns"]
                        or "asset_id" not in frame.columns
                        or {c: str(frame[c].dtype) for c in frame.columns} != meta["dtypes"]):
                    raise ValueError(f"table {name}: columns or types differ from the index")
                aid = frame["asset_id"].astype(str)
                frame = frame[aid.isin(asset_ids).to_numpy()].reset_index(drop=True)
                sums = asset_checksums(frame)
                for a in asset_ids:
                    want = assets.get(a, {}).get("tables", {}).get(name)
                    got = sums.get(a)
                    if (want is None and got is not None) or (
                            want is not None and (got is None or list(got) != list(want))):
                        failed.add(a)
                out[name] = frame
            for a in asset_ids:  # a table the asset has rows in, missing from the index
                if set(assets.get(a, {}).get("tables", {})) - set(out):
                    failed.add(a)
        except Exception as exc:  # noqa: BLE001 - the cache is optional: any failure recomputes
            log.warning("cache %s unreadable (%s: %s); recomputing every asset", self.folder,
                        type(exc).__name__, exc)
            return None
        if failed:
            shown = ", ".join(sorted(failed)[:10]) + (" ..." if len(failed) > 10 else "")
            log.warning("cache %s: the cached rows of %d asset(s) do not match their row counts"
                        " or checksums (%s); those assets are recomputed", self.folder,
                        len(failed), shown)
            for name, frame in out.items():
                keep = ~frame["asset_id"].astype(str).isin(failed).to_numpy()
                if not keep.all():
                    out[name] = frame[keep].reset_index(drop=True)
        return out, failed

    # - writing -
    def store(self, keys: pd.DataFrame, tables: dict[str, pd.DataFrame]) -> bool:
        """Write a new generation with ``tables`` (all assets) and switch to it.

        Never fails the run: a cache that cannot be written (read-only,
        disk full, permission) logs a warning and returns False.
        """
        if not self.usable:
            return False
        try:
            self._store(keys, tables)
        except Exception as exc:  # noqa: BLE001 - the cache is optional
            log.warning("cache %s not written (%s: %s); the results are complete, the next"
                        " run recomputes what is missing", self.folder, type(exc).__name__, exc)
            log.debug("cache write failure", exc_info=True)
            return False
        return True

    def _store(self, keys: pd.DataFrame, tables: dict[str, pd.DataFrame]) -> None:
        existed = self.folder.exists()
        self.folder.mkdir(parents=True, exist_ok=True)
        if existed and not self.manifest_path.exists() and not self.owned:
            leftover = [p.name for p in self.folder.iterdir() if p.name not in DESKTOP_FILES]
            if leftover:  # something appeared since the folder was checked
                raise OSError(f"folder holds files corridor did not write: {leftover[:5]}")
        gen = f"g{int(time.time() * 1000):x}-{os.getpid()}"
        n = 0
        while (self.folder / gen).exists() or (self.folder / gen).is_symlink() \
                or gen in self.owned:
            n += 1
            gen = f"g{int(time.time() * 1000):x}-{os.getpid()}-{n}"
        files = {name: _file_name(name) for name in tables}
        self.owned[gen] = ["index.json", *files.values()]
        self._write_manifest()  # the new folder is listed before it exists
        gdir = self.folder / gen
        gdir.mkdir()
        metas = {}
        sums: dict[str, dict] = {}
        for name, frame in tables.items():
            metas[name] = {"file": files[name], **write_table(frame, gdir / files[name])}
            for aid, (count, digest) in asset_checksums(frame).items():
                sums.setdefault(aid, {})[name] = [count, digest]
        ids = keys["asset_id"].astype(str).tolist()
        index = {"format": FORMAT, "corridor": __version__, "checksum": CHECKSUM,
                 "written_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                 "tables": metas,
                 "assets": {a: {"key": str(k), "tables": sums.get(a, {})}
                            for a, k in zip(ids, keys["key"], strict=True)}}
        with open(gdir / "index.json", "x", encoding="utf-8") as fh:
            fh.write(json.dumps(index))
            fh.flush()
            os.fsync(fh.fileno())
        self.generation = gen
        self._write_manifest()  # the switch: atomic
        self.index = index
        self._prune()

    def _prune(self) -> None:
        """Delete the owned files of older generations, and own leftover manifest copies."""
        for name, files in list(self.owned.items()):
            if name == self.generation:
                continue
            p = self.folder / name
            if files is None:  # a plain file of the cache's (a link is removed, not followed)
                if p.is_symlink() or p.is_file():
                    p.unlink(missing_ok=True)
                del self.owned[name]
                continue
            if p.is_symlink() or (p.exists() and not p.is_dir()):
                del self.owned[name]  # not the folder the cache made: left alone
                continue
            for f in files:
                (p / f).unlink(missing_ok=True)
            try:
                p.rmdir()
            except FileNotFoundError:
                pass
            except OSError:
                log.warning("cache %s: folder %s holds files corridor did not write; left in"
                            " place", self.folder, name)
            del self.owned[name]
        for p in self.folder.iterdir():
            if _MANIFEST_TMP.match(p.name) and p.is_file() and not p.is_symlink():
                try:
                    data = json.loads(p.read_text(encoding="utf-8"))
                except (OSError, ValueError):
                    continue
                if isinstance(data, dict) and MARKER_KEY in data:
                    p.unlink(missing_ok=True)  # a manifest copy a killed run left
        self._write_manifest()


@contextlib.contextmanager
def locked(folder: Path):
    """Hold the lock of a cache folder (``<folder>.lock``, :mod:`corridor.lock`).

    Yields the folder, or None when the lock file cannot be written (read-only
    or full disk, no permission): the run then goes on without the cache,
    with a warning. Another live run holding the lock raises
    :class:`corridor.lock.LockError`, as for an output folder.
    """
    from corridor.lock import LockError, OutputLock

    lock = OutputLock(folder)
    try:
        lock.acquire()
    except LockError:
        raise
    except OSError as exc:
        log.warning("cache %s cannot be locked (%s); running without the cache", folder, exc)
        yield None
        return
    try:
        yield folder
    finally:
        try:
            lock.release()
        except OSError as exc:
            log.warning("cache lock %s not removed (%s)", lock.path, exc)


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
    known = set(inputs.assets["asset_id"].astype(str))
    bad = ~g["asset_id"].astype(str).isin(known).to_numpy()
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
    frames = [f for f in frames if f is not None]
    if not frames:
        return None
    full = [f for f in frames if len(f)]
    if not full:
        return frames[-1]
    if len(full) == 1:
        return full[0]
    full = _align_dtypes(full)
    if isinstance(full[0], gpd.GeoDataFrame):
        return gpd.GeoDataFrame(pd.concat(full, ignore_index=True),
                                geometry=full[0].geometry.name,
                                crs=crs if crs is not None else full[0].crs)
    return pd.concat(full, ignore_index=True)


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
    from corridor.pipeline import Run, subset_inputs
    from corridor.pipeline import compute as local_compute

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
        if loaded is None or _REJECTED not in loaded[0] or _COUNTS not in loaded[0]:
            hit[:] = False
        else:
            cached, failed = loaded
            if failed:
                hit &= ~np.isin(ids, list(failed))
    asset_pos = {a: i for i, a in enumerate(inputs.assets["asset_id"])}
    fresh: dict[str, pd.DataFrame] = {}
    while True:
        changed = ~hit
        if not changed.any():
            break
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
        if not hit.any() or set(fresh) == set(cached):
            break
        # the cached generation has other tables than this compute makes (other
        # stages): its rows cannot be merged; every asset is computed
        log.info("cache %s holds tables %s, this run makes %s; recomputing every asset",
                 folder, sorted(cached), sorted(fresh))
        hit[:] = False
        cached = {}
    names = list(dict.fromkeys([*fresh, *cached]))
    run = Run(cfg, inputs=inputs)
    merged = {}
    for name in names:
        table = concat_tables([cached.get(name), fresh.get(name)], crs=inputs.crs)
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
