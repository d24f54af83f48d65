"""Reading input layers: any vector format GDAL reads, through pyogrio.

Layers are read with ``use_arrow=True`` (bulk I/O), renamed onto corridor's
canonical fields, validated feature by feature, reprojected to one metric CRS
and cleaned. Nothing is lost silently: every feature is either kept or
appears in the rejected list with the layer, feature id, field and reason.

The steps live in their own modules: opening a layer and choosing the CRS
(:mod:`corridor.io.raw`), ids and attribute values (:mod:`corridor.io.fields`),
geometries (:mod:`corridor.io.clean`), lines drawn in several features
(:mod:`corridor.io.line_parts`) and the rejected list
(:mod:`corridor.io.rejected`); their public names are importable from here too.
"""

from __future__ import annotations

import logging
import warnings as warnings_module
from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd
from pyproj import CRS

from corridor.config import Config, LayerSource
from corridor.errors import InputError
from corridor.io import line_parts
from corridor.io.clean import LINEAR_TYPES, clean_geometry, within_extent
from corridor.io.fields import attributes, feature_ids, feature_labels, id_column, id_text
from corridor.io.raw import EXTENT_LIMIT_M, choose_crs, read_raw, run_extent
from corridor.io.rejected import (
    REJECT_COLUMNS,
    REJECT_ROLES,
    REJECTED_SHOWN,
    Rejected,
    log_rejected,
)
from corridor.registry import registry
from corridor.schema import GROUND_FIELDS, LINE_FIELDS, SOIL_FIELDS, SUBSTATION_FIELDS
from corridor.settings import Spec

__all__ = ["EXTENT_LIMIT_M", "LINEAR_TYPES", "REJECTED_SHOWN", "REJECT_COLUMNS", "REJECT_ROLES",
           "Inputs", "Rejected", "choose_crs", "feature_labels", "id_text", "log_rejected",
           "read_inputs", "read_raw", "run_extent"]

log = logging.getLogger(__name__)


@dataclass
class Inputs:
    """All input layers, canonical, in the run CRS.

    ``defaults_used`` maps a canonical field name to the ids of the power
    lines or assets whose *missing* value of that field was filled from
    ``[line_defaults]`` or the asset kind's defaults (an absent column counts
    as missing for every feature). Invalid values are never filled: they
    reject the feature.
    """

    crs: CRS
    lines: gpd.GeoDataFrame
    assets: gpd.GeoDataFrame
    soil: gpd.GeoDataFrame | None
    grounds: gpd.GeoDataFrame | None
    towers: gpd.GeoDataFrame | None
    rejected: Rejected
    counts: dict[str, int]
    warnings: list[str]
    defaults_used: dict[str, list[str]] = field(default_factory=dict)
    #: Optional substations (points with a fault current and a grid resistance).
    substations: gpd.GeoDataFrame | None = None


def _read_layer(src: LayerSource, specs: tuple[Spec, ...], defaults: dict,
                id_field: str | None, types: tuple[str, ...], crs: CRS, rejected: Rejected,
                warnings: list[str],
                allow_defaults: bool, gdf: gpd.GeoDataFrame | None = None,
                label_field: str | None = None,
                defaults_used: dict[str, list[str]] | None = None) -> gpd.GeoDataFrame:
    gdf = read_raw(src) if gdf is None else gdf
    if len(gdf) == 0:
        raise InputError(f"layer {src.label}: is empty")
    if src.role == "grounds":
        # a series break needs no resistance to earth: whatever its column holds (NULL,
        # text, a number) is replaced by a placeholder that passes validation
        item_col = src.fields.get("item", "item")
        r_col = src.fields.get("resistance_ohm", "resistance_ohm")
        if item_col in gdf.columns and r_col in gdf.columns:
            brk = (gdf[item_col].astype("string").str.strip().str.lower() != "ground")
            brk = brk.fillna(False).to_numpy(dtype=bool)
            if brk.any():
                gdf = gdf.copy()
                col = gdf[r_col].astype(object)
                col.iloc[np.flatnonzero(brk)] = 1.0
                gdf[r_col] = col
    id_col = id_column(gdf, src, id_field) if id_field else None
    if label_field is not None:
        id_col = id_column(gdf, src, label_field) or id_col
    ids = feature_ids(gdf, id_col)
    keep = np.ones(len(gdf), bool)
    if id_field:
        key_col = id_column(gdf, src, id_field)
        if key_col is None:
            raise InputError(f"layer {src.label}: id field"
                             f" '{src.fields.get(id_field, id_field)}' (corridor field"
                             f" '{id_field}') is missing")
        raw_ids = id_text(gdf[key_col])
        what = {"grounds": "asset id", "towers": "line id"}.get(src.role, "id")
        for i in np.flatnonzero(raw_ids.isna().to_numpy()):
            rejected.add(src.label, ids.iloc[i], key_col, f"missing {what}", src.role)
            keep[i] = False
        if src.role == "assets":  # a power line may come in several features (one line)
            dup = raw_ids[keep].duplicated(keep=False)
            if dup.any():
                names = sorted(set(raw_ids[keep][dup].tolist()))
                raise InputError(f"layer {src.label}: duplicate ids in field '{key_col}':"
                                 f" {', '.join(names[:10])}{' ...' if len(names) > 10 else ''}")
    filled: dict[str, np.ndarray] = {}
    attrs = attributes(gdf, src, [s for s in specs if s.name != id_field], defaults, ids,
                        rejected, warnings, allow_defaults, keep, filled)
    geoms = clean_geometry(gdf, src, ids, rejected, warnings, keep, types)
    attrs.insert(0, "feature_id", ids.to_numpy())
    if id_field:
        key = feature_ids(gdf, id_column(gdf, src, id_field))
        attrs.insert(0, id_field, key.to_numpy(dtype=object))
    out = gpd.GeoDataFrame(attrs, geometry=gpd.GeoSeries(geoms, index=gdf.index, crs=gdf.crs))
    out = out[keep]
    if not out.crs.equals(crs):
        with warnings_module.catch_warnings():
            warnings_module.simplefilter("ignore", RuntimeWarning)  # inf from far coordinates
            out = out.to_crs(crs)
    out = within_extent(out, src, crs, rejected)
    if src.role == "power_lines":
        out = line_parts.settle_parts(out, src, rejected)
    if defaults_used is not None and id_field:
        kept = set(out[id_field])
        for name, mask in filled.items():
            fids = [str(v) for v, m in zip(key, mask, strict=True) if m and v in kept]
            if fids:
                defaults_used.setdefault(name, []).extend(fids)
    out["source_layer"] = src.label
    return out.reset_index(drop=True)


def _reject_orphans(frame: gpd.GeoDataFrame | None, src: LayerSource | None, ref: str,
                    known: set, rejected_ids: set, what: str, rejected: Rejected):
    """Reject ground items or towers naming an unknown or rejected asset or line."""
    if frame is None or src is None or len(frame) == 0:
        return frame
    bad = ~frame[ref].isin(known).to_numpy()
    user = src.fields.get(ref, ref)
    for fid, value in zip(frame["feature_id"][bad], frame[ref][bad], strict=True):
        if value in rejected_ids:
            reason = f"{what} {value!r} was rejected (see its own row)"
        else:
            reason = f"{what} {value!r} is not in any {what} layer"
        rejected.add(src.label, fid, user, reason, src.role)
    return frame[~bad].reset_index(drop=True)


def _soil_with_resistivity(soil: gpd.GeoDataFrame, src: LayerSource,
                           rejected: Rejected) -> gpd.GeoDataFrame:
    """Soil polygons that give a resistivity: the homogeneous one or a top layer's.

    A two-layer polygon may leave ``soil_resistivity_ohm_m`` out; a polygon that gives
    neither is rejected (it is never filled from ``run.default_soil_resistivity_ohm_m``).
    """
    hom = pd.to_numeric(soil["soil_resistivity_ohm_m"], errors="coerce").to_numpy(float)
    top = (pd.to_numeric(soil["top_resistivity_ohm_m"], errors="coerce").to_numpy(float)
           if "top_resistivity_ohm_m" in soil else np.full(len(soil), np.nan))
    none = ~np.isfinite(hom) & ~np.isfinite(top)
    for i in np.flatnonzero(none):
        rejected.add(src.label, soil["feature_id"].iloc[i],
                     src.fields.get("soil_resistivity_ohm_m", "soil_resistivity_ohm_m"),
                     "no resistivity: give soil_resistivity_ohm_m or top_resistivity_ohm_m",
                     role="soil")
    return soil[~none].reset_index(drop=True) if none.any() else soil


def read_inputs(cfg: Config) -> Inputs:
    """Read and validate every input layer of a run.

    Raises
    ------
    InputError
        For whole-layer problems (missing file, empty layer, duplicate ids,
        missing required field, no CRS), listing all found in one pass.
    """
    rejected = Rejected()
    warnings: list[str] = []
    problems: list[str] = []
    defaults_used: dict[str, list[str]] = {}
    allow = cfg.run.use_kind_defaults
    raws: dict[int, gpd.GeoDataFrame] = {}
    sources = [cfg.power_lines, *cfg.assets]
    for i, src in enumerate(sources):
        try:
            raws[i] = read_raw(src)
        except InputError as exc:
            problems.extend(exc.problems)
    from corridor.io import osm

    for i, src in enumerate(sources):  # OpenStreetMap: rejected ways, defaults, frequency
        if i in raws and osm.source_is_osm(src):
            raws[i] = osm.settle(raws[i], src, cfg, rejected, warnings, defaults_used)
    for i, src in enumerate(sources):
        if i in raws and len(raws[i]) == 0:
            problems.append(f"layer {src.label}: is empty")
    if problems:
        raise InputError(problems)
    crs = choose_crs(cfg, list(raws.values()))
    try:
        lines = _read_layer(cfg.power_lines, LINE_FIELDS, dict(cfg.line_defaults), "line_id",
                            LINEAR_TYPES, crs, rejected, warnings, True, gdf=raws[0],
                            defaults_used=defaults_used)
    except InputError as exc:
        problems.extend(exc.problems)
        lines = None
    if lines is not None:
        unknown = sorted(set(lines["arrangement"]) - set(cfg.arrangements))
        for name in unknown:
            bad = lines["arrangement"] == name
            for fid in lines.loc[bad, "line_id"]:
                rejected.add(cfg.power_lines.label, fid, cfg.power_lines.fields.get(
                    "arrangement", "arrangement"), f"arrangement {name!r} is not defined in"
                    f" {cfg.arrangements_path.name}", "power_lines")
            lines = lines[~bad]
        if unknown:
            problems.append(f"layer {cfg.power_lines.label}: arrangements referred to but not"
                            f" defined in {cfg.arrangements_path.name}: {', '.join(unknown)}")
        lines = line_parts.drop_incomplete(lines.reset_index(drop=True), cfg.power_lines,
                                           rejected)
    asset_frames = []
    for i, src in enumerate(cfg.assets, start=1):
        try:
            asset_frames.append(_read_assets(src, cfg, crs, rejected, warnings, allow, raws[i],
                                             defaults_used))
        except InputError as exc:
            problems.extend(exc.problems)
    optional: dict[str, gpd.GeoDataFrame | None] = {}
    for role, specs, id_field, types in (
            ("soil", SOIL_FIELDS, None, ("Polygon", "MultiPolygon")),
            ("grounds", GROUND_FIELDS, "asset_id", ("Point",)),
            ("towers", (), "line_id", ("Point",)),
            ("substations", SUBSTATION_FIELDS, None, ("Point",))):
        label = {"grounds": "ground_id", "towers": "tower_id",
                 "substations": "substation_id"}.get(role)
        opt_src: LayerSource | None = getattr(cfg, role, None)
        if opt_src is None:
            optional[role] = None
            continue
        defaults = ({"clearing_time_s": cfg.line_defaults["clearing_time_s"]}
                    if role == "substations" and "clearing_time_s" in cfg.line_defaults
                    else {})
        try:
            # soil: a NULL field is an empty one (homogeneous soil, no local value);
            # _soil_with_resistivity rejects a polygon that gives no resistivity at all
            optional[role] = _read_layer(opt_src, specs, defaults, id_field, types, crs, rejected,
                                         warnings, role in ("soil", "substations"),
                                         label_field=label)
        except InputError as exc:
            problems.extend(exc.problems)
    if optional.get("soil") is not None and cfg.soil is not None:
        optional["soil"] = _soil_with_resistivity(optional["soil"], cfg.soil, rejected)
    if problems:
        raise InputError(problems)
    assets = pd.concat(asset_frames, ignore_index=True)
    dup = assets["asset_id"].duplicated(keep=False)
    if dup.any():
        names = sorted(set(assets.loc[dup, "asset_id"]))
        raise InputError("asset layers: duplicate asset ids across layers: "
                         + ", ".join(names[:10]))
    assets = gpd.GeoDataFrame(assets, geometry="geometry", crs=crs)
    optional["grounds"] = _reject_orphans(
        optional["grounds"], cfg.grounds, "asset_id", set(assets["asset_id"]),
        {r["feature_id"] for r in rejected.by_role("assets")}, "asset", rejected)
    optional["towers"] = _reject_orphans(
        optional["towers"], cfg.towers, "line_id", set(lines["line_id"]),
        {r["feature_id"] for r in rejected.by_role("power_lines")}, "line", rejected)
    kept = set(lines["line_id"]) | set(assets["asset_id"])
    defaults_used = {name: [i for i in dict.fromkeys(ids) if i in kept]
                     for name, ids in defaults_used.items()}
    defaults_used = {name: ids for name, ids in defaults_used.items() if ids}
    counts = {"power_lines": len(lines), "assets": len(assets),
              "rejected": len(rejected.rows)}
    for role, frame in optional.items():
        if frame is not None:
            counts[role] = len(frame)
    log_rejected(rejected)
    return Inputs(crs, lines, assets, optional["soil"], optional["grounds"], optional["towers"],
                  rejected, counts, warnings, defaults_used, optional.get("substations"))


def _read_assets(src, cfg, crs, rejected, warnings, allow, raw,
                 defaults_used=None) -> gpd.GeoDataFrame:
    if len(raw) == 0:
        raise InputError(f"layer {src.label}: is empty")
    if src.kind is not None:
        kinds = pd.Series([src.kind] * len(raw), index=raw.index)
    else:
        col = src.fields.get("asset_kind", "asset_kind")
        if col not in raw.columns:
            raise InputError(f"layer {src.label}: no 'kind' in its config table and no"
                             f" field '{col}' giving the asset kind")
        kinds = raw[col].astype("string").str.strip().str.lower()
    frames = []
    kind_names = registry.kind_names()
    bad_kind = ~kinds.isin(list(kind_names)).fillna(False)
    if bad_kind.any():
        id_col = id_column(raw, src, "asset_id")
        ids = feature_ids(raw, id_col)
        for i in np.flatnonzero(bad_kind.to_numpy()):
            kind = kinds.iloc[i]
            what = "missing asset kind" if pd.isna(kind) or kind == "" else \
                f"unknown asset kind {kind!r}"
            rejected.add(src.label, ids.iloc[i], src.fields.get("asset_kind", "asset_kind"),
                         f"{what} (allowed: {', '.join(kind_names)})", "assets")
    for kind in kind_names:
        part = raw[(kinds == kind).fillna(False).to_numpy(dtype=bool)]
        if len(part) == 0:
            continue
        frame = _read_layer(src, registry.asset_fields(kind), dict(cfg.kind_defaults[kind]),
                            "asset_id", LINEAR_TYPES, crs, rejected, warnings, allow, gdf=part,
                            defaults_used=defaults_used)
        frame.insert(1, "asset_kind", kind)
        frames.append(frame)
    if not frames:
        raise InputError(f"layer {src.label}: no usable asset features")
    return pd.concat(frames, ignore_index=True)
