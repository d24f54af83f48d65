"""The report's criteria table and its assumptions section.

The names, formulas, sources and editions come from the limit set
(``corridor/data/limits/*.toml`` through :class:`corridor.limits.limit_sets.Criterion`);
the range of the permitted values from the run's limits table. A criterion
whose value was recalled rather than read (``to_verify``) is listed once, in
the assumptions, as a value to be verified against the standard's text.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from corridor.io.styles import describe_column
from corridor.report.deciding import fmt_value, quantity_title, quantity_unit
from corridor.report.html import esc, html_table, unit_of

log = logging.getLogger(__name__)

#: The words the report uses for a recalled value.
TO_VERIFY = "value to be verified against the standard's text"

METHOD_ASSUMPTIONS = [
    "Steady-state phasors at the run frequency; |V| is the magnitude to remote earth.",
    "Earth-return coupling from Carson's equations (Sunde's surface form for buried assets),"
    " in homogeneous or two-layer soil (Sunde's layered kernel) per segment from the soil"
    " layer or the default; holiday density, foot resistance, electrodes and earth potential"
    " use the local (or top-layer) resistivity.",
    "Oblique exposures are split until the end separations differ by at most a factor of 3,"
    " each section taking the geometric-mean separation (ITU-T Directives practice).",
    "One earth fault at a time; each segment takes the worst over the scanned fault"
    " positions. Earth-wire screening is computed from the tower geometry.",
    "Touch voltage during a fault adds |V| of the asset and the earth potential rise near the"
    " faulted towers (hemisphere footing) as magnitudes: conservative, the phase is unknown.",
    "Assets respond as transmission lines with distributed sources; terminations and grounds"
    " as given, or the asset kind's defaults.",
    "Capacitive (electric-field) coupling only for above-ground assets.",
    "A ratio of 1 or more to a limit of the chosen set exceeds it; from the review threshold"
    " upwards a segment is flagged for review. Limit values follow the editions named in the"
    " criteria table.",
]


def _run_range(run, crit, unit: str) -> str:
    limits = getattr(run, "limits_table", None)
    col = f"permitted_{crit.name}"
    if limits is None or col not in limits:
        return ""
    v = limits[col].to_numpy(float)
    v = v[np.isfinite(v)]
    if not len(v):
        return ""
    lo, hi = float(v.min()), float(v.max())
    if np.isclose(lo, hi, rtol=1e-9):
        return f"in this run: {fmt_value(lo, unit)}"
    return f"in this run: {fmt_value(lo, unit)} to {fmt_value(hi, unit)}"


def criteria_section(run, missing: list[dict]) -> str:
    """The criteria table: plain name, limit value, formula, source and edition."""
    ls = getattr(run, "limit_set", None)
    if ls is None:
        return ('<section id="limits"><h2>Criteria</h2><p>This run has no limit set.</p>'
                "</section>")
    unjudged = {r.get("criterion") for r in missing}
    rows = []
    for c in ls.criteria:
        unit = quantity_unit(c.quantity)
        limit = esc(c.limit_text(unit))
        in_run = _run_range(run, c, unit)
        if in_run:
            limit += f"<br><span class='small'>{in_run}</span>"
        rows.append({
            "Criterion": esc(c.plain_name()),
            "Applies to": esc(", ".join(c.applies_to)),
            "Judged quantity": esc(quantity_title(c.quantity)) + (f" [{esc(unit)}]" if unit
                                                                 else " [-]"),
            "Limit value": limit,
            "Formula": esc(c.formula or "–"),
            "Source": esc(c.source or "–"),
            "Edition": esc(c.edition or "; ".join(ls.editions)),
            "Value status": ("to be verified (see Assumptions)" if c.to_verify else "as published"),
            "Assessed": ("<span class='flag'>NOT ASSESSED</span>" if c.name in unjudged
                         else "yes"),
        })
    frame = pd.DataFrame(rows)
    return ('<section id="limits"><h2>Criteria</h2>'
            + html_table(frame, list(frame.columns),
                         f"{ls.name}: {len(frame)} criteria — {ls.description}",
                         raw=tuple(frame.columns))
            + "</section>")


def _setting(key: str, value) -> str:
    """``"Title value unit"`` of a setting, from the column glossary."""
    d = describe_column(key)
    title = d[0] if d is not None else key.replace("_", " ")
    unit = unit_of(key)
    if isinstance(value, bool):
        text = "yes" if value else "no"
    elif isinstance(value, int | float):
        text = f"{value:g}"
    else:
        text = str(value)
    return f"{title} {text}" + (f" {unit}" if unit and unit not in ("-", "true/false") else "")


def _settings_used(run) -> list[str]:
    cfg = run.config
    r = cfg.run
    out = [f"Default soil resistivity where the soil layer gives none:"
           f" {r.default_soil_resistivity_ohm_m:g} Ω·m.",
           f"Screening distance {r.screening_distance_m:g} m; segments of"
           f" {r.segment_length_m:g} m; frequency {r.frequency_hz:g} Hz.",
           f"Tower span {r.tower_span_m:g} m and footing radius {r.footing_radius_m:g} m"
           " where the towers layer gives none.",
           "Ground resistances tried per site: "
           + ", ".join(f"{v:g} Ω" for v in r.grounding_menu_ohm)
           + f"; at most {r.max_sites_per_asset} sites per asset."]
    ld = dict(getattr(cfg, "line_defaults", {}) or {})
    if ld:
        out.append("Power-line values filled where a line gives none ([line_defaults]): "
                   + "; ".join(_setting(k, v) for k, v in ld.items()) + ".")
    if getattr(r, "use_kind_defaults", False):
        out.append("Missing asset values are filled from the asset kind's defaults;"
                   " see Defaults used for the fields and features.")
    ov = dict(getattr(cfg, "limit_overrides", {}) or {})
    if ov:
        out.append(f"Limit-set overrides from the configuration: {ov}.")
    return out


def assumptions_section(run) -> str:
    """Values to be verified, the method's assumptions and the defaults the run used."""
    ls = getattr(run, "limit_set", None)
    parts = ['<section id="assumptions"><h2>Assumptions</h2>']
    verify = [c for c in getattr(ls, "criteria", ()) if c.to_verify]
    if verify:
        items = "".join(
            f"<li>{esc(c.plain_name())}: {esc(c.limit_text(quantity_unit(c.quantity)))}"
            f" ({esc(c.source)}{', ' + esc(c.edition) if c.edition else ''})</li>"
            for c in verify)
        parts.append("<h3 id='to-verify'>Values to be verified</h3><p>Each limit below is a"
                     f" {TO_VERIFY}: it was recalled, not read from the text. Check it"
                     " before relying on a result it decides.</p>"
                     f"<ul>{items}</ul>")
    assumptions = list(METHOD_ASSUMPTIONS)
    record = getattr(run, "record", None) or {}
    if isinstance(record, dict) and record.get("normal_load_assumption"):
        # the normal-load worst case over unknown directions and angles (docs/methods.md §8)
        assumptions.insert(1, str(record["normal_load_assumption"]))
    parts.append("<h3>Method</h3><ul>" + "".join(f"<li>{esc(a)}</li>" for a in assumptions)
                 + "</ul>")
    parts.append("<h3>Defaults and settings this run used</h3><ul>"
                 + "".join(f"<li>{esc(a)}</li>" for a in _settings_used(run)) + "</ul>")
    parts.append("</section>")
    return "".join(parts)
