"""Output layers in further open formats beside the GeoPackage.

``fgb``: FlatGeobuf, one ``<layer>.fgb`` per layer, with its packed Hilbert
R-tree index (GDAL's FlatGeobuf driver). ``parquet``: GeoParquet, one
``<layer>.parquet`` per layer (geopandas + pyarrow; WKB geometry, the CRS as
PROJJSON in the ``geo`` metadata). ``gpkg`` is accepted and skipped: the
runner writes ``screening.gpkg`` itself.

References
----------
.. [1] FlatGeobuf specification, https://flatgeobuf.org (format 3.x).
.. [2] GeoParquet specification 1.0.0 / 1.1.0, https://geoparquet.org.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from pathlib import Path

import geopandas as gpd
import pyogrio

from corridor.errors import ConfigError

log = logging.getLogger(__name__)

#: Format key -> file extension.
FORMATS = {"gpkg": ".gpkg", "fgb": ".fgb", "parquet": ".parquet"}


def output_layers(run_or_tables) -> dict[str, gpd.GeoDataFrame]:
    """The output layers of a run, by layer name.

    Parameters
    ----------
    run_or_tables : corridor.pipeline.Run or mapping of str to GeoDataFrame
        A finished run (its :class:`corridor.result.Result` layers) or the
        layers themselves.
    """
    if isinstance(run_or_tables, Mapping):
        return {str(k): v for k, v in run_or_tables.items() if isinstance(v, gpd.GeoDataFrame)}
    from corridor.result import result_of

    return result_of(run_or_tables).layers()


def _plain(frame: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    frame = frame.copy()
    for col in frame.columns:
        if col != frame.geometry.name and frame[col].dtype == object:
            frame[col] = frame[col].astype("string")
    return frame


def write_extra_formats(run_or_tables, out_dir: Path, formats: list[str]) -> dict[str, list[Path]]:
    """Write every output layer in each requested format.

    Parameters
    ----------
    run_or_tables : corridor.pipeline.Run or mapping of str to GeoDataFrame
        See :func:`output_layers`.
    out_dir : Path
        Output folder; files are ``<out_dir>/<layer>.fgb`` and
        ``<out_dir>/<layer>.parquet``.
    formats : list of str
        Keys of :data:`FORMATS`; ``"gpkg"`` is skipped (written elsewhere).

    Returns
    -------
    dict
        Format key -> paths written.

    Raises
    ------
    ConfigError
        An unknown format key (all unknown keys are named at once).
    """
    unknown = [f for f in formats if f not in FORMATS]
    if unknown:
        raise ConfigError([f"run.output_formats: unknown format {f!r}; expected one of"
                           f" {sorted(FORMATS)}" for f in unknown])
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    layers = output_layers(run_or_tables)
    written: dict[str, list[Path]] = {}
    for fmt in dict.fromkeys(formats):
        if fmt == "gpkg":
            continue
        paths = []
        for name, frame in layers.items():
            target = out_dir / f"{name}{FORMATS[fmt]}"
            frame = _plain(frame)
            if fmt == "fgb":
                pyogrio.write_dataframe(frame, target, driver="FlatGeobuf", use_arrow=True,
                                        layer=name, layer_options={"SPATIAL_INDEX": "YES"})
            else:
                frame.to_parquet(target, index=False, compression="zstd",
                                 write_covering_bbox=True)
            paths.append(target)
        written[fmt] = paths
        log.info("wrote %d layers as %s", len(paths), fmt)
    return written
