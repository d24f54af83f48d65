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
- ``sites``: one point symbol for grounding sites.

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
import re
import sqlite3
from collections.abc import Iterable
from pathlib import Path
from xml.sax.saxutils import escape, quoteattr

from corridor.limits.limit_sets import DEFAULT_REVIEW_THRESHOLD, HAZARD_CLASSES

log = logging.getLogger(__name__)

# --------------------------------------------------------------------------
# Glossary of canonical column names
# --------------------------------------------------------------------------

#: Canonical column name -> (title, description with unit in brackets).
GLOSSARY: dict[str, tuple[str, str]] = {
    # identifiers and bookkeeping
    "segment_id": ("Segment id", "Index of the asset segment within the run [-]."),
    "asset_id": ("Asset id", "Identifier of the asset (pipeline, fence, rail, telecom cable)."),
    "asset_kind": ("Asset kind", "One of pipeline, fence, rail, telecom."),
    "asset_rank": ("Asset rank", "1 = the asset with the highest worst utilization [-]."),
    "source_layer": ("Source layer", "Input file and layer the asset was read from."),
    "part": ("Part", "Index of the line part within a multi-part asset [-]."),
    "segment_index": ("Segment index", "Position of the segment along its asset [-]."),
    "line_id": ("Power line id", "Nearest power line within the screening distance."),
    "line_ids": ("Power line ids", "Power lines that contribute to the asset's result,"
                                   " ';'-separated."),
    "exposure_id": ("Exposure id", "Index of the exposure (asset, power line, continuous"
                                   " run) [-]."),
    "exposure_class": ("Exposure class", "Geometric relation to the nearest power line"
                                         " (parallel, oblique, crossing, none)."),
    "lines_in_reach": ("Lines in reach", "Number of power lines within the screening"
                                         " distance [-]."),
    "rank": ("Rank", "1 = the worst segment of the run, by utilization [-]."),
    # geometry
    "chainage_m": ("Chainage", "Distance along the asset from its start to the segment start [m]."),
    "length_m": ("Length", "Length along the asset [m]."),
    "separation_m": ("Separation", "Horizontal distance to the nearest power line [m]."),
    "angle_deg": ("Crossing angle", "Angle between the segment and the nearest power line [deg]."),
    "projected_length_m": ("Projected length", "Segment length projected on the power line [m]."),
    "start_chainage_m": ("Start chainage", "Chainage where the exposure starts [m]."),
    "end_chainage_m": ("End chainage", "Chainage where the exposure ends [m]."),
    "parallel_length_m": ("Parallel length", "Length of the exposure projected on the power"
                                             " line [m]."),
    "min_separation_m": ("Minimum separation", "Smallest separation along the exposure [m]."),
    "mean_separation_m": ("Mean separation", "Length-weighted mean separation [m]."),
    "equivalent_separation_m": ("Equivalent separation", "Separation giving the same coupling as"
                                " the real, varying one (geometric mean of the section ends) [m]."),
    "mean_angle_deg": ("Mean angle", "Mean angle between the asset and the power line [deg]."),
    "crossings": ("Crossings", "Number of times the asset crosses the power line [-]."),
    "line_voltage_kv": ("Line voltage", "Nominal phase-to-phase voltage of the power line [kV]."),
    "voltage_kv": ("Line voltage", "Nominal phase-to-phase voltage of the power line [kV]."),
    "soil_resistivity_ohm_m": ("Soil resistivity", "Soil resistivity at the segment [Ω·m]."),
    # coupling
    "emf_normal_v_per_km": ("EMF, normal load", "Longitudinal EMF induced by the load currents"
                            " per unit length [V/km]."),
    "emf_fault_v_per_km": ("EMF, fault", "Longitudinal EMF induced by the worst earth fault"
                           " per unit length [V/km]."),
    "emf_normal_v": ("EMF over segment, normal load", "Longitudinal EMF over the segment [V];"
                     " the worst case over unknown flow directions and phase angles."),
    "normal_scenario": ("Normal-load scenario", "Loading that governs the normal-load EMF:"
                        " as given, or one circuit of a line out of service."),
    "emf_fault_v": ("EMF over segment, fault", "Longitudinal EMF over the segment [V]."),
    "emf_section_normal_v": ("Section EMF, normal load", "Longitudinal EMF summed between the"
                             " cable's grounded ends (telecom) [V]."),
    "emf_section_fault_v": ("Section EMF, fault", "Longitudinal EMF summed between the cable's"
                            " grounded ends during the worst fault (telecom) [V]."),
    # response
    "v_normal_v": ("Voltage, normal load", "|V| of the asset to remote earth under load [V]."),
    "i_normal_a": ("Current, normal load", "|I| along the asset under load [A]."),
    "normal_source_impedance_ohm": ("Source impedance, normal", "Thevenin impedance seen at the"
                                    " segment under load [Ω]."),
    "i_normal_short_ma": ("Short-circuit current, normal", "Current the asset can drive through a"
                          " zero-impedance contact to earth under load [mA]."),
    "i_normal_body_ma": ("Body current, normal", "Steady-state current through a 1000 Ω body"
                         " touching the asset under load [mA]."),
    "fault_source_impedance_ohm": ("Source impedance, fault", "Thevenin impedance seen at the"
                                   " fault peak of the asset's chain [Ω]."),
    "v_fault_v": ("Voltage, fault", "|V| of the asset to remote earth in the worst fault [V]."),
    "i_fault_a": ("Current, fault", "|I| along the asset in the worst fault [A]."),
    "fault_line_id": ("Faulted line", "Power line whose earth fault gives v_fault_v."),
    "fault_position_m": ("Fault position", "Position along the faulted line, from its start,"
                         " of the earth fault that gives v_fault_v [m]."),
    "v_step_fault_v": ("Step voltage, fault", "Step voltage over 1 m beside the segment from"
                       " the footing of a faulted tower [V]."),
    "in_tower_zone": ("In a tower's zone", "The site stands where a faulted tower raises the"
                      " earth above tower_zone_threshold_v [true/false]."),
    "fault_phase": ("Faulted phase", "Phase of the worst earth fault."),
    "clearing_time_s": ("Clearing time", "Fault clearing time of the faulted line [s]."),
    "high_reliability": ("High-reliability line", "Faulted line counts as high-reliability"
                         " (ITU-T Directives sense) [true/false]."),
    "screening_factor": ("Screening factor", "|k| of the earth wires and other screens [-]."),
    "fault_current_ka": ("Fault current", "Earth-fault current of the faulted line at the"
                         " segment [kA]."),
    "earth_potential_fault_v": ("Earth potential, fault", "Rise of the soil potential near"
                                " faulted towers at the segment [V]."),
    "v_capacitive_open_v": ("Capacitive voltage, open", "Open-circuit voltage of an above-ground"
                            " asset from electric-field coupling [V]."),
    "i_capacitive_short_ma": ("Capacitive current, short", "Short-circuit current of an"
                              " above-ground asset from electric-field coupling [mA]."),
    "capacitive_source_impedance_ohm": ("Capacitive source impedance", "Source impedance behind"
                                        " the capacitive voltage [Ω]."),
    # assessment
    "v_touch_fault_v": ("Touch voltage, fault", "Touch voltage during the worst fault: |V| of"
                        " the asset plus the earth potential rise, loaded by the body [V]."),
    "v_coating_stress_v": ("Coating stress", "Voltage across a pipeline coating during the worst"
                           " fault [V]."),
    "ac_density_a_per_m2": ("AC current density", "AC current density at a 1 cm² coating"
                            " holiday (pipelines) [A/m²]."),
    "utilization": ("Utilization", "Largest ratio of a judged quantity to its permitted value;"
                    " 1 or more exceeds a limit [-]."),
    "governing": ("Governing criterion", "'<criterion>:<case>' giving the utilization."),
    "hazard_class": ("Hazard class", "clear (below the review threshold), review (threshold up"
                     " to 1) or exceeds (utilization 1 or more)."),
    # assets layer
    "worst_utilization": ("Worst utilization", "Highest utilization along the asset [-]."),
    "length_over_limit_m": ("Length over limit", "Asset length with utilization 1 or more [m]."),
    "worst_chainage_m": ("Worst chainage", "Chainage of the worst segment [m]."),
    "worst_v_normal_v": ("Voltage at worst, normal", "|V| under load at the worst segment [V]."),
    "worst_v_fault_v": ("Voltage at worst, fault", "|V| in the worst fault at the worst segment"
                        " [V]."),
    "worst_i_capacitive_short_ma": ("Capacitive current at worst", "Capacitive short-circuit"
                                    " current at the worst segment [mA]."),
    # grounding sites
    "site_id": ("Site id", "Identifier of the proposed grounding site."),
    "x": ("Easting", "Easting of the site in the run CRS [m]."),
    "y": ("Northing", "Northing of the site in the run CRS [m]."),
    "lon": ("Longitude", "Longitude of the site, WGS 84 [deg]."),
    "lat": ("Latitude", "Latitude of the site, WGS 84 [deg]."),
    "resistance_ohm": ("Ground resistance", "Resistance to earth of a ground [Ω]."),
    "ground_resistance_ohm": ("Ground resistance", "Resistance to earth of the proposed ground;"
                              " empty where grounding is not the remedy [Ω]."),
    "electrode_length_m": ("Electrode length", "Length of buried horizontal conductor giving"
                           " the ground resistance [m]."),
    "remedy": ("Remedy", "What the site needs: a ground, a ground through a DC decoupler, or"
                         " another measure named here."),
    "unresolved": ("Unresolved", "The asset still exceeds a limit after its last site"
                                 " [true/false]."),
    "v_before_v": ("Value before", "Governing quantity at the site before the ground [V]."),
    "v_after_v": ("Value after", "Governing quantity at the site after the ground [V]."),
    "utilization_after": ("Utilization after", "Worst utilization of the asset after the site"
                          " is added [-]."),
}

_UNIT_SUFFIX = (
    ("_v_per_km", "V/km"), ("_a_per_m2", "A/m²"), ("_ohm_m2", "Ω·m²"), ("_ohm_m", "Ω·m"),
    ("_ohm", "Ω"), ("_ma", "mA"), ("_ka", "kA"), ("_kv", "kV"), ("_deg", "deg"),
    ("_m", "m"), ("_v", "V"), ("_a", "A"), ("_s", "s"), ("_hz", "Hz"),
)


def describe_column(name: str) -> tuple[str, str] | None:
    """Title and description (with unit) of a column, or None if unknown.

    Parameters
    ----------
    name : str
        Canonical column name.

    Returns
    -------
    tuple of str or None
        ``(title, description)`` from :data:`GLOSSARY`; ``ratio_<criterion>``
        columns get a generic entry; other names with a unit suffix get a
        minimal one naming the unit.
    """
    if name in GLOSSARY:
        return GLOSSARY[name]
    from corridor.series.columns import SERIES_GLOSSARY, series_criterion_description

    if name in SERIES_GLOSSARY:  # load-series columns (corridor.series)
        return SERIES_GLOSSARY[name]
    m = re.fullmatch(r"hours_above_([a-z0-9_]+)_h", name)
    if m:
        return series_criterion_description(m.group(1))
    m = re.fullmatch(r"ratio_([a-z0-9_]+)", name)
    if m:
        return (f"Ratio, {m.group(1).replace('_', ' ')}",
                f"Judged quantity over the permitted value of criterion {m.group(1)};"
                " empty where it does not apply [-].")
    for suffix, unit in _UNIT_SUFFIX:
        if name.endswith(suffix) and len(name) > len(suffix):
            stem = name[: -len(suffix)].replace("_", " ")
            return stem.capitalize(), f"{stem.capitalize()} [{unit}]."
    return None


# --------------------------------------------------------------------------
# Palette (corridor's own)
# --------------------------------------------------------------------------

#: Hazard class -> RGB hex.
HAZARD_COLOURS = {"clear": "#4f9a6b", "review": "#e2a72e", "exceeds": "#b8322f"}
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


def _rgb(hex_colour: str) -> str:
    h = hex_colour.lstrip("#")
    return ",".join(str(int(h[i:i + 2], 16)) for i in (0, 2, 4))


# --------------------------------------------------------------------------
# SLD 1.1 / SE 1.1
# --------------------------------------------------------------------------

_SLD_HEAD = (
    '<?xml version="1.0" encoding="UTF-8"?>\n'
    '<StyledLayerDescriptor version="1.1.0" xmlns="http://www.opengis.net/sld"'
    ' xmlns:se="http://www.opengis.net/se" xmlns:ogc="http://www.opengis.net/ogc"'
    ' xmlns:xlink="http://www.w3.org/1999/xlink"'
    ' xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance"'
    ' xsi:schemaLocation="http://www.opengis.net/sld'
    ' http://schemas.opengis.net/sld/1.1.0/StyledLayerDescriptor.xsd">\n'
)


def _se_filter(rule: dict) -> str:
    field = escape(rule["field"])
    if "equals" in rule:
        return (f"<ogc:Filter><ogc:PropertyIsEqualTo><ogc:PropertyName>{field}</ogc:PropertyName>"
                f"<ogc:Literal>{escape(str(rule['equals']))}</ogc:Literal>"
                "</ogc:PropertyIsEqualTo></ogc:Filter>")
    parts = []
    if rule.get("lower") is not None:
        parts.append(f"<ogc:PropertyIsGreaterThanOrEqualTo><ogc:PropertyName>{field}"
                     f"</ogc:PropertyName><ogc:Literal>{rule['lower']:g}</ogc:Literal>"
                     "</ogc:PropertyIsGreaterThanOrEqualTo>")
    if rule.get("upper") is not None:
        parts.append(f"<ogc:PropertyIsLessThan><ogc:PropertyName>{field}</ogc:PropertyName>"
                     f"<ogc:Literal>{rule['upper']:g}</ogc:Literal></ogc:PropertyIsLessThan>")
    body = parts[0] if len(parts) == 1 else "<ogc:And>" + "".join(parts) + "</ogc:And>"
    return f"<ogc:Filter>{body}</ogc:Filter>"


def _se_symbolizer(geometry: str, colour: str, width_px: float) -> str:
    if geometry == "point":
        return ("<se:PointSymbolizer><se:Graphic><se:Mark>"
                "<se:WellKnownName>triangle</se:WellKnownName>"
                f'<se:Fill><se:SvgParameter name="fill">{colour}</se:SvgParameter></se:Fill>'
                f'<se:Stroke><se:SvgParameter name="stroke">{SITE_OUTLINE}</se:SvgParameter>'
                '<se:SvgParameter name="stroke-width">1.5</se:SvgParameter></se:Stroke>'
                f"</se:Mark><se:Size>{width_px:g}</se:Size></se:Graphic></se:PointSymbolizer>")
    return ("<se:LineSymbolizer><se:Stroke>"
            f'<se:SvgParameter name="stroke">{colour}</se:SvgParameter>'
            f'<se:SvgParameter name="stroke-width">{width_px:g}</se:SvgParameter>'
            '<se:SvgParameter name="stroke-linecap">round</se:SvgParameter>'
            "</se:Stroke></se:LineSymbolizer>")


def sld_document(layer: str, style_name: str, geometry: str, rules: list[dict]) -> str:
    """An SLD 1.1 document with one Symbology Encoding rule per class.

    Parameters
    ----------
    layer : str
        Layer (table) name.
    style_name : str
        Name of the user style.
    geometry : str
        ``"line"`` or ``"point"``.
    rules : list of dict
        Each with ``label``, ``colour``, ``width`` [px] and either ``field`` with
        ``lower``/``upper`` (range, lower inclusive) or ``field`` with
        ``equals``, or no ``field`` for a single symbol.
    """
    out = [_SLD_HEAD, f"  <NamedLayer><se:Name>{escape(layer)}</se:Name>\n",
           f"    <UserStyle><se:Name>{escape(style_name)}</se:Name><se:FeatureTypeStyle>\n"]
    for r in rules:
        filt = _se_filter(r) if r.get("field") else ""
        out.append(f"      <se:Rule><se:Name>{escape(r['label'])}</se:Name>"
                   f"<se:Description><se:Title>{escape(r['label'])}</se:Title></se:Description>"
                   f"{filt}{_se_symbolizer(geometry, r['colour'], r['width'])}</se:Rule>\n")
    out.append("    </se:FeatureTypeStyle></UserStyle>\n  </NamedLayer>\n"
               "</StyledLayerDescriptor>\n")
    return "".join(out)


# --------------------------------------------------------------------------
# QML
# --------------------------------------------------------------------------


def _qml_props(props: dict[str, str]) -> str:
    opts = "".join(f'<Option name={quoteattr(k)} type="QString" value={quoteattr(v)}/>'
                   for k, v in props.items())
    legacy = "".join(f"<prop k={quoteattr(k)} v={quoteattr(v)}/>" for k, v in props.items())
    return f'<Option type="Map">{opts}</Option>{legacy}'


def _qml_symbol(name: str, geometry: str, colour: str, width_mm: float) -> str:
    rgba = _rgb(colour) + ",255"
    if geometry == "point":
        props = {"name": "triangle", "color": rgba, "outline_color": _rgb(SITE_OUTLINE) + ",255",
                 "outline_width": "0.4", "outline_width_unit": "MM", "size": f"{width_mm:g}",
                 "size_unit": "MM"}
        return (f'<symbol type="marker" name="{name}" alpha="1" clip_to_extent="1"'
                f' force_rhr="0"><layer class="SimpleMarker" pass="0" locked="0" enabled="1">'
                f"{_qml_props(props)}</layer></symbol>")
    props = {"line_color": rgba, "line_width": f"{width_mm:g}", "line_width_unit": "MM",
             "capstyle": "round", "joinstyle": "round", "line_style": "solid"}
    return (f'<symbol type="line" name="{name}" alpha="1" clip_to_extent="1" force_rhr="0">'
            f'<layer class="SimpleLine" pass="0" locked="0" enabled="1">{_qml_props(props)}'
            "</layer></symbol>")


def qml_document(geometry: str, rules: list[dict]) -> str:
    """A QML style document: graduated, categorised or single-symbol renderer.

    Parameters are as for :func:`sld_document`; widths are read as mm.
    """
    symbols = "".join(_qml_symbol(str(i), geometry, r["colour"], r["width_mm"])
                      for i, r in enumerate(rules))
    field = rules[0].get("field")
    if field is None:
        renderer = (f'<renderer-v2 type="singleSymbol" symbollevels="0" forceraster="0"'
                    f' enableorderby="0"><symbols>{symbols}</symbols></renderer-v2>')
    elif "equals" in rules[0]:
        cats = "".join(f"<category value={quoteattr(str(r['equals']))} symbol=\"{i}\""
                       f" label={quoteattr(r['label'])} render=\"true\"/>"
                       for i, r in enumerate(rules))
        renderer = (f'<renderer-v2 type="categorizedSymbol" attr={quoteattr(field)}'
                    f' symbollevels="0" forceraster="0" enableorderby="0">'
                    f"<categories>{cats}</categories><symbols>{symbols}</symbols></renderer-v2>")
    else:
        # QML ranges are closed; the open-ended top class gets a bound no
        # screening value reaches.
        ranges = "".join(
            f'<range lower="{r["lower"]:g}"'
            f' upper="{(r["upper"] if r["upper"] is not None else 1e12):g}"'
            f' symbol="{i}" label={quoteattr(r["label"])} render="true"/>'
            for i, r in enumerate(rules))
        renderer = (f'<renderer-v2 type="graduatedSymbol" attr={quoteattr(field)}'
                    f' graduatedMethod="GraduatedColor" symbollevels="0" forceraster="0"'
                    f' enableorderby="0"><ranges>{ranges}</ranges><symbols>{symbols}</symbols>'
                    '<mode name="manual"/><rotation/><sizescale/></renderer-v2>')
    return ("<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>\n"
            '<qgis version="3.28.0" styleCategories="Symbology">\n'
            f"{renderer}\n</qgis>\n")


# --------------------------------------------------------------------------
# Style definitions per layer
# --------------------------------------------------------------------------


def _ramp_rules(field: str, review_threshold: float) -> list[dict]:
    return [{"field": field, "lower": lo, "upper": hi, "colour": c, "label": label,
             "width": 3.0, "width_mm": 0.9}
            for lo, hi, c, label in utilization_bands(review_threshold)]


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


def _site_rules() -> list[dict]:
    return [{"label": "grounding site", "colour": SITE_COLOUR, "width": 12.0, "width_mm": 3.5}]


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
        return [("grounding sites", "Proposed grounding sites", "point", _site_rules())]
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
                       "exceeds": "utilization 1 or more"}[k]) for k in HAZARD_CLASSES],
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
        for i, (name, desc, geometry, rules) in enumerate(specs):
            con.execute(
                "INSERT INTO layer_styles (f_table_catalog, f_table_schema, f_table_name,"
                " f_geometry_column, styleName, styleQML, styleSLD, useAsDefault, description,"
                " owner, ui) VALUES ('', '', ?, ?, ?, ?, ?, ?, ?, 'corridor', NULL)",
                (table, geom_col, name, qml_document(geometry, rules),
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
