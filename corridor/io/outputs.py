"""Writing output layers, CSV files and the run record."""

from __future__ import annotations

import csv
import hashlib
import json
import logging
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio

log = logging.getLogger(__name__)

SAFETY_CAUTION = (
    "Screening estimates for planning only. They do not replace a study by a licensed"
    " engineer under local codes and the asset owner's procedures. Treat any metallic"
    " structure near an energised line as possibly energised."
)


def sha256_file(path: Path) -> str:
    """SHA-256 of a file's bytes, read in 1 MiB blocks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def write_layer(frame: gpd.GeoDataFrame, path: Path, layer: str) -> None:
    """Write one layer to a GeoPackage (bulk Arrow write, spatial index on)."""
    geom = frame.geometry.name
    text = [c for c in frame.columns if c != geom and frame[c].dtype == object]
    if text:  # convert only the object columns; the rest are shared, not copied
        frame = gpd.GeoDataFrame({c: (frame[c].astype("string") if c in text else frame[c])
                                  for c in frame.columns}, geometry=geom, crs=frame.crs)
    pyogrio.write_dataframe(frame, path, layer=layer, driver="GPKG", use_arrow=True,
                            layer_options={"SPATIAL_INDEX": "YES"})


def write_csv(frame: pd.DataFrame, path: Path, caution: bool = True) -> None:
    """Write a CSV whose first line is the safety caution as a comment."""
    with open(path, "w", newline="", encoding="utf-8") as fh:
        if caution:
            fh.write(f"# {SAFETY_CAUTION}\n")
        frame.to_csv(fh, index=False, float_format="%.12g", quoting=csv.QUOTE_MINIMAL,
                     lineterminator="\n")


def read_csv(path: Path) -> pd.DataFrame:
    """Read a CSV written by :func:`write_csv`."""
    return pd.read_csv(path, comment="#")


def _jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, np.generic):
        return obj.item()
    if hasattr(obj, "items"):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    return obj


def write_json(data: dict, path: Path) -> None:
    with open(path, "w", encoding="utf-8") as fh:
        json.dump(_jsonable(data), fh, indent=2, sort_keys=False)
        fh.write("\n")
