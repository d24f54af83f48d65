"""Input geometries: Z/M dropped, safe repairs made, the rest rejected with a reason.

Also the last check after reprojection: every coordinate within the run CRS's
extent (:func:`corridor.io.raw.run_extent`).
"""

from __future__ import annotations

import logging

import geopandas as gpd
import numpy as np
import shapely
from pyproj import CRS

from corridor.config import LayerSource
from corridor.io.raw import run_extent
from corridor.io.rejected import Rejected

log = logging.getLogger(__name__)

#: Geometry types of power lines and assets.
LINEAR_TYPES = ("LineString", "MultiLineString")


def clean_geometry(gdf, src, ids, rejected, warnings, keep_mask, types) -> np.ndarray:
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


def within_extent(out: gpd.GeoDataFrame, src: LayerSource, crs: CRS,
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
