"""Reading input layers: any vector format GDAL reads, through pyogrio.

Layers are read with ``use_arrow=True`` (bulk I/O), renamed onto corridor's
canonical fields, validated feature by feature, reprojected to one metric CRS
and cleaned. Nothing is lost silently: every feature is either kept or
appears in the rejected list with the layer, feature id, field and reason.
"""

from __future__ import annotations

import logging
import warnings
import warnings as warnings_module
from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely
from pyproj import CRS

from corridor.config import Config, LayerSource
from corridor.errors import InputError
from corridor.io import line_parts
from corridor.registry import registry
from corridor.schema import GROUND_FIELDS, LINE_FIELDS, SOIL_FIELDS
from corridor.settings import Spec

log = logging.getLogger(__name__)

LINEAR_TYPES = ("LineString", "MultiLineString")


#: Roles of the rows of :class:`Rejected`: which kind of input a rejected feature was.
REJECT_ROLES = ("power_lines", "assets", "soil", "grounds", "towers")
#: Columns of :meth:`Rejected.frame` (and of ``rejected.csv``).
REJECT_COLUMNS = ["layer", "feature_id", "field", "reason", "role"]


@dataclass
class Rejected:
    """Features that could not be used, one row each.

    Each row is a dict with ``layer``, ``feature_id``, ``field``, ``reason``
    and ``role`` (one of :data:`REJECT_ROLES`): a rejected power line leaves
    the screen incomplete, a rejected asset leaves that asset unscreened.
    """

    rows: list[dict] = field(default_factory=list)

    def add(self, layer: str, feature_id, fld: str, reason: str, role: str = "assets") -> None:
        """Record one rejected feature.

        Parameters
        ----------
        layer : str
            Layer label (``file:layer``).
        feature_id : object
            Id of the feature (stored as text).
        fld : str
            The user's field name at fault, or ``"geometry"``.
        reason : str
            Why the feature was rejected.
        role : str
            One of :data:`REJECT_ROLES`.
        """
        if role not in REJECT_ROLES:
            raise ValueError(f"unknown role {role!r}; expected one of {', '.join(REJECT_ROLES)}")
        self.rows.append({"layer": layer, "feature_id": str(feature_id), "field": fld,
                          "reason": reason, "role": role})

    def by_role(self, role: str) -> list[dict]:
        """The rows of one role (see :data:`REJECT_ROLES`), in the order they were added."""
        return [r for r in self.rows if r.get("role") == role]

    def frame(self) -> pd.DataFrame:
        """All rows as a table with the columns :data:`REJECT_COLUMNS`."""
        frame = pd.DataFrame(self.rows, columns=REJECT_COLUMNS)
        frame["role"] = frame["role"].fillna("")
        return frame


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


def read_raw(src: LayerSource) -> gpd.GeoDataFrame:
    """Read one layer with pyogrio, turning GDAL failures into :class:`InputError`.

    ``src.path`` is a regular file (GeoPackage, Shapefile, GeoJSON, ...) or a
    folder dataset: an Esri File Geodatabase (``.gdb``, GDAL's OpenFileGDB
    driver) or a folder of Shapefiles. A dataset holding several layers needs
    ``layer = ...``; anything else (FIFO, device, socket) is refused before
    it is opened, since reading one can block forever. An OpenStreetMap
    extract is read through the tag preset (:func:`corridor.io.osm.read_osm`).
    """
    from corridor.io import osm

    if osm.source_is_osm(src):
        return osm.read_osm(src, read_raw)
    what = "folder" if src.path.is_dir() else "file"
    if not (src.path.is_file() or src.path.is_dir()):
        raise InputError(f"layer {src.label}: {src.path} is not a regular file or folder"
                         " (a FIFO, device or socket?); corridor reads only files and folders")
    if src.layer is None:
        try:
            names = [str(n) for n in pyogrio.list_layers(src.path)[:, 0]]
        except (pyogrio.errors.DataSourceError, OSError, RuntimeError) as exc:
            raise InputError(f"layer {src.label}: {what} cannot be opened (corrupt, truncated,"
                             f" locked or not a GIS format): {exc}") from None
        if len(names) > 1:
            raise InputError(f"layer {src.label}: the {what} holds several layers"
                             f" ({', '.join(names)}); name one with 'layer = ...'")
        if not names:
            raise InputError(f"layer {src.label}: the {what} holds no layer GDAL can read")
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            gdf = pyogrio.read_dataframe(src.path, layer=src.layer, use_arrow=True,
                                         fid_as_index=True)
        for w in caught:
            log.warning("layer %s: reader: %s", src.label, w.message)
    except pyogrio.errors.DataLayerError as exc:
        raise InputError(f"layer {src.label}: cannot be read: {exc}") from None
    except pyogrio.errors.DataSourceError as exc:
        if "locked" in str(exc).lower():
            raise InputError(f"layer {src.label}: file is locked by another program (an"
                             " editing session holds it); close it there or save the edits,"
                             f" then rerun: {exc}") from None
        raise InputError(f"layer {src.label}: {what} cannot be opened (corrupt, truncated,"
                         f" locked or not a GIS format): {exc}") from None
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

    The config's ``run.crs`` wins (:func:`corridor.config.load_config` has
    checked that it is projected with metre axes). Otherwise the first
    layer's CRS if it is projected in metres; else (geographic inputs, or a
    projected CRS in feet) the UTM zone of the data's centre from
    :meth:`geopandas.GeoDataFrame.estimate_utm_crs`.
    """
    if cfg.run.crs:
        return CRS.from_user_input(cfg.run.crs)
    first = layers[0]
    if first.crs.is_projected and _is_metre_crs(first.crs):
        return first.crs
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            utm = first.estimate_utm_crs()
    except Exception as exc:  # pyproj/geopandas fail on coordinates outside the Earth
        raise InputError(f"layer {cfg.power_lines.label}: no UTM zone can be chosen from the"
                         f" layer's extent ({exc}); check its coordinates and CRS, or set"
                         " run.crs") from None
    log.info("inputs are not in a metric CRS; using %s chosen from the data", utm.to_string())
    return utm


def _is_metre_crs(crs: CRS) -> bool:
    """True when every axis of ``crs`` is in metres."""
    axes = crs.axis_info
    return bool(axes) and all(a.unit_name in ("metre", "meter") and a.unit_conversion_factor == 1.0
                              for a in axes)


#: Largest |x| or |y| [m] accepted in a run CRS without an area of use (common practice:
#: 1e7 m is a quarter of the Earth's circumference; no corridor is larger).
EXTENT_LIMIT_M = 1.0e7


def run_extent(crs: CRS) -> tuple[float, float, float, float]:
    """Extent (xmin, ymin, xmax, ymax) [m] that coordinates in the run CRS must lie in.

    The CRS's area of use (:attr:`pyproj.CRS.area_of_use`, longitude and
    latitude) transformed into the CRS, widened on each side by half its size
    or 500 km, whichever is larger, so that data a little beyond a UTM zone's
    band stays usable; without an area of use, |x|, |y| <= :data:`EXTENT_LIMIT_M`.
    Either way capped at 10 times that limit.
    """
    from pyproj import Transformer

    cap = 10.0 * EXTENT_LIMIT_M
    box = (-EXTENT_LIMIT_M, -EXTENT_LIMIT_M, EXTENT_LIMIT_M, EXTENT_LIMIT_M)
    aou = crs.area_of_use
    if aou is not None:
        try:
            tr = Transformer.from_crs("EPSG:4326", crs, always_xy=True)
            x0, y0, x1, y1 = tr.transform_bounds(aou.west, aou.south, aou.east, aou.north,
                                                 densify_pts=21)
            if all(np.isfinite((x0, y0, x1, y1))) and x1 > x0 and y1 > y0:
                mx = max(0.5 * (x1 - x0), 500e3)
                my = max(0.5 * (y1 - y0), 500e3)
                box = (x0 - mx, y0 - my, x1 + mx, y1 + my)
        except Exception as exc:  # pyproj's ProjError: keep the plain extent
            log.debug("area of use of %s not transformed: %s", crs.to_string(), exc)
    return (max(box[0], -cap), max(box[1], -cap), min(box[2], cap), min(box[3], cap))


def _id_column(gdf: gpd.GeoDataFrame, src: LayerSource, canonical: str) -> str | None:
    user = src.fields.get(canonical, canonical)
    return user if user in gdf.columns else None


def id_text(values: pd.Series) -> pd.Series:
    """Ids as stripped text (``pd.NA`` where missing).

    Ids are strings everywhere: an integer id column gives ``"7"``, and so
    does a float column holding whole numbers (how an integer column with
    NULLs comes out of the reader), so that a ground item's ``asset_id`` 7
    matches the asset 7 whatever the two layers' column types.
    """
    if values.dtype.kind == "f":
        arr = values.to_numpy(dtype=float, na_value=np.nan)
        finite = np.isfinite(arr)
        whole = finite & (np.abs(arr) < 2.0**53)
        whole[whole] = arr[whole] == np.round(arr[whole])
        if finite.any() and (whole == finite).all():
            text = [str(int(v)) if f else pd.NA for v, f in zip(arr, finite, strict=True)]
            return pd.Series(text, index=values.index, dtype="string")
    out = values.astype("string").str.strip()
    return out.mask(out == "", pd.NA)


def feature_labels(index: pd.Index) -> np.ndarray:
    """Labels of features by their place in the layer: ``fid:<FID>`` or ``row:<n>``.

    A layer read by :func:`read_raw` carries GDAL's feature id (FID) as its
    index (named ``fid``): 1 first in a GeoPackage, 0 first in a Shapefile.
    A frame without it (an OpenStreetMap extract's joined lines) is labelled by
    its row number (0 first).
    """
    kind = "fid" if index.name == "fid" else "row"
    rows = (index.to_numpy() if pd.api.types.is_integer_dtype(index)
            else np.arange(len(index)))
    return np.array([f"{kind}:{int(i)}" for i in rows], dtype=object)


def _feature_ids(gdf: gpd.GeoDataFrame, id_col: str | None) -> pd.Series:
    """Feature ids as text; a feature without one is named by its FID (:func:`feature_labels`),
    e.g. ``fid:12``, also when ``gdf`` holds only some rows of the layer (one asset kind)."""
    labels = feature_labels(gdf.index)
    if id_col is None:
        return pd.Series(labels, index=gdf.index, dtype="string")
    out = id_text(gdf[id_col])
    missing = out.isna().to_numpy()
    out = out.astype(object)
    out[missing] = labels[missing]
    return out.astype("string")


def _blank(series: pd.Series) -> np.ndarray:
    """True where a raw value is missing: NULL, or text that is empty or only blanks."""
    missing = series.isna().to_numpy(dtype=bool).copy()
    if series.dtype.kind not in "biufcmM":
        text = series.astype("string").str.strip()
        missing |= (text == "").fillna(True).to_numpy(dtype=bool)
    return missing


def _coerce(series: pd.Series, spec: Spec
            ) -> tuple[pd.Series, np.ndarray, np.ndarray, list[str]]:
    """Coerce a column to its spec.

    Returns
    -------
    values : Series
        Coerced values (garbage where bad).
    bad : ndarray of bool
        Missing or invalid.
    missing : ndarray of bool
        Missing (NULL or blank text); a subset of ``bad``. Only these may
        be filled from defaults.
    reasons : list of str
        Why each bad value is bad.
    """
    n = len(series)
    reasons = [""] * n
    missing = _blank(series)
    for i in np.flatnonzero(missing):
        reasons[i] = "missing"
    if spec.dtype in ("float", "int"):
        if series.dtype.kind == "b":
            values = pd.Series(np.full(n, np.nan), index=series.index)
        else:
            values = pd.to_numeric(series.astype(object) if series.dtype.kind not in "iuf"
                                   else series, errors="coerce").astype("float64")
        arr = values.to_numpy(dtype=float, na_value=np.nan)
        bad = ~np.isfinite(arr) | missing
        for i in np.flatnonzero(bad & ~missing):
            raw = series.iloc[i]
            reasons[i] = (f"not a finite number: {raw!r}" if isinstance(raw, int | float)
                          else f"not a number: {raw!r}")
        ok = ~bad
        if spec.dtype == "int":
            frac = ok & (arr != np.round(np.where(ok, arr, 0.0)))
            for i in np.flatnonzero(frac):
                reasons[i] = f"{arr[i]} is not a whole number"
            bad |= frac
        if spec.low is not None:
            low = ~bad & (arr < spec.low)
            for i in np.flatnonzero(low):
                reasons[i] = f"{arr[i]} below the valid range [{spec.low}, {spec.high}]"
            bad |= low
        if spec.high is not None:
            high = ~bad & (arr > spec.high)
            for i in np.flatnonzero(high):
                reasons[i] = f"{arr[i]} above the valid range [{spec.low}, {spec.high}]"
            bad |= high
        return values, bad, missing, reasons
    if spec.dtype == "bool":
        text = series.astype("string").str.strip().str.lower()
        truth = {"true": True, "1": True, "yes": True, "y": True, "t": True,
                 "false": False, "0": False, "no": False, "n": False, "f": False,
                 "1.0": True, "0.0": False}
        mapped = text.map(truth)
        bad = mapped.isna().to_numpy() | missing
        for i in np.flatnonzero(bad & ~missing):
            reasons[i] = f"not true/false: {series.iloc[i]!r}"
        return mapped.astype("object"), bad, missing, reasons
    if series.dtype.kind == "f":
        text = id_text(series)  # a whole-number code read as float: "3", not "3.0"
    else:
        text = series.astype("string").str.strip()
    bad = missing.copy()
    if spec.choices is not None:
        lowered = text.str.lower()
        wrong = ~bad & ~lowered.isin(spec.choices).fillna(False).to_numpy()
        for i in np.flatnonzero(wrong):
            reasons[i] = f"{text.iloc[i]!r} is not one of {', '.join(spec.choices)}"
        bad = bad | wrong
        text = lowered
    if spec.check is not None:  # a rule of the field's own, e.g. a ';'-separated list
        for i in np.flatnonzero(~bad):
            _value, problem = spec.check(text.iloc[i])
            if problem:
                reasons[i] = problem
                bad[i] = True
    return text.astype("object"), bad, missing, reasons


def _attributes(gdf, src, specs, defaults, ids, rejected, warnings, allow_defaults,
                keep_mask, filled) -> pd.DataFrame:
    """Validate and coerce every field of ``specs``; update ``keep_mask`` in place.

    A present but invalid value (out of range, not a number, not one of the
    choices) rejects the feature. A missing value (NULL or blank) takes the
    default when ``allow_defaults`` and a default exists, else rejects the
    feature. ``filled`` receives, per canonical field, the mask of features
    whose value came from a default (every feature when the column is absent).
    """
    out = {}
    role = src.role
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
            filled[spec.name] = np.ones(len(gdf), bool)
            log.debug("layer %s: field '%s' absent; default %r used for all features",
                      src.label, user, default)
            continue
        values, bad, missing, reasons = _coerce(gdf[user], spec)
        fill = missing & keep_mask if (default is not None and allow_defaults) else \
            np.zeros(len(gdf), bool)
        reject = bad & ~fill & keep_mask
        for i in np.flatnonzero(reject):
            rejected.add(src.label, ids.iloc[i], user, reasons[i], role)
        keep_mask &= ~reject
        if fill.any():
            values = values.astype("object")
            values.iloc[np.flatnonzero(fill)] = default
            filled[spec.name] = fill
            fids = [str(ids.iloc[i]) for i in np.flatnonzero(fill)]
            msg = (f"layer {src.label}: field '{user}': no value on {len(fids)} feature(s)"
                   f" ({', '.join(fids[:10])}{' ...' if len(fids) > 10 else ''});"
                   f" default {default!r} used")
            warnings.append(msg)
            log.warning(msg)
        out[spec.name] = values
    return pd.DataFrame(out, index=gdf.index)


def _clean_geometry(gdf, src, ids, rejected, warnings, keep_mask, types) -> np.ndarray:
    """Drop Z/M, repair what is safe, reject the rest. Returns the geometry array."""
    geoms = gdf.geometry.to_numpy().copy()
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
            polys = [p for p in shapely.get_parts(fixed)
                     if p.geom_type in ("Polygon", "MultiPolygon")]
            if polys:
                geoms[i] = shapely.union_all(polys)
                msg = f"layer {src.label}: feature {ids.iloc[i]}: invalid polygon repaired"
                warnings.append(msg)
                log.warning(msg)
            else:
                reason = "invalid polygon that cannot be repaired"
        if reason is not None:
            rejected.add(src.label, ids.iloc[i], "geometry", reason, src.role)
            keep_mask[i] = False
    return geoms


def _within_extent(out: gpd.GeoDataFrame, src: LayerSource, crs: CRS,
                   rejected: Rejected) -> gpd.GeoDataFrame:
    """Reject features (already in the run CRS) with a coordinate outside :func:`run_extent`.

    Coordinates far outside the CRS's area of use (1e9 m, or a layer whose
    declared CRS is wrong) would make segment counts explode; non-finite ones
    come from a reprojection that failed.
    """
    if len(out) == 0:
        return out
    x0, y0, x1, y1 = run_extent(crs)
    pts, idx = shapely.get_coordinates(out.geometry.to_numpy(), return_index=True)
    finite = np.all(np.isfinite(pts), axis=1)
    inside = finite.copy()
    inside[finite] = ((pts[finite, 0] >= x0) & (pts[finite, 0] <= x1)
                      & (pts[finite, 1] >= y0) & (pts[finite, 1] <= y1))
    bad_rows = np.unique(idx[~inside])
    if len(bad_rows) == 0:
        return out
    nonfinite = set(np.unique(idx[~finite]).tolist())
    name = crs.to_string()
    for j in bad_rows:
        fid = out["feature_id"].iloc[j]
        if j in nonfinite:
            reason = (f"geometry cannot be reprojected to {name} (non-finite coordinates);"
                      " check the layer's CRS")
        else:
            reason = (f"geometry has coordinates outside the area of use of {name} (x"
                      f" {x0:.0f}..{x1:.0f} m, y {y0:.0f}..{y1:.0f} m); check the"
                      " coordinates and the layer's CRS")
        rejected.add(src.label, fid, "geometry", reason, src.role)
    keep = np.ones(len(out), bool)
    keep[bad_rows] = False
    return out[keep]


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
    id_col = _id_column(gdf, src, id_field) if id_field else None
    if label_field is not None:
        id_col = _id_column(gdf, src, label_field) or id_col
    ids = _feature_ids(gdf, id_col)
    keep = np.ones(len(gdf), bool)
    if id_field:
        key_col = _id_column(gdf, src, id_field)
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
    attrs = _attributes(gdf, src, [s for s in specs if s.name != id_field], defaults, ids,
                        rejected, warnings, allow_defaults, keep, filled)
    geoms = _clean_geometry(gdf, src, ids, rejected, warnings, keep, types)
    attrs.insert(0, "feature_id", ids.to_numpy())
    if id_field:
        key = _feature_ids(gdf, _id_column(gdf, src, id_field))
        attrs.insert(0, id_field, key.to_numpy(dtype=object))
    out = gpd.GeoDataFrame(attrs, geometry=gpd.GeoSeries(geoms, index=gdf.index, crs=gdf.crs))
    out = out[keep]
    if not out.crs.equals(crs):
        with warnings_module.catch_warnings():
            warnings_module.simplefilter("ignore", RuntimeWarning)  # inf from far coordinates
            out = out.to_crs(crs)
    out = _within_extent(out, src, crs, rejected)
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


#: Rejected assets (and other features) named one by one in the log; the rest are counted.
REJECTED_SHOWN = 20


def log_rejected(rejected: Rejected) -> None:
    """WARNING lines for rejected features: every power line, then a bounded list of the rest.

    A rejected power line leaves the voltages it induces unassessed, so each one is
    named; assets and other features are named up to :data:`REJECTED_SHOWN` per role
    and then counted (every one is in rejected.csv).
    """
    for row in rejected.by_role("power_lines"):
        log.warning("power line %s rejected (layer %s, field '%s'): %s; the voltages it"
                    " induces are NOT assessed and the results are incomplete",
                    row["feature_id"], row["layer"], row["field"], row["reason"])
    for role, what in (("assets", "asset"), ("soil", "soil polygon"),
                       ("grounds", "ground item"), ("towers", "tower")):
        rows = rejected.by_role(role)
        for row in rows[:REJECTED_SHOWN]:
            log.warning("%s %s rejected (layer %s, field '%s'): %s", what, row["feature_id"],
                        row["layer"], row["field"], row["reason"])
        if len(rows) > REJECTED_SHOWN:
            log.warning("... and %d more rejected %ss (every one is in rejected.csv)",
                        len(rows) - REJECTED_SHOWN, what)


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
            ("towers", (), "line_id", ("Point",))):
        label = {"grounds": "ground_id", "towers": "tower_id"}.get(role)
        src = getattr(cfg, role)
        if src is None:
            optional[role] = None
            continue
        try:
            # soil: a NULL field is an empty one (homogeneous soil, no local value);
            # _soil_with_resistivity rejects a polygon that gives no resistivity at all
            optional[role] = _read_layer(src, specs, {}, id_field, types, crs, rejected,
                                         warnings, role == "soil", label_field=label)
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
                  rejected, counts, warnings, defaults_used)


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
        id_col = _id_column(raw, src, "asset_id")
        ids = _feature_ids(raw, id_col)
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
