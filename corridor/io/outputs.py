"""Writing output layers, CSV files and the run record."""

from __future__ import annotations

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


#: Rows converted to Arrow at a time when a layer is written: the writer holds one
#: chunk's copy, not the whole table's (about 1 GB for the 2.5 M-segment benchmark).
WRITE_CHUNK_ROWS = 200_000

_MULTI = {"Point": "MultiPoint", "LineString": "MultiLineString", "Polygon": "MultiPolygon"}

#: Geometry type names by shapely type id (``shapely.get_type_id``), as ``geom_type``
#: names them.
_TYPE_NAMES = {0: "Point", 1: "LineString", 2: "LinearRing", 3: "Polygon", 4: "MultiPoint",
               5: "MultiLineString", 6: "MultiPolygon", 7: "GeometryCollection"}


def _layer_geometry_type(geometry: gpd.GeoSeries) -> tuple[str, bool]:
    """The GeoPackage geometry type of a column, and whether single parts are promoted.

    As pyogrio's ``write_dataframe`` decides it: one type, or a single type with its
    multi type (then every single part is written as a multi part); anything else is
    ``Unknown``; `` Z`` when any non-empty geometry has Z.
    """
    import shapely

    parts = np.asarray(geometry.array, dtype=object)
    type_ids = shapely.get_type_id(parts)  # -1 for a missing geometry
    kinds = [_TYPE_NAMES[int(i)] for i in np.unique(type_ids[type_ids >= 0])]
    promote = False
    if len(kinds) == 1:
        name = kinds[0]
    elif len(kinds) == 2 and any(_MULTI.get(k) in kinds for k in kinds):
        name = next(_MULTI[k] for k in kinds if k in _MULTI)
        promote = True
    else:
        name = "Unknown"
    if name != "Unknown" and bool(np.any(shapely.has_z(parts[type_ids >= 0]))):
        name += " Z"  # shapely.has_z is False for an empty geometry
    return name, promote


def _linestring_wkb(parts: np.ndarray):
    """Little-endian 2D WKB of line strings that all have the same number of points, as
    an Arrow binary array built from one numpy buffer; None for anything else (then
    ``shapely.to_wkb`` writes them).

    Asset segments are such lines (two points each): this skips one Python bytes
    object per row. The bytes are the OGC Simple Features WKB of a LineString
    (byte order 1, type 2, point count, then x y of each point), which GDAL reads
    as it reads shapely's.
    """
    import pyarrow as pa
    import shapely

    n = len(parts)
    if n == 0:
        return None
    types = shapely.get_type_id(parts)
    if not bool(np.all(types == 1)) or not bool(
            np.all(shapely.get_coordinate_dimension(parts) == 2)):
        return None  # (a Z or M value: shapely writes those)
    counts = shapely.get_num_coordinates(parts)
    k = int(counts[0])
    if k < 2 or not bool(np.all(counts == k)):
        return None
    xy = shapely.get_coordinates(parts).reshape(n, k, 2)
    record = np.dtype([("order", "u1"), ("type", "<u4"), ("points", "<u4"),
                       ("xy", "<f8", (k, 2))])  # packed: 9 + 16 k bytes
    out = np.empty(n, record)
    out["order"] = 1
    out["type"] = 2
    out["points"] = k
    out["xy"] = xy
    offsets = np.arange(n + 1, dtype=np.int64) * record.itemsize
    if offsets[-1] >= 2 ** 31:
        return None
    return pa.Array.from_buffers(pa.binary(), n, [None, pa.py_buffer(offsets.astype(np.int32)),
                                                  pa.py_buffer(out.view(np.uint8))])


def write_layer(frame: gpd.GeoDataFrame, path: Path, layer: str) -> None:
    """Write one layer to a GeoPackage (bulk Arrow write, spatial index on).

    The rows go to GDAL as a stream of Arrow batches of :data:`WRITE_CHUNK_ROWS`
    rows, in one layer creation (GDAL builds the spatial index once, at the end),
    so the memory held for the conversion is one chunk's.
    """
    import pyarrow as pa
    import shapely

    geom = frame.geometry.name
    text = [c for c in frame.columns if c != geom and frame[c].dtype == object]
    if text:  # convert only the object columns; the rest are shared, not copied
        frame = gpd.GeoDataFrame({c: (frame[c].astype("string") if c in text else frame[c])
                                  for c in frame.columns}, geometry=geom, crs=frame.crs)
    if len(frame) == 0:
        pyogrio.write_dataframe(frame, path, layer=layer, driver="GPKG", use_arrow=True,
                                layer_options={"SPATIAL_INDEX": "YES"})
        return
    geometry_type, promote = _layer_geometry_type(frame.geometry)
    crs = None
    if frame.crs is not None:
        epsg = frame.crs.to_epsg()
        crs = f"EPSG:{epsg}" if epsg else frame.crs.to_wkt("WKT1_GDAL")
    attributes = pd.DataFrame({c: frame[c] for c in frame.columns if c != geom}, copy=False)

    def batches(lo: int, hi: int) -> list[pa.RecordBatch]:
        g = frame.geometry.array[lo:hi]
        parts = np.asarray(g, dtype=object)
        if not promote and geometry_type == "LineString":
            wkb = _linestring_wkb(parts)
            if wkb is not None:  # no Python bytes object per row
                chunk = attributes.iloc[lo:hi]
                table = pa.Table.from_pandas(chunk, schema=schema.remove(len(schema) - 1),
                                             preserve_index=False)
                return table.append_column(schema.field(len(schema) - 1), wkb).to_batches()
        if promote:
            kinds = shapely.get_type_id(parts)
            for single, multi in ((0, shapely.multipoints), (1, shapely.multilinestrings),
                                  (3, shapely.multipolygons)):
                at = np.flatnonzero(kinds == single)
                if len(at):
                    parts[at] = [multi([p]) for p in parts[at]]
        chunk = attributes.iloc[lo:hi].copy(deep=False)
        chunk[geom] = shapely.to_wkb(parts)
        # a table, not a batch: columns read back from Parquet are chunked Arrow arrays
        return pa.Table.from_pandas(chunk, schema=schema, preserve_index=False).to_batches()

    schema = pa.Schema.from_pandas(attributes.iloc[:0], preserve_index=False)
    for i, field in enumerate(schema):
        if pa.types.is_null(field.type):  # GDAL has no null type: text
            schema = schema.set(i, field.with_type(pa.string()))
    schema = schema.append(pa.field(geom, pa.binary()))
    reader = pa.RecordBatchReader.from_batches(
        schema, (b for lo in range(0, len(frame), WRITE_CHUNK_ROWS)
                 for b in batches(lo, min(lo + WRITE_CHUNK_ROWS, len(frame)))))
    pyogrio.write_arrow(reader, path, layer=layer, driver="GPKG", geometry_name=geom,
                        geometry_type=geometry_type, crs=crs,
                        layer_options={"SPATIAL_INDEX": "YES"})


def _quoted(name: str) -> str:
    """An SQLite identifier in double quotes (a quote inside doubled)."""
    return '"' + str(name).replace('"', '""') + '"'


def write_view(path: Path, name: str, base: str, columns: list[str], where: str,
               bounds: tuple[float, float, float, float] | None) -> None:
    """Add a layer to a GeoPackage as a view on a layer already written (no row copied).

    The view selects ``columns`` of ``base`` (whose ``fid`` it keeps as its own, so
    a feature has the same id in both layers) where ``where`` holds, in ``base``'s
    row order, and is registered as a features layer with ``base``'s geometry
    column, type and CRS. The GeoPackage Encoding Standard (OGC 12-128, Contents)
    lets a ``gpkg_contents`` row name a table or a view, and features be stored
    in either (as OGC's GeoPackage 1.2 conformance tests state it). GDAL reads
    the view, uses ``base``'s spatial index for its spatial filters and reports
    ``HasSpatialIndex`` = 1 for it (checked with GDAL 3.6 and 3.12 and QGIS 3.22;
    tests/test_gpkg_client.py). The layer is read-only.

    Parameters
    ----------
    path : Path
        A GeoPackage written by GDAL and closed.
    name, base : str
        The new layer's name; the layer it is a view of.
    columns : list of str
        Attribute columns of ``base`` (the geometry column is added).
    where : str
        SQL condition on ``base``'s columns (trusted text: built by corridor, never
        from input).
    bounds : tuple of float or None
        The view's extent (min x, min y, max x, max y) for ``gpkg_contents``; None
        when it has no rows.
    """
    import sqlite3

    con = sqlite3.connect(str(path))
    try:
        row = con.execute("SELECT column_name FROM gpkg_geometry_columns WHERE table_name = ?",
                          (base,)).fetchone()
        if row is None:
            raise ValueError(f"{path}: layer {base} has no geometry column")
        geom = row[0]
        select = ", ".join(["fid AS fid", *(_quoted(c) for c in columns), _quoted(geom)])
        with con:
            con.execute(f"CREATE VIEW {_quoted(name)} AS SELECT {select} FROM {_quoted(base)}"
                        f" WHERE {where}")
            extent = tuple(float(v) for v in bounds) if bounds is not None else (None,) * 4
            con.execute(
                "INSERT INTO gpkg_contents (table_name, data_type, identifier, description,"
                " last_change, min_x, min_y, max_x, max_y, srs_id)"
                " SELECT ?, 'features', ?, '', strftime('%Y-%m-%dT%H:%M:%fZ', 'now'),"
                " ?, ?, ?, ?, srs_id FROM gpkg_contents WHERE table_name = ?",
                (name, name, *extent, base))
            con.execute(
                "INSERT INTO gpkg_geometry_columns (table_name, column_name, geometry_type_name,"
                " srs_id, z, m) SELECT ?, column_name, geometry_type_name, srs_id, z, m"
                " FROM gpkg_geometry_columns WHERE table_name = ?", (name, base))
    finally:
        con.close()


#: Name of the last column of every CSV corridor writes: the safety caution, on every row.
CAUTION_COLUMN = "caution"

#: First characters that make a spreadsheet read a cell as a formula (``=``, ``+``,
#: ``-``, ``@``; tab and carriage return too), plus the escape character itself so the
#: escaping can be undone without ambiguity (OWASP, "CSV Injection"; common practice).
FORMULA_TRIGGERS = ("=", "+", "-", "@", "\t", "\r", "'")


def neutralise_cell(value):
    """A text cell made safe for spreadsheets: a single quote before a formula trigger.

    Parameters
    ----------
    value : object
        A cell of a text column. Anything that is not a ``str`` is returned as is
        (numbers, missing values).

    Returns
    -------
    object
        ``"'" + value`` when ``value`` starts with one of :data:`FORMULA_TRIGGERS`,
        else ``value``. :func:`restore_cell` undoes it.
    """
    if isinstance(value, str) and value.startswith(FORMULA_TRIGGERS):
        return "'" + value
    return value


def restore_cell(value):
    """The original text of a cell written by :func:`neutralise_cell`."""
    if isinstance(value, str) and value.startswith("'") \
            and value[1:].startswith(FORMULA_TRIGGERS):
        return value[1:]
    return value


def _text_columns(frame: pd.DataFrame) -> list:
    return [c for c in frame.columns
            if frame[c].dtype == object or isinstance(frame[c].dtype, pd.StringDtype)]


def csv_frame(frame: pd.DataFrame, caution: bool = True) -> pd.DataFrame:
    """The table as :func:`write_csv` writes it: text cells neutralised, caution column last.

    Parameters
    ----------
    frame : DataFrame
        The table (no geometry column).
    caution : bool, optional
        Append the :data:`CAUTION_COLUMN` holding :data:`SAFETY_CAUTION` on every row.

    Returns
    -------
    DataFrame
        A new frame; ``frame`` is not changed.
    """
    out = pd.DataFrame(frame, copy=False)
    text = _text_columns(out)
    if text or caution:
        out = out.copy()
    for c in text:
        out[c] = out[c].astype(object).map(neutralise_cell)
    if caution:
        if CAUTION_COLUMN in out.columns:
            out = out.drop(columns=CAUTION_COLUMN)
        out[CAUTION_COLUMN] = SAFETY_CAUTION
    return out


def _cells(values: pd.Series, column: str) -> list[str]:
    """The CSV text of one column: numbers bare (rounded by unit), text quoted, missing empty."""
    from corridor.io.csv_format import format_numbers

    dtype = values.dtype
    missing = values.isna().to_numpy()
    if pd.api.types.is_float_dtype(dtype):
        return format_numbers(values, column).tolist()
    raw = values.astype(object).tolist()
    if pd.api.types.is_bool_dtype(dtype):
        return ["" if m else ("True" if v else "False") for v, m in zip(raw, missing, strict=True)]
    if pd.api.types.is_integer_dtype(dtype):
        return ["" if m else str(int(v)) for v, m in zip(raw, missing, strict=True)]
    return ["" if m else '"' + str(v).replace('"', '""') + '"'
            for v, m in zip(raw, missing, strict=True)]


def write_csv(frame: pd.DataFrame, path: Path, caution: bool = True) -> None:
    """Write a table as a plain CSV that any reader and spreadsheet opens safely.

    The first line is the header. Every row carries the safety caution in a last
    column named :data:`CAUTION_COLUMN` (a plain CSV, no comment line: readers need
    no option, ids containing ``#`` stay whole, GIS import the file as it is).
    Text cells starting with a formula trigger (``=``, ``+``, ``-``, ``@``, tab,
    carriage return, or the escape ``'`` itself) get a leading single quote, so a
    spreadsheet shows them as text and never runs them (CSV injection; OWASP).
    Text is quoted (RFC 4180); numbers, booleans (``True``/``False``) and missing
    values (empty) are not, so GIS detect numeric columns. Floats are rounded by
    the unit their column name carries (:mod:`corridor.io.csv_format`: metres to
    0.01, volts, amperes and ohms to 3 significant digits, coordinates in full).
    :func:`read_csv` undoes the quoting and the formula escape.

    Parameters
    ----------
    frame : DataFrame
        The table (no geometry column).
    path : Path
        The file written (UTF-8, Unix line ends).
    caution : bool, optional
        Add the caution column (default true; every published CSV has it).
    """
    out = csv_frame(frame, caution)
    header = ",".join('"' + str(c).replace('"', '""') + '"' for c in out.columns)
    columns = [_cells(out.iloc[:, i], str(c)) for i, c in enumerate(out.columns)]
    with open(path, "w", newline="", encoding="utf-8") as fh:
        fh.write(header + "\n")
        if len(out) and columns:
            fh.write("\n".join(map(",".join, zip(*columns, strict=True))) + "\n")


def read_csv(path: Path, **kwargs) -> pd.DataFrame:
    """Read a CSV written by :func:`write_csv`: caution column dropped, text restored.

    Extra keyword arguments go to :func:`pandas.read_csv` (e.g. ``dtype=str``).
    """
    frame = pd.read_csv(path, keep_default_na=False, na_values=[""], **kwargs)
    frame = frame.drop(columns=CAUTION_COLUMN, errors="ignore")
    for c in _text_columns(frame):
        frame[c] = frame[c].map(restore_cell)
    return frame


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
