"""The ensemble: members drawn by Latin hypercube, solved, assessed, summarised.

:func:`stage_bands` runs after the per-asset stages of :func:`corridor.compute.compute`
when the configuration has an ``[uncertainty]`` section (docs/methods.md §16):

1. :func:`draw` samples the N members (``scipy.stats.qmc.LatinHypercube``, seeded).
2. The members are grouped by their *physics* inputs (soil, coating, posts, grounds).
   Each distinct group is solved once, on the run's own geometry and exposures, with
   the production steps (:func:`corridor.steps.couple.couple`,
   :func:`corridor.steps.respond.respond`,
   :func:`corridor.steps.columns.response_columns`): a *unit solve* at the lines' own
   currents.
3. The load and fault current factors are applied to the unit solve by scaling
   (:func:`member_table`): the responses are linear in the line currents. The one
   exception, the zone of influence of a faulted tower (its potential must exceed
   ``tower_zone_threshold_v``), is kept exact by solving at the threshold divided by the
   largest fault factor and switching each member's tower potential on where
   ``f·V ≥ threshold``.
4. Every member is assessed with :func:`corridor.steps.assess.assess` and its
   utilization kept; :mod:`corridor.uncertainty.tables` summarises them per segment
   and per asset.

A member never changes the run's own (deterministic) columns.
"""

from __future__ import annotations

import copy
import dataclasses
import logging
from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np
import pandas as pd

from corridor.errors import ConfigError
from corridor.uncertainty.settings import LINEAR_FACTORS, PHYSICS_FACTORS, Bands

log = logging.getLogger(__name__)

__all__ = ["Sample", "draw", "member_table", "member_utilization", "stage_bands"]

#: Segment-table columns proportional to the load current.
LOAD_COLUMNS = ("v_normal_v", "i_normal_a", "i_normal_body_ma", "emf_normal_v",
                "emf_normal_v_per_km", "emf_section_normal_v")
#: Segment-table columns proportional to the fault current (the tower potential apart).
FAULT_COLUMNS = ("v_fault_v", "i_fault_a", "emf_fault_v", "emf_fault_v_per_km",
                 "fault_current_ka")
#: Columns the assessment reads besides the quantities.
ASSESS_COLUMNS = ("asset_kind", "soil_resistivity_ohm_m", "clearing_time_s",
                  "high_reliability", "dc_current_density_a_per_m2")
#: Asset attribute each physics factor multiplies (the ground factor also multiplies the
#: grounds layer's ``resistance_ohm``).
ASSET_FACTOR_COLUMNS = {"coating_resistance_factor": "coating_resistance_ohm_m2",
                        "post_resistance_factor": "post_resistance_ohm",
                        "ground_resistance_factor": "termination_resistance_ohm"}


@dataclass(frozen=True)
class Sample:
    """The members' inputs.

    Attributes
    ----------
    names : tuple of str
        One per range of :class:`corridor.uncertainty.settings.Bands`, in its order.
    values : ndarray, shape (N, d)
        Member m's value of input j (a factor [-] or a resistivity [Ω·m]).
    """

    names: tuple[str, ...]
    values: np.ndarray

    def column(self, name: str, fill: float = 1.0) -> np.ndarray:
        """Input ``name`` per member (``fill`` where the config gives no range)."""
        if name in self.names:
            return self.values[:, self.names.index(name)]
        return np.full(len(self.values), fill)


def draw(bands: Bands) -> Sample:
    """The N members by Latin hypercube (McKay, Beckman & Conover 1979), seeded.

    Each input's unit interval is cut into N strata of equal probability and each
    stratum is used by exactly one member; the positions map through the inverse of
    the input's distribution (:meth:`Range.value`). The same seed gives the same
    members on every machine.
    """
    from scipy.stats import qmc

    d = len(bands.ranges)
    u = qmc.LatinHypercube(d=d, rng=np.random.default_rng(bands.seed)).random(bands.members)
    values = np.column_stack([r.value(u[:, j]) for j, r in enumerate(bands.ranges)])
    return Sample(tuple(r.name for r in bands.ranges), values)


# -- one unit solve ---------------------------------------------------------------

@dataclass
class UnitSolve:
    """Per segment, what a member's assessment needs at the lines' own currents."""

    table: pd.DataFrame  # assessment columns and quantities
    v_fault_v: np.ndarray  # |V| in the governing fault, without the tower potential
    emf_section_fault_v: np.ndarray  # section EMF in a fault, without the tower potential
    tower_potential_v: np.ndarray  # earth potential from faulted towers (lowered threshold)
    step_v: np.ndarray
    touch_loading: np.ndarray
    coated: np.ndarray
    section: np.ndarray
    #: The largest fault factor the tower zones were found for (threshold / this).
    fault_factor_zone: float


def soil_polygon_of_segment(run) -> np.ndarray:
    """Per segment: row of the soil polygon under its midpoint (-1: none), as
    :func:`corridor.compute.soil_per_segment` finds it."""
    from corridor.geometry.exposure import value_at_midpoints

    soil = run.inputs.soil
    seg = run.geometry.segments
    if soil is None or len(soil) == 0:
        return np.full(len(seg), -1, np.int64)
    return value_at_midpoints(seg, soil.geometry.to_numpy(),
                              np.arange(len(soil), dtype=float), -1.0).astype(np.int64)


def polygon_rows(cfg, soil, bands: Bands) -> tuple[dict[str, int], list[str]]:
    """Soil row of each per-polygon range, and a problem for each range naming no polygon.

    Called by the ensemble and, before any computation, by the run's and
    ``corridor check``'s input checks (:func:`corridor.pipeline.side_input_problems`).
    """
    ids = ([] if soil is None or "feature_id" not in soil
           else [str(v) for v in soil["feature_id"].to_numpy(dtype=object)])
    out, problems = {}, []
    for r in bands.soil_polygons:
        pid = r.name.split(":", 1)[1]
        if pid in ids:
            out[r.name] = ids.index(pid)
        else:
            problems.append(f"{cfg.path.name}: uncertainty.soil_resistivity_ohm_m."
                            f"{pid!r}: no soil polygon has this feature id (the soil layer's"
                            f" polygons: {', '.join(ids) or 'none'}; a rejected polygon is"
                            " listed in rejected.csv)")
    return out, problems


def _polygon_rows(run, bands: Bands) -> dict[str, int]:
    """Soil row of each per-polygon range; a range naming no polygon is a config error."""
    out, problems = polygon_rows(run.config, run.inputs.soil, bands)
    if problems:
        raise ConfigError(problems)
    return out


def _nominal_polygon_ohm_m(soil: pd.DataFrame, row: int) -> float:
    """A polygon's given resistivity (the top layer's, else the homogeneous value)."""
    for name in ("top_resistivity_ohm_m", "soil_resistivity_ohm_m"):
        if name in soil:
            value = pd.to_numeric(soil[name], errors="coerce").to_numpy(float)[row]
            if np.isfinite(value):
                return float(value)
    return float("nan")


def perturbed(run, bands: Bands, physics: dict[str, float], poly_of_seg: np.ndarray,
              poly_rows: dict[str, int]):
    """The run's geometry and inputs with one member's physics inputs.

    Returns
    -------
    geometry, inputs
        Copies; the run's own are not changed.
    """
    geo, inputs = run.geometry, run.inputs
    scale = np.full(len(geo.segments), physics.get("soil_resistivity_factor", 1.0))
    for name, row in poly_rows.items():
        nominal = _nominal_polygon_ohm_m(inputs.soil, row)
        scale[poly_of_seg == row] = physics[name] / nominal
    if np.any(scale != 1.0):
        def times(a):
            return None if a is None else np.asarray(a, float) * scale

        geo = dataclasses.replace(
            geo, soil_resistivity_ohm_m=times(geo.soil_resistivity_ohm_m),
            soil_bottom_resistivity_ohm_m=times(geo.soil_bottom_resistivity_ohm_m),
            soil_local_resistivity_ohm_m=times(geo.soil_local_resistivity_ohm_m))
    changed = {}
    for name, col in ASSET_FACTOR_COLUMNS.items():
        f = physics.get(name, 1.0)
        if f != 1.0 and col in inputs.assets:
            changed[col] = pd.to_numeric(inputs.assets[col], errors="coerce") * f
    f_ground = physics.get("ground_resistance_factor", 1.0)
    if changed or (f_ground != 1.0 and inputs.grounds is not None):
        inputs = copy.copy(inputs)
        if changed:
            assets = inputs.assets.copy()
            for col, values in changed.items():
                assets[col] = values.to_numpy(float)
            inputs.assets = assets
        if f_ground != 1.0 and inputs.grounds is not None and "resistance_ohm" in inputs.grounds:
            grounds = inputs.grounds.copy()
            grounds["resistance_ohm"] = pd.to_numeric(grounds["resistance_ohm"],
                                                      errors="coerce").to_numpy(float) * f_ground
            inputs.grounds = grounds
    return geo, inputs


def unit_solve(run, bands: Bands, physics: dict[str, float], poly_of_seg: np.ndarray,
               poly_rows: dict[str, int], fault_factor_zone: float) -> UnitSolve:
    """Couple and respond once with one member's physics inputs, at the lines' currents.

    The tower zones are found at ``tower_zone_threshold_v / fault_factor_zone``, so every
    tower that counts for a fault factor up to ``fault_factor_zone`` is in.
    """
    from corridor.steps.columns import kinds_with, response_columns
    from corridor.steps.couple import couple
    from corridor.steps.respond import respond

    cfg = run.config
    nominal = all(v == 1.0 for k, v in physics.items() if k in PHYSICS_FACTORS) and not any(
        k.startswith("soil:") for k in physics)
    if nominal and fault_factor_zone == 1.0 and run.coupling is not None \
            and run.response is not None:
        geo, inputs, cp, rs = run.geometry, run.inputs, run.coupling, run.response
    else:
        geo, inputs = perturbed(run, bands, physics, poly_of_seg, poly_rows)
        changes = {}
        if fault_factor_zone != 1.0:
            changes["tower_zone_threshold_v"] = (cfg.run.tower_zone_threshold_v
                                                 / fault_factor_zone)
        soil_factor = physics.get("soil_resistivity_factor", 1.0)
        if soil_factor != 1.0:  # the lines' own impedances (fault sources) use the default
            changes["default_soil_resistivity_ohm_m"] = (
                cfg.run.default_soil_resistivity_ohm_m * soil_factor)
        if changes:
            cfg = cfg.with_run(**changes)
        cp = couple(cfg, inputs, geo)
        rs = respond(cfg, inputs, geo, cp)
    t = run.segment_table
    table = pd.DataFrame({"asset_id": t["asset_id"].to_numpy(dtype=object),
                          "asset_kind": t["asset_kind"].to_numpy(dtype=object),
                          "length_m": t["length_m"].to_numpy(float),
                          "soil_resistivity_ohm_m": geo.local_resistivity_ohm_m})
    member_run = SimpleNamespace(config=cfg, inputs=inputs, geometry=geo, coupling=cp)
    response_columns(member_run, rs, table)
    kind = table["asset_kind"].to_numpy(dtype=object)
    sel = rs.segments
    keep = [c for c in table.columns
            if c in ASSESS_COLUMNS or c in LOAD_COLUMNS or c in FAULT_COLUMNS
            or c.startswith(("v_", "i_", "emf_"))]
    return UnitSolve(table[keep].copy(), np.asarray(rs.v_fault_v, float),
                     np.asarray(rs.emf_section_fault_v, float),
                     np.asarray(cp.earth_potential_fault_v[sel], float),
                     np.asarray(cp.step_voltage_fault_v[sel], float),
                     np.asarray(rs.touch_loading, float), kinds_with(kind, "coated"),
                     kinds_with(kind, "section_emf"), float(fault_factor_zone))


def member_table(unit: UnitSolve, load_factor: float, fault_factor: float,
                 threshold_v: float) -> pd.DataFrame:
    """A member's assessment columns from a unit solve, scaled by its current factors.

    Load-state columns scale with ``load_factor``, fault-state columns with
    ``fault_factor``; the touch, coating-stress and fault section-EMF columns are summed
    again as :func:`corridor.steps.columns.response_columns` sums them. A faulted tower's
    earth potential counts where ``fault_factor · V ≥ threshold_v`` (its zone of
    influence), or everywhere the unit solve found it when ``fault_factor`` is the
    factor the zones were found for. The step voltage follows its tower potential (an
    upper bound when the two come from different towers: docs/methods.md §16).
    """
    m = unit.table.copy()
    for col in LOAD_COLUMNS:
        if col in m:
            m[col] = m[col].to_numpy(float) * load_factor
    for col in FAULT_COLUMNS:
        if col in m:
            m[col] = m[col].to_numpy(float) * fault_factor
    vmax = unit.tower_potential_v
    on = (vmax > 0) & ((fault_factor * vmax >= threshold_v)
                       | (fault_factor >= unit.fault_factor_zone))
    epr = np.where(on, fault_factor * vmax, 0.0)
    v_fault = fault_factor * unit.v_fault_v
    m["earth_potential_fault_v"] = epr
    m["v_touch_fault_v"] = (v_fault + epr) * unit.touch_loading
    m["v_coating_stress_v"] = np.where(unit.coated, v_fault + epr, np.nan)
    m["v_step_fault_v"] = np.where(on, fault_factor * unit.step_v, 0.0)
    m["emf_section_fault_v"] = np.where(unit.section,
                                        fault_factor * unit.emf_section_fault_v + epr, np.nan)
    return m


def member_utilization(unit: UnitSolve, load_factor: float, fault_factor: float,
                       threshold_v: float, limit_set, cats: dict) -> np.ndarray:
    """Utilization of every segment for one member (:func:`corridor.steps.assess.assess`)."""
    from corridor.steps.assess import assess

    table = member_table(unit, load_factor, fault_factor, threshold_v)
    return np.asarray(assess(limit_set, table, cats)["utilization"], float)


def ensemble_utilization(run, bands: Bands, sample: Sample) -> np.ndarray:
    """Utilization per segment and member, shape (segments, N)."""
    from corridor.steps.columns import categories, load_run_limit_set

    limit_set = load_run_limit_set(run)
    cats = categories(run)
    poly_rows = _polygon_rows(run, bands)
    poly_of_seg = (soil_polygon_of_segment(run) if poly_rows
                   else np.full(len(run.geometry.segments), -1))
    physics_names = [n for n in sample.names if n not in LINEAR_FACTORS]
    cols = [sample.names.index(n) for n in physics_names]
    keys, group = np.unique(sample.values[:, cols], axis=0, return_inverse=True) if cols else (
        np.zeros((1, 0)), np.zeros(len(sample.values), np.int64))
    group = np.asarray(group).reshape(-1)
    load = sample.column("load_current_factor")
    fault = sample.column("fault_current_factor")
    zone_factor = float(fault.max())
    threshold = float(run.config.run.tower_zone_threshold_v)
    out = np.empty((len(run.segment_table), len(sample.values)))
    for k, key in enumerate(keys):
        physics = dict(zip(physics_names, (float(v) for v in key), strict=True))
        unit = unit_solve(run, bands, physics, poly_of_seg, poly_rows, zone_factor)
        for m in np.flatnonzero(group == k):
            out[:, m] = member_utilization(unit, float(load[m]), float(fault[m]), threshold,
                                           limit_set, cats)
    log.debug("bands: %d members, %d solves", len(sample.values), len(keys))
    return out


def stage_bands(run) -> None:
    """The ensemble of the run's assets: per-segment band columns and the per-asset table.

    Adds ``utilization_p05``, ``utilization_p50``, ``utilization_p95``,
    ``share_exceeding``, ``verdict_robust``, ``band_verdict`` and ``band_driver`` to the
    segment table and
    puts the per-asset table in ``run.extra_tables["bands"]``
    (:func:`corridor.uncertainty.tables.segment_bands`,
    :func:`corridor.uncertainty.tables.asset_bands`).
    """
    from corridor.uncertainty.tables import (
        BANDS_TABLE,
        asset_bands,
        segment_bands,
        segment_drivers,
    )

    bands: Bands = run.config.uncertainty
    sample = draw(bands)
    util = ensemble_utilization(run, bands, sample)
    for name, values in segment_bands(util).items():
        run.segment_table[name] = values
    run.segment_table["band_driver"] = segment_drivers(
        util, run.segment_table["band_verdict"].to_numpy(dtype=object), sample, bands)
    run.extra_tables[BANDS_TABLE] = asset_bands(run.segment_table["asset_id"], util, sample,
                                                bands)
    run.counts["band_members"] = bands.members
