"""Titles and descriptions, with units, of the columns corridor writes.

Used for the GeoPackage schema extension (``gpkg_data_columns``), the field
aliases of the QML styles (:mod:`corridor.io.qml`) and the report's column
headers.
"""

from __future__ import annotations

import re

#: Canonical column name -> (title, description with unit in brackets).
GLOSSARY: dict[str, tuple[str, str]] = {
    # identifiers and bookkeeping
    "fid": ("Feature id", "GeoPackage feature id (FID) of the row [-]."),
    "feature_id": ("Input feature", "The feature's id in its input layer."),
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
                    " 1 or more exceeds a limit; empty where no criterion judged the"
                    " segment [-]."),
    "governing": ("Governing criterion", "'<criterion>:<case>' giving the utilization."),
    "hazard_class": ("Hazard class", "clear (below the review threshold), review (threshold up"
                     " to 1), exceeds (utilization 1 or more), or not assessed (no criterion"
                     " of the limit set judged it: not checked, not clear)."),
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
    "i_capacitive_body_ma": ("Capacitive body current", "Current through a 1000 Ω body"
                             " touching the above-ground asset [mA]."),
    # power lines as the run used them
    "arrangement": ("Arrangement", "Tower and conductor arrangement of the line."),
    "flow_direction": ("Flow direction", "Power-flow direction against the digitised"
                       " direction (+1 or -1); empty: unknown (worst case)."),
    "circuit_load_current_a": ("Circuit load currents", "Load current of each circuit,"
                               " ';'-separated [A]."),
    "circuit_flow_direction": ("Circuit flow directions", "Flow direction of each circuit,"
                               " ';'-separated."),
    "circuit_phase_offset_deg": ("Circuit phase offsets", "Phase-angle offset of each circuit,"
                                 " ';'-separated [deg]."),
    "utilization_after": ("Utilization after", "Worst utilization of the asset after the site"
                          " is added [-]."),
    # uncertainty bands ([uncertainty], docs/methods.md §16)
    "utilization_p05": ("Utilization, 5th percentile", "5th percentile of the ensemble"
                        " members' utilization [-]."),
    "utilization_p50": ("Utilization, median", "Median of the ensemble members' utilization"
                        " [-]."),
    "utilization_p95": ("Utilization, 95th percentile", "95th percentile of the ensemble"
                        " members' utilization [-]."),
    "worst_utilization_p05": ("Worst utilization, 5th percentile", "5th percentile of the"
                              " members' worst utilization along the asset [-]."),
    "worst_utilization_p50": ("Worst utilization, median", "Median of the members' worst"
                              " utilization along the asset [-]."),
    "worst_utilization_p95": ("Worst utilization, 95th percentile", "95th percentile of the"
                              " members' worst utilization along the asset [-]."),
    "share_exceeding": ("Share of members exceeding", "Share of the ensemble members with a"
                        " utilization of 1 or more [-]."),
    "verdict_robust": ("Verdict robust", "The verdict (exceeds or clear) is the same across"
                       " the 5th-95th percentile band [true/false]."),
    "band_verdict": ("Band verdict", "exceeds, clear, uncertain (the band straddles the"
                     " limit) or not assessed."),
    "band_driver": ("Deciding uncertain input", "Input the utilization is most sensitive to,"
                    " by Spearman rank correlation over the members."),
    "band_driver_rho": ("Rank correlation of the deciding input", "Spearman rank correlation"
                        " of the deciding input with the worst utilization [-]."),
    "band_advice": ("What would settle it", "The survey or measurement that would settle an"
                    " uncertain verdict."),
}

_UNIT_SUFFIX = (
    ("_v_per_km", "V/km"), ("_a_per_m2", "A/m²"), ("_ohm_m2", "Ω·m²"), ("_ohm_m", "Ω·m"),
    ("_ohm", "Ω"), ("_ma", "mA"), ("_ka", "kA"), ("_kv", "kV"), ("_deg", "deg"),
    ("_m", "m"), ("_v", "V"), ("_a", "A"), ("_s", "s"), ("_hz", "Hz"),
    ("_pct", "%"),
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


def alias_for(name: str) -> str:
    """The alias (display name) of a column in a desktop GIS.

    Parameters
    ----------
    name : str
        Column name.

    Returns
    -------
    str
        The title from :func:`describe_column` with the unit in brackets where
        the description names one (``"Separation [m]"``); for a column the
        glossary does not know, the name with spaces for underscores.
    """
    d = describe_column(name)
    if d is None:
        return name.replace("_", " ").capitalize()
    title, desc = d
    unit = re.search(r"\[([^\]]+)\]\.?$", desc)
    if unit and unit.group(1) not in ("-", "true/false"):
        return f"{title} [{unit.group(1)}]"
    return title
