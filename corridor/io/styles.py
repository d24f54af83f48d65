"""Layer styles and field descriptions written into a finished GeoPackage.

Two open, documented mechanisms that desktop GIS read straight from the file:

- the ``layer_styles`` table (one row per style; columns ``f_table_catalog``,
  ``f_table_schema``, ``f_table_name``, ``f_geometry_column``, ``styleName``,
  ``styleQML``, ``styleSLD``, ``useAsDefault``, ``description``, ``owner``,
  ``ui``, ``update_time``), holding for every layer both an OGC Styled Layer
  Descriptor 1.1 document (Symbology Encoding 1.1 rules) and a QML document;
- the GeoPackage schema extension (``gpkg_data_columns`` and
  ``gpkg_data_column_constraints``, registered in ``gpkg_extensions`` as
  ``gpkg_schema``), giving each field a title and a description with its
  unit, taken from :data:`GLOSSARY`.

Styles per layer (the palette is corridor's own):

- ``segments``, ``hazards``: graduated colour ramp on ``utilization`` in the
  clear / review / exceeds bands (default), and a categorised
  ``hazard_class`` style;
- ``assets``: categorised ``hazard_class`` (default) and a ramp on
  ``worst_utilization``;
- ``exposures``: line colour by the inducing line's voltage
  (``line_voltage_kv``);
- ``power_lines``: line colour and width by the line's voltage
  (``voltage_kv``), labelled with ``line_id``;
- ``assets``: labelled with ``asset_id``;
- ``sites``: rules by ``remedy`` (shape and colour per remedy) and a red ring
  around every ``unresolved`` site, labelled with ``site_id``.

Every QML document also carries the field aliases (QGIS 3.22 reads them from
the style, not from ``gpkg_data_columns``). The documents themselves are
built in :mod:`corridor.io.sld` and :mod:`corridor.io.qml`; the titles come
from :mod:`corridor.io.glossary`.

Everything is plain SQL through :mod:`sqlite3` on the closed file, after GDAL
has written the layers.

References
----------
.. [1] OGC GeoPackage Encoding Standard 1.3.1 (OGC 12-128r18), Annex F.9
   "Schema" extension (gpkg_data_columns, gpkg_data_column_constraints).
.. [2] OGC Styled Layer Descriptor profile of the Web Map Service
   Implementation Specification 1.1.0 (OGC 05-078r4).
.. [3] OGC Symbology Encoding Implementation Specification 1.1.0
   (OGC 05-077r4).
"""

from __future__ import annotations

import logging
import sqlite3
from collections.abc import Iterable
from pathlib import Path

from corridor.io.glossary import GLOSSARY, alias_for, describe_column
from corridor.io.qml import qml_document
from corridor.io.sld import sld_document
from corridor.limits.limit_sets import DEFAULT_REVIEW_THRESHOLD, HAZARD_CLASSES, NOT_ASSESSED

__all__ = ["GLOSSARY", "HAZARD_COLOURS", "LABEL_FIELDS", "REMEDY_SYMBOLS", "SITE_COLOUR",
           "SITE_OUTLINE", "UNRESOLVED_COLOUR", "VOLTAGE_BANDS", "alias_for", "apply_styles",
           "describe_column", "layer_style_specs", "utilization_bands"]

log = logging.getLogger(__name__)

# --------------------------------------------------------------------------
# Palette (corridor's own)
# --------------------------------------------------------------------------

#: Hazard class -> RGB hex.
#: "not assessed" is a violet no ramp uses: a segment nothing checked must not read as
#: clear, nor be mistaken for a graded result.
HAZARD_COLOURS = {"clear": "#4f9a6b", "review": "#e2a72e", "exceeds": "#b8322f",
                  "not assessed": "#8e44ad"}
#: Utilization ramp stops: (upper bound exclusive, RGB hex); the review
#: threshold and 1.0 are inserted as band edges.
_RAMP_CLEAR = ("#9fd0a8", "#4f9a6b")
_RAMP_REVIEW = ("#f2cf5b", "#e28a2e")
_RAMP_EXCEEDS = (("#d9573a", 2.0), ("#b8322f", 5.0), ("#8a1f3d", 10.0), ("#55163f", None))
#: Voltage bands of the inducing lines [kV] -> colour.
#: Blues only, so that the lines never read as a hazard colour.
VOLTAGE_BANDS = ((0.0, 69.0, "#8fb3c9"), (69.0, 115.0, "#5d8fb5"), (115.0, 230.0, "#356f9f"),
                 (230.0, 345.0, "#1f4e85"), (345.0, 500.0, "#163765"), (500.0, None, "#0c1f40"))
#: Grounding sites: white triangle with a dark outline.
SITE_COLOUR = "#ffffff"
SITE_OUTLINE = "#1a1a1a"


def utilization_bands(review_threshold: float = DEFAULT_REVIEW_THRESHOLD
                      ) -> list[tuple[float, float | None, str, str]]:
    """Classes of the utilization ramp.

    Parameters
    ----------
    review_threshold : float
        Utilization from which a segment is "review" [-].

    Returns
    -------
    list of (lower, upper or None, colour hex, label)
        Lower bound inclusive, upper exclusive; None is open-ended.
    """
    t = float(review_threshold)
    bands: list[tuple[float, float | None, str, str]] = [
             (0.0, t / 2, _RAMP_CLEAR[0], f"clear, < {t / 2:g}"),
             (t / 2, t, _RAMP_CLEAR[1], f"clear, {t / 2:g} – {t:g}"),
             (t, (t + 1) / 2, _RAMP_REVIEW[0], f"review, {t:g} – {(t + 1) / 2:g}"),
             ((t + 1) / 2, 1.0, _RAMP_REVIEW[1], f"review, {(t + 1) / 2:g} – 1")]
    lo = 1.0
    for colour, hi in _RAMP_EXCEEDS:
        label = f"exceeds, {lo:g} – {hi:g}" if hi is not None else f"exceeds, ≥ {lo:g}"
        bands.append((lo, hi, colour, label))
        if hi is not None:
            lo = hi
    return bands


# --------------------------------------------------------------------------
# Style definitions per layer
# --------------------------------------------------------------------------


def _ramp_rules(field: str, review_threshold: float) -> list[dict]:
    rules = [{"field": field, "lower": lo, "upper": hi, "colour": c, "label": label,
              "width": 3.0, "width_mm": 0.9}
             for lo, hi, c, label in utilization_bands(review_threshold)]
    # an empty utilization (no criterion judged the segment) is drawn, in the colour of
    # "not assessed", not left off the map
    rules.append({"else": True, "colour": HAZARD_COLOURS[NOT_ASSESSED],
                  "label": "not assessed (no criterion judged it)", "width": 3.0,
                  "width_mm": 0.9})
    return rules


def _class_rules() -> list[dict]:
    return [{"field": "hazard_class", "equals": k, "colour": HAZARD_COLOURS[k], "label": k,
             "width": 3.0, "width_mm": 0.9} for k in HAZARD_CLASSES]


def _voltage_rules(field: str = "line_voltage_kv") -> list[dict]:
    rules = []
    for lo, hi, c in VOLTAGE_BANDS:
        label = f"{lo:g} – {hi:g} kV" if hi is not None else f"≥ {lo:g} kV"
        rules.append({"field": field, "lower": lo, "upper": hi, "colour": c,
                      "label": label, "width": 2.5 + lo / 250.0, "width_mm": 0.6 + lo / 800.0})
    return rules


#: Remedy (corridor.steps.ground's REMEDY_* texts) -> (label, shape, fill colour).
#: Shapes are SE well-known names, so the SLD and the QML draw the same marks.
REMEDY_SYMBOLS: dict[str, tuple[str, str, str]] = {
    "ground": ("ground", "triangle", SITE_COLOUR),
    "ground through DC decoupler": ("ground through DC decoupler", "triangle", "#8cc0de"),
    "fit protectors or isolate the pair": ("protectors or isolation (telecom)", "square",
                                           "#c3a5d9"),
    "increase separation or fit a shield wire": ("separation or shield wire", "square",
                                                 "#f2b36b"),
    "keep clear of the tower footing: separation, insulating section or gradient control": (
        "keep clear of the tower footing", "star", "#6a4c93"),
}
#: Ring drawn around an unresolved site (an asset still over a limit after its last site).
UNRESOLVED_COLOUR = "#d7191c"


def _site_rules() -> list[dict]:
    rules = [{"conditions": [("remedy", remedy)], "label": label, "shape": shape,
              "colour": fill, "width": 12.0, "width_mm": 3.5}
             for remedy, (label, shape, fill) in REMEDY_SYMBOLS.items()]
    rules.append({"else": True, "label": "other remedy", "shape": "circle",
                  "colour": "#9a9a9a", "width": 10.0, "width_mm": 3.0})
    # drawn last, over the remedy's mark: a ring that no remedy colour hides
    rules.append({"conditions": [("unresolved", True)],
                  "label": "unresolved: the asset still exceeds a limit after its last site",
                  "shape": "circle", "fill": False, "colour": UNRESOLVED_COLOUR,
                  "outline": UNRESOLVED_COLOUR, "outline_width": 3.0, "outline_width_mm": 0.8,
                  "width": 22.0, "width_mm": 6.0})
    return rules


#: Layer -> field whose value labels its features in the QML styles.
LABEL_FIELDS = {"assets": "asset_id", "sites": "site_id", "power_lines": "line_id"}


def layer_style_specs(layer: str, review_threshold: float = DEFAULT_REVIEW_THRESHOLD
                      ) -> list[tuple[str, str, str, list[dict]]]:
    """Styles of one output layer: ``[(style name, description, geometry, rules)]``.

    The first style of the list is the default. Unknown layers get none.
    """
    if layer in ("segments", "hazards"):
        return [("utilization", "Colour ramp on utilization (clear / review / exceeds bands)",
                 "line", _ramp_rules("utilization", review_threshold)),
                ("hazard class", "Categorised by hazard_class", "line", _class_rules())]
    if layer == "assets":
        return [("hazard class", "Categorised by hazard_class", "line", _class_rules()),
                ("worst utilization", "Colour ramp on worst_utilization", "line",
                 _ramp_rules("worst_utilization", review_threshold))]
    if layer == "exposures":
        return [("line voltage", "Coloured by the inducing line's voltage", "line",
                 _voltage_rules())]
    if layer == "power_lines":
        return [("voltage", "Coloured by the line's nominal voltage", "line",
                 _voltage_rules("voltage_kv"))]
    if layer == "sites":
        return [("remedy", "Proposed grounding sites by remedy; unresolved sites ringed",
                 "point", _site_rules())]
    return []


# --------------------------------------------------------------------------
# Writing into the GeoPackage
# --------------------------------------------------------------------------

_LAYER_STYLES_DDL = """
CREATE TABLE IF NOT EXISTS layer_styles (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    f_table_catalog TEXT(256),
    f_table_schema TEXT(256),
    f_table_name TEXT(256),
    f_geometry_column TEXT(256),
    styleName TEXT(30),
    styleQML TEXT,
    styleSLD TEXT,
    useAsDefault BOOLEAN,
    description TEXT,
    owner TEXT(30),
    ui TEXT(30),
    update_time DATETIME DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now'))
)"""

# OGC 12-128r18 Annex F.9, Tables 48/49 (gpkg_data_columns,
# gpkg_data_column_constraints).
_DATA_COLUMNS_DDL = """
CREATE TABLE IF NOT EXISTS gpkg_data_columns (
    table_name TEXT NOT NULL,
    column_name TEXT NOT NULL,
    name TEXT,
    title TEXT,
    description TEXT,
    mime_type TEXT,
    constraint_name TEXT,
    CONSTRAINT pk_gdc PRIMARY KEY (table_name, column_name),
    CONSTRAINT gdc_tn UNIQUE (table_name, name)
)"""
_CONSTRAINTS_DDL = """
CREATE TABLE IF NOT EXISTS gpkg_data_column_constraints (
    constraint_name TEXT NOT NULL,
    constraint_type TEXT NOT NULL,
    value TEXT,
    min NUMERIC,
    min_is_inclusive BOOLEAN,
    max NUMERIC,
    max_is_inclusive BOOLEAN,
    description TEXT,
    CONSTRAINT gdcc_ntv UNIQUE (constraint_name, constraint_type, value)
)"""
_EXTENSIONS_DDL = """
CREATE TABLE IF NOT EXISTS gpkg_extensions (
    table_name TEXT,
    column_name TEXT,
    extension_name TEXT NOT NULL,
    definition TEXT NOT NULL,
    scope TEXT NOT NULL,
    CONSTRAINT ge_tce UNIQUE (table_name, column_name, extension_name)
)"""
_SCHEMA_DEFINITION = "http://www.geopackage.org/spec/#extension_schema"

#: Constraints written with the schema extension: name -> rows.
_CONSTRAINTS = {
    "hazard_class": [("enum", k, None, None, None, None,
                      {"clear": "below the review threshold", "review": "review threshold to 1",
                       "exceeds": "utilization 1 or more",
                       "not assessed": "no criterion of the limit set judged it: not checked,"
                                       " not clear"}[k]) for k in HAZARD_CLASSES],
}
_COLUMN_CONSTRAINT = {"hazard_class": "hazard_class"}


def _columns(con: sqlite3.Connection, table: str) -> list[str]:
    return [row[1] for row in con.execute(f'PRAGMA table_info("{table}")')]


def _write_schema(con: sqlite3.Connection, layers: Iterable[str]) -> int:
    con.execute(_DATA_COLUMNS_DDL)
    con.execute(_CONSTRAINTS_DDL)
    con.execute(_EXTENSIONS_DDL)
    for table in ("gpkg_data_columns", "gpkg_data_column_constraints"):
        con.execute("DELETE FROM gpkg_extensions WHERE table_name = ? AND column_name IS NULL"
                    " AND extension_name = 'gpkg_schema'", (table,))
        con.execute("INSERT INTO gpkg_extensions (table_name, column_name, extension_name,"
                    " definition, scope) VALUES (?, NULL, 'gpkg_schema', ?, 'read-write')",
                    (table, _SCHEMA_DEFINITION))
    for name, rows in _CONSTRAINTS.items():
        con.execute("DELETE FROM gpkg_data_column_constraints WHERE constraint_name = ?", (name,))
        con.executemany(
            "INSERT INTO gpkg_data_column_constraints (constraint_name, constraint_type, value,"
            " min, min_is_inclusive, max, max_is_inclusive, description)"
            " VALUES (?, ?, ?, ?, ?, ?, ?, ?)", [(name, *r) for r in rows])
    n = 0
    for table in layers:
        described: list[tuple[str, str, str, str, str, None, str | None]] = []
        for col in _columns(con, table):
            d = describe_column(col)
            if d is None:
                continue
            described.append((table, col, col, d[0], d[1], None, _COLUMN_CONSTRAINT.get(col)))
        con.execute("DELETE FROM gpkg_data_columns WHERE table_name = ?", (table,))
        con.executemany("INSERT INTO gpkg_data_columns (table_name, column_name, name, title,"
                        " description, mime_type, constraint_name) VALUES (?, ?, ?, ?, ?, ?, ?)",
                        described)
        n += len(described)
    return n


def _write_styles(con: sqlite3.Connection, layers: Iterable[str], review_threshold: float) -> int:
    con.execute(_LAYER_STYLES_DDL)
    n = 0
    for table in layers:
        row = con.execute("SELECT column_name FROM gpkg_geometry_columns WHERE table_name = ?",
                          (table,)).fetchone()
        geom_col = row[0] if row else ""
        specs = layer_style_specs(table, review_threshold)
        if not specs:
            log.debug("no style defined for layer %s", table)
            continue
        con.execute("DELETE FROM layer_styles WHERE f_table_name = ?", (table,))
        # QGIS's fields of a GeoPackage layer: every column but the geometry, FID first
        fields = [c for c in _columns(con, table) if c != geom_col]
        label = LABEL_FIELDS.get(table)
        if label not in fields:
            label = None
        for i, (name, desc, geometry, rules) in enumerate(specs):
            con.execute(
                "INSERT INTO layer_styles (f_table_catalog, f_table_schema, f_table_name,"
                " f_geometry_column, styleName, styleQML, styleSLD, useAsDefault, description,"
                " owner, ui) VALUES ('', '', ?, ?, ?, ?, ?, ?, ?, 'corridor', NULL)",
                (table, geom_col, name, qml_document(geometry, rules, fields, label),
                 sld_document(table, name, geometry, rules), 1 if i == 0 else 0, desc))
            n += 1
    # Register the table as an attributes table so GDAL-based clients list it.
    if con.execute("SELECT 1 FROM gpkg_contents WHERE table_name = 'layer_styles'").fetchone() \
            is None:
        con.execute("INSERT INTO gpkg_contents (table_name, data_type, identifier, description,"
                    " last_change) VALUES ('layer_styles', 'attributes', 'layer_styles',"
                    " 'Layer styles (SLD 1.1 and QML)',"
                    " strftime('%Y-%m-%dT%H:%M:%fZ','now'))")
    has_ogr = con.execute("SELECT 1 FROM sqlite_master WHERE type = 'table' AND"
                          " name = 'gpkg_ogr_contents'").fetchone()
    if has_ogr:
        count = con.execute("SELECT COUNT(*) FROM layer_styles").fetchone()[0]
        con.execute("DELETE FROM gpkg_ogr_contents WHERE table_name = 'layer_styles'")
        con.execute("INSERT INTO gpkg_ogr_contents (table_name, feature_count) VALUES"
                    " ('layer_styles', ?)", (count,))
    return n


def apply_styles(gpkg_path: Path, layers: list[str],
                 review_threshold: float = DEFAULT_REVIEW_THRESHOLD) -> None:
    """Write layer styles and field descriptions into a finished GeoPackage.

    Idempotent: earlier corridor styles and descriptions of the same layers
    are replaced.

    Parameters
    ----------
    gpkg_path : Path
        GeoPackage written by GDAL, closed.
    layers : list of str
        Layer (table) names to style and describe; names absent from the file
        are skipped.
    review_threshold : float, optional
        Utilization from which a segment is "review" [-], for the ramp's band
        edges (the run's limit set's value).
    """
    con = sqlite3.connect(str(gpkg_path))
    try:
        present = {r[0] for r in con.execute("SELECT table_name FROM gpkg_contents")}
        wanted = [name for name in layers if name in present]
        for name in layers:
            if name not in present:
                log.warning("apply_styles: layer %s not in %s; skipped", name, gpkg_path)
        with con:
            n_cols = _write_schema(con, wanted)
            n_styles = _write_styles(con, wanted, review_threshold)
        log.info("styles: %d styles and %d field descriptions written to %s", n_styles, n_cols,
                 Path(gpkg_path).name)
    finally:
        con.close()
