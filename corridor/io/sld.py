"""OGC Styled Layer Descriptor 1.1 documents (Symbology Encoding 1.1 rules).

A style is a list of rules (dicts, see :func:`sld_document`); the same rules
give the QML document of :mod:`corridor.io.qml`.

References
----------
.. [1] OGC Styled Layer Descriptor profile of the Web Map Service
   Implementation Specification 1.1.0 (OGC 05-078r4).
.. [2] OGC Symbology Encoding Implementation Specification 1.1.0
   (OGC 05-077r4).
"""

from __future__ import annotations

from xml.sax.saxutils import escape

_SLD_HEAD = (
    '<?xml version="1.0" encoding="UTF-8"?>\n'
    '<StyledLayerDescriptor version="1.1.0" xmlns="http://www.opengis.net/sld"'
    ' xmlns:se="http://www.opengis.net/se" xmlns:ogc="http://www.opengis.net/ogc"'
    ' xmlns:xlink="http://www.w3.org/1999/xlink"'
    ' xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance"'
    ' xsi:schemaLocation="http://www.opengis.net/sld'
    ' http://schemas.opengis.net/sld/1.1.0/StyledLayerDescriptor.xsd">\n'
)

#: Outline of point symbols unless a rule names its own.
DEFAULT_OUTLINE = "#1a1a1a"


def literal(value) -> str:
    """A filter literal: booleans as ``true``/``false``, the rest as text."""
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)


def _equal(field: str, value) -> str:
    return (f"<ogc:PropertyIsEqualTo><ogc:PropertyName>{escape(field)}</ogc:PropertyName>"
            f"<ogc:Literal>{escape(literal(value))}</ogc:Literal></ogc:PropertyIsEqualTo>")


def _se_filter(rule: dict) -> str:
    if rule.get("else"):
        return "<se:ElseFilter/>"
    if "conditions" in rule:
        parts = [_equal(f, v) for f, v in rule["conditions"]]
        body = parts[0] if len(parts) == 1 else "<ogc:And>" + "".join(parts) + "</ogc:And>"
        return f"<ogc:Filter>{body}</ogc:Filter>"
    field = escape(rule["field"])
    if "equals" in rule:
        return f"<ogc:Filter>{_equal(rule['field'], rule['equals'])}</ogc:Filter>"
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


def _se_symbolizer(geometry: str, rule: dict) -> str:
    colour, width_px = rule["colour"], rule["width"]
    if geometry == "point":
        fill = ("" if rule.get("fill") is False else
                f'<se:Fill><se:SvgParameter name="fill">{colour}</se:SvgParameter></se:Fill>')
        outline = rule.get("outline", DEFAULT_OUTLINE)
        stroke_px = rule.get("outline_width", 1.5)
        return ("<se:PointSymbolizer><se:Graphic><se:Mark>"
                f"<se:WellKnownName>{escape(rule.get('shape', 'triangle'))}</se:WellKnownName>"
                f"{fill}"
                f'<se:Stroke><se:SvgParameter name="stroke">{outline}</se:SvgParameter>'
                f'<se:SvgParameter name="stroke-width">{stroke_px:g}</se:SvgParameter>'
                "</se:Stroke>"
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
        Each with ``label``, ``colour``, ``width`` [px] and one of: ``field`` with
        ``lower``/``upper`` (range, lower inclusive); ``field`` with ``equals``;
        ``conditions``, a list of ``(field, value)`` equalities that all hold;
        ``else`` true (the features no other rule takes); nothing (every
        feature). Point rules may add ``shape`` (an SE well-known name),
        ``outline``, ``outline_width`` [px] and ``fill`` false (outline only).
    """
    out = [_SLD_HEAD, f"  <NamedLayer><se:Name>{escape(layer)}</se:Name>\n",
           f"    <UserStyle><se:Name>{escape(style_name)}</se:Name><se:FeatureTypeStyle>\n"]
    for r in rules:
        filt = _se_filter(r) if (r.get("field") or "conditions" in r or r.get("else")) else ""
        out.append(f"      <se:Rule><se:Name>{escape(r['label'])}</se:Name>"
                   f"<se:Description><se:Title>{escape(r['label'])}</se:Title></se:Description>"
                   f"{filt}{_se_symbolizer(geometry, r)}</se:Rule>\n")
    out.append("    </se:FeatureTypeStyle></UserStyle>\n  </NamedLayer>\n"
               "</StyledLayerDescriptor>\n")
    return "".join(out)
