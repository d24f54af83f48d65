"""Titles and descriptions (with units) of the load-series columns, for the glossary.

:data:`corridor.io.styles.GLOSSARY` takes these in; the report's table headers
and the GeoPackage field descriptions come from there.
"""

from __future__ import annotations

__all__ = ["SERIES_GLOSSARY", "series_criterion_description"]

SERIES_GLOSSARY: dict[str, tuple[str, str]] = {
    "hours_above_limit_h": (
        "Hours above limit", "Load series: hours during which the segment (assets layer: any"
        " segment of the asset) reaches a steady-state limit (normal-load or capacitive"
        " criteria); empty where no steady-state criterion applies [h]."),
    "fraction_above_limit": (
        "Fraction above limit", "Load series: hours above limit over the hours of the series"
        " [-]."),
    "asset_hours_above_limit_h": (
        "Asset hours above limit", "Load series: hours during which any segment of the"
        " segment's asset reaches a steady-state limit [h]."),
    "v_normal_peak_v": (
        "Peak voltage over the series", "Load series: largest normal-load |V| to remote earth"
        " over every step [V]."),
    "v_normal_peak_utc": (
        "Time of the peak", "Load series: UTC time of the step with the largest normal-load"
        " |V| (ISO 8601)."),
    "ac_density_mean_max_a_per_m2": (
        "Worst mean AC density", "Load series: largest mean over the representative period"
        " (ISO 18086 clause 7, default 24 h rolling) of the AC current density at a 1 cm²"
        " holiday (pipelines) [A/m²]."),
    "ac_density_mean_end_utc": (
        "End of the worst mean", "Load series: UTC time of the last step of the period with"
        " the worst mean AC density (ISO 8601)."),
    "iso18086_mean_ratio": (
        "ISO 18086 mean ratio", "Load series: the ISO 18086 clause 7 combination judged on the"
        " worst period mean of the AC density, over its permitted value; 1 or more exceeds"
        " [-]."),
    "series_bounded": (
        "Bounded, not stepped", "Load series: the segment's voltage bound over the whole series"
        " stays below screen_below times every limit that applies, so no step can reach a"
        " limit (hours above 0, exact); its peak voltage and mean AC density are that upper"
        " bound and their times are empty [true/false]."),
    "hours_exceeded_h": (
        "Hours exceeded", "Duration curve: hours of the series during which the asset's peak"
        " voltage reaches the value beside it [h]."),
}


def series_criterion_description(criterion: str) -> tuple[str, str]:
    """Title and description of an ``hours_above_<criterion>_h`` column."""
    label = criterion.replace("_", " ")
    return (f"Hours above {label}", f"Load series: hours during which the segment reaches the"
            f" permitted value of criterion {criterion}; empty where it does not apply [h].")
