"""QGIS style documents (QML) for the layers of ``screening.gpkg``.

One document carries a layer's symbology (single symbol, categories, graduated
classes or rules), its labels and its field aliases. QGIS reads the aliases
from the style it loads; it does not read ``gpkg_data_columns`` (QGIS 3.22),
so the titles of :mod:`corridor.io.glossary` travel in the QML as well.

The rules are those of :func:`corridor.io.sld.sld_document`; widths are read
as millimetres (``width_mm``).
"""

from __future__ import annotations

from collections.abc import Sequence
from xml.sax.saxutils import quoteattr

from corridor.io.glossary import alias_for
from corridor.io.sld import DEFAULT_OUTLINE

#: Version written in the document (the oldest QGIS the styles are tested with).
QML_VERSION = "3.22.0"

#: Shape names of :mod:`corridor.io.sld` (SE well-known names) -> QGIS marker names.
_SHAPES = {"triangle": "triangle", "square": "square", "circle": "circle", "star": "star",
           "cross": "cross2", "x": "cross_fill"}


def rgb(hex_colour: str) -> str:
    """``"#rrggbb"`` as QGIS's ``"r,g,b"``."""
    h = hex_colour.lstrip("#")
    return ",".join(str(int(h[i:i + 2], 16)) for i in (0, 2, 4))


def _props(props: dict[str, str]) -> str:
    opts = "".join(f'<Option name={quoteattr(k)} type="QString" value={quoteattr(v)}/>'
                   for k, v in props.items())
    legacy = "".join(f"<prop k={quoteattr(k)} v={quoteattr(v)}/>" for k, v in props.items())
    return f'<Option type="Map">{opts}</Option>{legacy}'


def _symbol(name: str, geometry: str, rule: dict) -> str:
    rgba = rgb(rule["colour"]) + ",255"
    if geometry == "point":
        fill = "0,0,0,0" if rule.get("fill") is False else rgba
        props = {"name": _SHAPES.get(rule.get("shape", "triangle"), "triangle"), "color": fill,
                 "outline_color": rgb(rule.get("outline", DEFAULT_OUTLINE)) + ",255",
                 "outline_style": "solid",
                 "outline_width": f"{rule.get('outline_width_mm', 0.4):g}",
                 "outline_width_unit": "MM", "size": f"{rule['width_mm']:g}",
                 "size_unit": "MM"}
        return (f'<symbol type="marker" name="{name}" alpha="1" clip_to_extent="1"'
                f' force_rhr="0"><layer class="SimpleMarker" pass="0" locked="0" enabled="1">'
                f"{_props(props)}</layer></symbol>")
    props = {"line_color": rgba, "line_width": f"{rule['width_mm']:g}", "line_width_unit": "MM",
             "capstyle": "round", "joinstyle": "round", "line_style": "solid"}
    return (f'<symbol type="line" name="{name}" alpha="1" clip_to_extent="1" force_rhr="0">'
            f'<layer class="SimpleLine" pass="0" locked="0" enabled="1">{_props(props)}'
            "</layer></symbol>")


def expression(rule: dict) -> str:
    """The QGIS filter expression of a rule: ``conditions``, ``else``, a range or a category."""
    if rule.get("else"):
        return "ELSE"
    parts = []
    if "conditions" not in rule:  # a class of a ramp or a category, as a rule
        quoted = '"' + rule["field"].replace('"', '""') + '"'
        if "equals" in rule:
            return f"{quoted} = '" + str(rule["equals"]).replace("'", "''") + "'"
        if rule.get("lower") is not None:
            parts.append(f"{quoted} >= {rule['lower']!r}")
        if rule.get("upper") is not None:
            parts.append(f"{quoted} < {rule['upper']!r}")
        return " AND ".join(parts)
    for field, value in rule["conditions"]:
        quoted = '"' + field.replace('"', '""') + '"'
        if isinstance(value, bool):
            parts.append(quoted if value else f"NOT {quoted}")
        elif isinstance(value, int | float):
            parts.append(f"{quoted} = {value!r}")
        else:
            parts.append(f"{quoted} = '" + str(value).replace("'", "''") + "'")
    return " AND ".join(parts)


def _renderer(geometry: str, rules: list[dict]) -> str:
    symbols = "".join(_symbol(str(i), geometry, r) for i, r in enumerate(rules))
    field = rules[0].get("field")
    if any("conditions" in r or r.get("else") for r in rules):
        items = "".join(f'<rule key="rule-{i}" symbol="{i}" label={quoteattr(r["label"])}'
                        f" filter={quoteattr(expression(r))}/>"
                        for i, r in enumerate(rules))
        return ('<renderer-v2 type="RuleRenderer" symbollevels="0" forceraster="0"'
                f' enableorderby="0"><rules key="rules-root">{items}</rules>'
                f"<symbols>{symbols}</symbols></renderer-v2>")
    if field is None:
        return (f'<renderer-v2 type="singleSymbol" symbollevels="0" forceraster="0"'
                f' enableorderby="0"><symbols>{symbols}</symbols></renderer-v2>')
    if "equals" in rules[0]:
        cats = "".join(f"<category value={quoteattr(str(r['equals']))} symbol=\"{i}\""
                       f" label={quoteattr(r['label'])} render=\"true\"/>"
                       for i, r in enumerate(rules))
        return (f'<renderer-v2 type="categorizedSymbol" attr={quoteattr(field)}'
                f' symbollevels="0" forceraster="0" enableorderby="0">'
                f"<categories>{cats}</categories><symbols>{symbols}</symbols></renderer-v2>")
    # QML ranges are closed; the open-ended top class gets a bound no screening value reaches.
    ranges = "".join(
        f'<range lower="{r["lower"]:g}"'
        f' upper="{(r["upper"] if r["upper"] is not None else 1e12):g}"'
        f' symbol="{i}" label={quoteattr(r["label"])} render="true"/>'
        for i, r in enumerate(rules))
    return (f'<renderer-v2 type="graduatedSymbol" attr={quoteattr(field)}'
            f' graduatedMethod="GraduatedColor" symbollevels="0" forceraster="0"'
            f' enableorderby="0"><ranges>{ranges}</ranges><symbols>{symbols}</symbols>'
            '<mode name="manual"/><rotation/><sizescale/></renderer-v2>')


def _labeling(geometry: str, field: str) -> str:
    """Simple labels from one field: along lines, beside points, with a white halo."""
    if geometry == "point":
        placement = ('<placement placement="0" dist="1.5" distUnits="MM" priority="6"'
                     ' quadOffset="4" offsetType="0" repeatDistance="0"/>')
    else:
        # QgsPalLayerSettings: placement 2 = parallel to the line; flags 10 = above | map
        # orientation; a label repeated every 60 mm along long assets.
        placement = ('<placement placement="2" placementFlags="10" dist="0.5" distUnits="MM"'
                     ' priority="5" repeatDistance="60" repeatDistanceUnits="MM"'
                     ' overrunDistance="0" overrunDistanceUnit="MM"/>')
    return (
        '<labeling type="simple"><settings calloutType="simple">'
        f'<text-style fieldName={quoteattr(field)} isExpression="0" fontFamily="Sans Serif"'
        ' fontSize="8" fontSizeUnit="Point" fontWeight="50" fontItalic="0" namedStyle="Regular"'
        ' textColor="26,26,26,255" textOpacity="1" multilineHeight="1" allowHtml="0"'
        ' capitalization="0" blendMode="0" previewBkgrdColor="255,255,255,255">'
        '<text-buffer bufferDraw="1" bufferSize="0.8" bufferSizeUnits="MM"'
        ' bufferColor="255,255,255,255" bufferOpacity="0.85" bufferNoFill="1"'
        ' bufferJoinStyle="128" bufferBlendMode="0"/>'
        '</text-style>'
        '<text-format wrapChar="" multilineAlign="3" plussign="0" formatNumbers="0"'
        ' addDirectionSymbol="0" placeDirectionSymbol="0" reverseDirectionSymbol="0"'
        ' autoWrapLength="0" useMaxLineLengthForAutoWrap="1" decimals="3"/>'
        f"{placement}"
        '<rendering drawLabels="1" obstacle="1" obstacleType="1" obstacleFactor="1"'
        ' scaleVisibility="0" fontLimitPixelSize="0" upsidedownLabels="0" labelPerPart="0"'
        ' mergeLines="0" displayAll="0" limitNumLabels="0" maxNumLabels="2000"'
        ' minFeatureSize="0"/>'
        "</settings></labeling>")


def _aliases(fields: Sequence[str]) -> str:
    items = "".join(f"<alias field={quoteattr(f)} index=\"{i}\" name={quoteattr(alias_for(f))}/>"
                    for i, f in enumerate(fields))
    return f"<aliases>{items}</aliases>"


def qml_document(geometry: str, rules: list[dict], fields: Sequence[str] = (),
                 label_field: str | None = None) -> str:
    """A QML style document: renderer, labels and field aliases.

    Parameters
    ----------
    geometry : str
        ``"line"`` or ``"point"``.
    rules : list of dict
        As for :func:`corridor.io.sld.sld_document` (widths in ``width_mm``).
        Rules with ``conditions`` or ``else`` make a rule-based renderer (a
        feature is drawn by every rule it matches, in order); ``equals`` a
        categorised one; ``lower``/``upper`` a graduated one; no ``field`` a
        single symbol.
    fields : sequence of str
        The layer's attribute fields in QGIS order (the FID first), each given
        its alias (:func:`corridor.io.glossary.alias_for`).
    label_field : str, optional
        Field whose value labels each feature; None: no labels.
    """
    labels = _labeling(geometry, label_field) if label_field else ""
    return ("<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>\n"
            f'<qgis version="{QML_VERSION}" styleCategories="Symbology|Labeling|Fields"'
            f' labelsEnabled="{1 if label_field else 0}">\n'
            f"{_renderer(geometry, rules)}\n{labels}\n{_aliases(fields)}\n</qgis>\n")
