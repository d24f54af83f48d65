"""Per-asset cache keys: what an asset's results depend on, hashed.

Per-asset results are independent of the other assets (see
:func:`corridor.pipeline.subset_inputs`); :mod:`corridor.cache` keeps them
under the keys made here, and :mod:`corridor.changes` names the causes of a
change from the key components.

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
"""

from __future__ import annotations

import functools
import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from corridor import __version__
from corridor.config import Config
from corridor.io.layers import Inputs

COMPONENTS = ("asset", "lines", "soil", "grounds", "config")
SOIL_REACH_M = 1.0


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
    res.pop("readings", None)  # readings change no asset's results (docs/methods.md §17)
    layers = res.get("layers", {})
    for v in layers.values():
        for entry in (v if isinstance(v, list) else [v]):
            if isinstance(entry, dict):
                entry.pop("path", None)
    return res


def limit_files(cfg: Config) -> list[Path]:
    from corridor.steps import LIMITS_DIR

    name = str(cfg.run.limit_set)
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
    lim = [str(cfg.run.limit_set).encode(),
           json.dumps(dict(cfg.limit_overrides), sort_keys=True, default=str).encode()]
    for p in limit_files(cfg):
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
    ids = lines["line_id"].astype(str).to_numpy()
    if len(set(ids)) < len(ids):  # a line in several features is one electrical line (its
        # fault currents depend on every part): each part's key covers all parts
        by_id: dict[str, list[str]] = {}
        for v, d in zip(ids, line_d, strict=True):
            by_id.setdefault(v, []).append(d)
        whole = {v: _sha(*(d.encode() for d in ds)) for v, ds in by_id.items() if len(ds) > 1}
        line_d = [whole.get(v, d) for v, d in zip(ids, line_d, strict=True)]
    reach = float(cfg.run.screening_distance_m) * (1.0 + 1e-6) + 1.0
    if len(lines):
        tree = shapely.STRtree(lines.geometry.to_numpy())
        ra, rl = tree.query(a_geo, predicate="dwithin", distance=reach)
    else:
        ra = rl = np.zeros(0, np.int64)
    order = np.lexsort((rl, ra))
    ra, rl = ra[order].astype(np.int64), rl[order].astype(np.int64)
    lines_h = _grouped(n, ra, rl, line_d)
    subs = getattr(inputs, "substations", None)
    if subs is not None and len(subs):  # substations' earth potential reaches far: every
        # asset's key covers the whole substation layer (docs/methods.md §18.4)
        sub_h = _sha(*(d.encode() for d in row_digests(subs)))
        lines_h = [_sha(h.encode(), sub_h.encode()) for h in lines_h]
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


