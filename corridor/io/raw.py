"""Opening one input layer with GDAL (through pyogrio) and choosing the run's metric CRS.

Any vector format GDAL reads, read with ``use_arrow=True`` (bulk I/O) and the
layer's FID as the index (:func:`corridor.io.fields.feature_labels` names a
feature without an id by it). GDAL's failures become :class:`InputError`
messages naming the layer.
"""

from __future__ import annotations

import logging
import warnings

import geopandas as gpd
import numpy as np
import pyogrio
import shapely
from pyproj import CRS

from corridor.config import Config, LayerSource
from corridor.errors import InputError

log = logging.getLogger(__name__)


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
