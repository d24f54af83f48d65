"""Reading input layers: any vector format GDAL reads, through pyogrio.

Layers are read with ``use_arrow=True`` (bulk I/O), renamed onto corridor's
canonical fields, validated feature by feature, reprojected to one metric CRS
and cleaned. Nothing is lost silently: every feature is either kept or
appears in the rejected list with the layer, feature id, field and reason.
"""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely
from pyproj import CRS

from corridor.config import Config, LayerSource
from corridor.errors import InputError
from corridor.schema import (
    ASSET_KINDS,
    GROUND_FIELDS,
    LINE_FIELDS,
    SOIL_FIELDS,
    FieldSpec,
    asset_fields,
)

log = logging.getLogger(__name__)

LINEAR_TYPES = ("LineString", "MultiLineString")


@dataclass
class Rejected:
    """Features that could not be used, one row each."""

    rows: list[dict] = field(default_factory=list)

    def add(self, layer: str, feature_id, fld: str, reason: str) -> None:
        self.rows.append({"layer": layer, "feature_id": str(feature_id), "field": fld,
                          "reason": reason})

    def frame(self) -> pd.DataFrame:
        return pd.DataFrame(self.rows, columns=["layer", "feature_id", "field", "reason"])


@dataclass
class Inputs:
    """All input layers, canonical, in the run CRS."""

    crs: CRS
    lines: gpd.GeoDataFrame
    assets: gpd.GeoDataFrame
    soil: gpd.GeoDataFrame | None
    grounds: gpd.GeoDataFrame | None
    towers: gpd.GeoDataFrame | None
    rejected: Rejected
    counts: dict[str, int]
    warnings: list[str]


def read_raw(src: LayerSource) -> gpd.GeoDataFrame:
    """Read one layer with pyogrio, turning GDAL failures into :class:`InputError`."""
    if src.layer is None:
        try:
            names = [str(n) for n in pyogrio.list_layers(src.path)[:, 0]]
        except (pyogrio.errors.DataSourceError, OSError, RuntimeError) as exc:
            raise InputError(f"layer {src.label}: file cannot be opened (corrupt, truncated,"
                             f" locked or not a GIS format): {exc}") from None
        if len(names) > 1:
            raise InputError(f"layer {src.label}: the file holds several layers"
                             f" ({', '.join(names)}); name one with 'layer = ...'")
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            gdf = pyogrio.read_dataframe(src.path, layer=src.layer, use_arrow=True)
        for w in caught:
            log.warning("layer %s: reader: %s", src.label, w.message)
    except pyogrio.errors.DataLayerError as exc:
        raise InputError(f"layer {src.label}: cannot be read: {exc}") from None
    except pyogrio.errors.DataSourceError as exc:
        if "locked" in str(exc).lower():
            raise InputError(f"layer {src.label}: file is locked by another program (an"
                             " editing session holds it); close it there or save the edits,"
                             f" then rerun: {exc}") from None
        raise InputError(f"layer {src.label}: file cannot be opened (corrupt, truncated, locked"
                         f" or not a GIS format): {exc}") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"layer {src.label}: attribute text is not valid UTF-8 ({exc});"
                         " re-save the layer as UTF-8") from None
    except (OSError, RuntimeError) as exc:
        raise InputError(f"layer {src.label}: cannot be read: {exc}") from None
    except shapely.errors.GEOSException as exc:
        raise InputError(f"layer {src.label}: a geometry cannot be decoded ({exc}), e.g. a"
                         " line with a single point; fix or delete that feature") from None
    for col in gdf.columns:
        if col == getattr(gdf, "_geometry_column_name", None) or gdf[col].dtype.kind in "biufcmM":
            continue
        try:
            gdf[col].to_numpy(dtype=object)
        except Exception as exc:  # pyarrow's ArrowException on undecodable text
            if "Arrow" not in type(exc).__name__:
                raise
            raise InputError(f"layer {src.label}: field '{col}': text values are not valid"
                             f" UTF-8 ({exc}); re-save the layer as UTF-8 (or give a Shapefile"
                             " a .cpg file naming its encoding)") from None
    if not isinstance(gdf, gpd.GeoDataFrame) or gdf.geometry is None:
        raise InputError(f"layer {src.label}: has no geometry column")
    if gdf.crs is None:
        if src.crs is None:
            raise InputError(f"layer {src.label}: has no CRS; declare one with 'crs = ...' in the"
                             " layer's config table")
        gdf = gdf.set_crs(src.crs)
    return gdf


def choose_crs(cfg: Config, layers: list[gpd.GeoDataFrame]) -> CRS:
    """Pick the run's metric CRS.

    The config's ``run.crs`` wins. Otherwise the first layer's CRS if it is
    projected; if the inputs are geographic, the UTM zone of the data's
    centre from :meth:`geopandas.GeoDataFrame.estimate_utm_crs`.
    """
    if cfg.run["crs"]:
        return CRS.from_user_input(cfg.run["crs"])
    first = layers[0]
    if first.crs.is_projected:
        unit = first.crs.axis_info[0].unit_name if first.crs.axis_info else "metre"
        if unit in ("metre", "meter"):
            return first.crs
    utm = first.estimate_utm_crs()
    log.info("inputs are not in a metric CRS; using %s chosen from the data", utm.to_string())
    return utm


def _id_column(gdf: gpd.GeoDataFrame, src: LayerSource, canonical: str) -> str | None:
    user = src.fields.get(canonical, canonical)
    return user if user in gdf.columns else None


def _feature_ids(gdf: gpd.GeoDataFrame, id_col: str | None) -> pd.Series:
    if id_col is None:
        return pd.Series([f"#{i}" for i in range(len(gdf))], index=gdf.index)
    ids = gdf[id_col]
    out = ids.astype("string").fillna("").str.strip()
    missing = out == ""
    out[missing] = [f"#{i}" for i in np.flatnonzero(missing.to_numpy())]
    return out


def _coerce(series: pd.Series, spec: FieldSpec) -> tuple[pd.Series, np.ndarray, list[str]]:
    """Coerce a column to its spec; return values, bad mask and reasons."""
    n = len(series)
    reasons = [""] * n
    if spec.dtype in ("float", "int"):
        values = pd.to_numeric(series, errors="coerce").astype("float64")
        arr = values.to_numpy()
        bad = ~np.isfinite(arr)
        for i in np.flatnonzero(bad):
            raw = series.iloc[i]
            reasons[i] = "missing" if pd.isna(raw) else f"not a number: {raw!r}"
        if spec.low is not None:
            low = np.isfinite(arr) & (arr < spec.low)
            for i in np.flatnonzero(low):
                reasons[i] = f"{arr[i]} below the valid range [{spec.low}, {spec.high}]"
            bad |= low
        if spec.high is not None:
            high = np.isfinite(arr) & (arr > spec.high)
            for i in np.flatnonzero(high):
                reasons[i] = f"{arr[i]} above the valid range [{spec.low}, {spec.high}]"
            bad |= high
        return values, bad, reasons
    if spec.dtype == "bool":
        text = series.astype("string").str.strip().str.lower()
        truth = {"true": True, "1": True, "yes": True, "y": True, "t": True,
                 "false": False, "0": False, "no": False, "n": False, "f": False,
                 "1.0": True, "0.0": False}
        mapped = text.map(truth)
        bad = mapped.isna().to_numpy()
        for i in np.flatnonzero(bad):
            raw = series.iloc[i]
            reasons[i] = "missing" if pd.isna(raw) else f"not true/false: {raw!r}"
        return mapped.astype("object"), bad, reasons
    text = series.astype("string").str.strip()
    bad = (text.isna() | (text == "")).to_numpy()
    for i in np.flatnonzero(bad):
        reasons[i] = "missing"
    if spec.choices is not None:
        lowered = text.str.lower()
        wrong = ~bad & ~lowered.isin(spec.choices).to_numpy()
        for i in np.flatnonzero(wrong):
            reasons[i] = f"{text.iloc[i]!r} is not one of {', '.join(spec.choices)}"
        bad = bad | wrong
        text = lowered
    return text.astype("object"), bad, reasons


def _attributes(gdf, src, specs, defaults, ids, rejected, warnings, allow_defaults,
                keep_mask) -> pd.DataFrame:
    """Validate and coerce every field of ``specs``; update ``keep_mask`` in place."""
    out = {}
    for spec in specs:
        user = src.fields.get(spec.name, spec.name)
        default = defaults.get(spec.name, spec.default)
        if user not in gdf.columns:
            if spec.name in src.fields:
                cols = ", ".join(str(c) for c in gdf.columns if c != gdf.geometry.name)
                raise InputError(f"layer {src.label}: field '{user}' (mapped to corridor field"
                                 f" '{spec.name}') is not in the layer; its fields are: {cols}")
            if default is None:
                raise InputError(f"layer {src.label}: field '{user}' (corridor field"
                                 f" '{spec.name}') is missing and has no default")
            out[spec.name] = pd.Series([default] * len(gdf), index=gdf.index, dtype="object")
            log.debug("layer %s: field '%s' absent; default %r used for all features",
                      src.label, user, default)
            continue
        values, bad, reasons = _coerce(gdf[user], spec)
        if bad.any():
            bad_idx = np.flatnonzero(bad & keep_mask)
            if default is not None and allow_defaults:
                values = values.astype("object")
                values.iloc[bad_idx] = default
                for i in bad_idx:
                    msg = (f"layer {src.label}: feature {ids.iloc[i]}: field '{user}':"
                           f" {reasons[i]}; default {default!r} used")
                    warnings.append(msg)
                    log.warning(msg)
            else:
                for i in bad_idx:
                    rejected.add(src.label, ids.iloc[i], user, reasons[i])
                keep_mask &= ~bad
        out[spec.name] = values
    frame = pd.DataFrame(out, index=gdf.index)
    return frame


def _clean_geometry(gdf, src, ids, rejected, warnings, keep_mask, types) -> np.ndarray:
    """Drop Z/M, repair what is safe, reject the rest. Returns the geometry array."""
    geoms = gdf.geometry.to_numpy()
    has_z = shapely.has_z(geoms)
    if has_z.any():
        log.info("layer %s: Z/M coordinates dropped on %d features", src.label, int(has_z.sum()))
        geoms = shapely.force_2d(geoms)
    missing = shapely.is_missing(geoms)
    empty = np.zeros(len(geoms), bool)
    empty[~missing] = shapely.is_empty(geoms[~missing])
    kind = np.array(["" if g is None else g.geom_type for g in geoms], dtype=object)
    coords_ok = np.ones(len(geoms), bool)
    present = ~missing & ~empty
    if present.any():
        pts, idx = shapely.get_coordinates(geoms[present], return_index=True)
        finite = np.isfinite(pts).all(axis=1)
        badrows = np.unique(idx[~finite])
        coords_ok[np.flatnonzero(present)[badrows]] = False
    for i in range(len(geoms)):
        if not keep_mask[i]:
            continue
        reason = None
        if missing[i]:
            reason = "no geometry"
        elif empty[i]:
            reason = "empty geometry"
        elif not coords_ok[i]:
            reason = "NaN or infinite coordinates"
        elif kind[i] not in types:
            if types == LINEAR_TYPES and kind[i] == "GeometryCollection":
                lines = shapely.line_merge(shapely.union_all(
                    [g for g in geoms[i].geoms if g.geom_type in LINEAR_TYPES]))
                if not lines.is_empty and lines.geom_type in LINEAR_TYPES:
                    geoms[i] = lines
                    warnings.append(f"layer {src.label}: feature {ids.iloc[i]}: geometry"
                                    " collection reduced to its lines")
                    continue
            reason = f"geometry type {kind[i]} (expected {' or '.join(types)})"
        elif types == LINEAR_TYPES and shapely.length(geoms[i]) <= 0.0:
            reason = "zero-length line"
        elif types == LINEAR_TYPES and not shapely.is_simple(geoms[i]):
            msg = (f"layer {src.label}: feature {ids.iloc[i]}: line crosses itself; kept as"
                   " drawn (each part couples on its own)")
            warnings.append(msg)
            log.warning(msg)
        elif types != LINEAR_TYPES and not shapely.is_valid(geoms[i]):
            fixed = shapely.make_valid(geoms[i])
            polys = shapely.get_parts(fixed)
            polys = [p for p in polys if p.geom_type in ("Polygon", "MultiPolygon")]
            if polys:
                geoms[i] = shapely.union_all(polys)
                msg = f"layer {src.label}: feature {ids.iloc[i]}: invalid polygon repaired"
                warnings.append(msg)
                log.warning(msg)
            else:
                reason = "invalid polygon that cannot be repaired"
        if reason is not None:
            rejected.add(src.label, ids.iloc[i], "geometry", reason)
            keep_mask[i] = False
    return geoms


def _read_layer(src: LayerSource, specs: tuple[FieldSpec, ...], defaults: dict, id_field: str,
                types: tuple[str, ...], crs: CRS, rejected: Rejected, warnings: list[str],
                allow_defaults: bool, gdf: gpd.GeoDataFrame | None = None,
                label_field: str | None = None) -> gpd.GeoDataFrame:
    gdf = read_raw(src) if gdf is None else gdf
    if len(gdf) == 0:
        raise InputError(f"layer {src.label}: is empty")
    if src.role == "grounds":
        # a series break needs no resistance to earth
        item_col = src.fields.get("item", "item")
        r_col = src.fields.get("resistance_ohm", "resistance_ohm")
        if item_col in gdf.columns and r_col in gdf.columns:
            gdf = gdf.copy()
            brk = gdf[item_col].astype("string").str.strip().str.lower() != "ground"
            gdf.loc[brk.fillna(False).to_numpy(), r_col] = 1.0
    id_col = _id_column(gdf, src, id_field) if id_field else None
    if label_field is not None:
        id_col = _id_column(gdf, src, label_field) or id_col
    ids = _feature_ids(gdf, id_col)
    keep = np.ones(len(gdf), bool)
    if id_field and _id_column(gdf, src, id_field) is None:
        raise InputError(f"layer {src.label}: id field '{src.fields.get(id_field, id_field)}'"
                         f" (corridor field '{id_field}') is missing")
    if id_col is not None and src.role in ("power_lines", "assets"):
        raw_ids = gdf[id_col].astype("string").str.strip()
        for i in np.flatnonzero((raw_ids.isna() | (raw_ids == "")).to_numpy()):
            rejected.add(src.label, ids.iloc[i], id_col, "missing id")
            keep[i] = False
        dup = raw_ids[keep].duplicated(keep=False)
        if dup.any():
            names = sorted(set(raw_ids[keep][dup].tolist()))
            raise InputError(f"layer {src.label}: duplicate ids in field '{id_col}':"
                             f" {', '.join(names[:10])}{' ...' if len(names) > 10 else ''}")
    attrs = _attributes(gdf, src, [s for s in specs if s.name != id_field], defaults, ids,
                        rejected, warnings, allow_defaults, keep)
    geoms = _clean_geometry(gdf, src, ids, rejected, warnings, keep, types)
    attrs.insert(0, "feature_id", ids.to_numpy())
    if id_field:
        key = _feature_ids(gdf, _id_column(gdf, src, id_field))
        attrs.insert(0, id_field, key.to_numpy())
    out = gpd.GeoDataFrame(attrs, geometry=gpd.GeoSeries(geoms, index=gdf.index, crs=gdf.crs))
    out = out[keep]
    if not out.crs.equals(crs):
        out = out.to_crs(crs)
        bad = ~np.isfinite(shapely.get_coordinates(out.geometry.to_numpy())).all(axis=1)
        if bad.any():
            raise InputError(f"layer {src.label}: reprojection to {crs.to_string()} produced"
                             " non-finite coordinates; check the layer's CRS")
    out["source_layer"] = src.label
    return out.reset_index(drop=True)


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
    allow = bool(cfg.run["use_kind_defaults"])
    raws: dict[int, gpd.GeoDataFrame] = {}
    sources = [cfg.power_lines, *cfg.assets]
    for i, src in enumerate(sources):
        try:
            raws[i] = read_raw(src)
        except InputError as exc:
            problems.extend(exc.problems)
    for i, src in enumerate(sources):
        if i in raws and len(raws[i]) == 0:
            problems.append(f"layer {src.label}: is empty")
    if problems:
        raise InputError(problems)
    crs = choose_crs(cfg, list(raws.values()))
    try:
        lines = _read_layer(cfg.power_lines, LINE_FIELDS, dict(cfg.line_defaults), "line_id",
                            LINEAR_TYPES, crs, rejected, warnings, True, gdf=raws[0])
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
                    f" {cfg.arrangements_path.name}")
            lines = lines[~bad]
        if unknown:
            problems.append(f"layer {cfg.power_lines.label}: arrangements referred to but not"
                            f" defined in {cfg.arrangements_path.name}: {', '.join(unknown)}")
        lines = lines.reset_index(drop=True)
    asset_frames = []
    for i, src in enumerate(cfg.assets, start=1):
        try:
            asset_frames.append(_read_assets(src, cfg, crs, rejected, warnings, allow, raws[i]))
        except InputError as exc:
            problems.extend(exc.problems)
    optional = {}
    for role, specs, id_field, types in (
            ("soil", SOIL_FIELDS, None, ("Polygon", "MultiPolygon")),
            ("grounds", GROUND_FIELDS, "asset_id", ("Point",)),
            ("towers", (), "line_id", ("Point",))):
        label = {"grounds": "ground_id", "towers": "tower_id"}.get(role)
        src = getattr(cfg, role)
        if src is None:
            optional[role] = None
            continue
        try:
            optional[role] = _read_layer(src, specs, {}, id_field, types, crs, rejected,
                                         warnings, False, label_field=label)
        except InputError as exc:
            problems.extend(exc.problems)
    if problems:
        raise InputError(problems)
    assets = pd.concat(asset_frames, ignore_index=True)
    dup = assets["asset_id"].duplicated(keep=False)
    if dup.any():
        names = sorted(set(assets.loc[dup, "asset_id"]))
        raise InputError("asset layers: duplicate asset ids across layers: "
                         + ", ".join(names[:10]))
    assets = gpd.GeoDataFrame(assets, geometry="geometry", crs=crs)
    counts = {"power_lines": len(lines), "assets": len(assets),
              "rejected": len(rejected.rows)}
    for role, frame in optional.items():
        if frame is not None:
            counts[role] = len(frame)
    return Inputs(crs, lines, assets, optional["soil"], optional["grounds"], optional["towers"],
                  rejected, counts, warnings)


def _read_assets(src, cfg, crs, rejected, warnings, allow, raw) -> gpd.GeoDataFrame:
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
    bad_kind = ~kinds.isin(ASSET_KINDS)
    if bad_kind.any():
        id_col = _id_column(raw, src, "asset_id")
        ids = _feature_ids(raw, id_col)
        for i in np.flatnonzero(bad_kind.to_numpy()):
            rejected.add(src.label, ids.iloc[i], src.fields.get("asset_kind", "asset_kind"),
                         f"unknown asset kind {kinds.iloc[i]!r}"
                         f" (allowed: {', '.join(ASSET_KINDS)})")
    for kind in ASSET_KINDS:
        part = raw[(kinds == kind).to_numpy()]
        if len(part) == 0:
            continue
        frame = _read_layer(src, asset_fields(kind), dict(cfg.kind_defaults[kind]), "asset_id",
                            LINEAR_TYPES, crs, rejected, warnings, allow, gdf=part)
        frame.insert(1, "asset_kind", kind)
        frames.append(frame)
    if not frames:
        raise InputError(f"layer {src.label}: no usable asset features")
    return pd.concat(frames, ignore_index=True)
