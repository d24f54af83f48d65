"""Per-asset computation: the run record, the segment geometry and the stage sequence.

:func:`compute` runs the segment geometry (segmentation, exposure search,
sections, exposures) and then the per-asset steps (couple, respond, assess,
ground in :mod:`corridor.steps`) for any subset of the assets
(:func:`subset_inputs`); a subset's rows do not depend on which other assets
are in it, so the cache and the backends compute pieces and
:func:`corridor.partitions.merge` joins them. :func:`finalize` runs the
run-wide steps (segment ids, rank, summary layers) after the merge. The one
sequence of a whole run, which calls this module through the backends, is
:func:`corridor.pipeline.screen`.

Nothing here does physics itself: it turns tables into arrays for
:mod:`corridor.physics`, :mod:`corridor.network` and :mod:`corridor.limits`,
and writes their answers back into tables.
"""

from __future__ import annotations

import logging
import platform
import time
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from corridor import __version__
from corridor.config import Config
from corridor.geometry.exposure import (
    CLASSES,
    Exposures,
    LineEdges,
    Pairs,
    Sections,
    build_exposures,
    equivalent_separation,
    find_pairs,
    nearest_line,
    split_sections,
    value_at_midpoints,
)
from corridor.geometry.segments import Segments, split_lines
from corridor.io.layers import Inputs

if TYPE_CHECKING:  # the stages' record types (the steps import nothing of this module)
    from corridor.limits.limit_sets import LimitSet
    from corridor.steps.couple import Coupling
    from corridor.steps.respond import Response

log = logging.getLogger(__name__)


@dataclass
class Geometry:
    """Asset segments and their exposure to the power lines (:func:`stage_geometry`)."""

    segments: Segments
    edges: LineEdges
    pairs: Pairs
    sections: Sections
    pair_equivalent_separation_m: np.ndarray
    exposures: Exposures
    #: Per segment: index into pairs, -1 where no line is in reach.
    nearest: np.ndarray
    #: Per segment: the soil's top layer (or the homogeneous value), for the earth return.
    soil_resistivity_ohm_m: np.ndarray
    #: Per segment, NaN where the soil is homogeneous: resistivity below the top layer [Ω·m]
    #: and the top layer's thickness [m] (docs/methods.md §9).
    soil_bottom_resistivity_ohm_m: np.ndarray
    soil_top_thickness_m: np.ndarray
    #: Per segment: the soil at the asset's depth (local value, else the top layer), for the
    #: local quantities: holiday density, foot resistance, electrodes, earth potential.
    soil_local_resistivity_ohm_m: np.ndarray

    @property
    def local_resistivity_ohm_m(self) -> np.ndarray:
        """Resistivity for the local quantities (the top layer where no local value)."""
        return self.soil_local_resistivity_ohm_m


@dataclass
class Run:
    """Everything one screening run produced, stage by stage.

    A run is made by :func:`compute` once the exposure geometry exists (or by
    :func:`corridor.partitions.run_from_tables` from merged per-asset tables), so
    its inputs, segment table and exposure table always exist. Each later field
    is set by the stage named beside it; a field is None only until its stage
    ran, or where the stage did not run (a run merged from the cache or from
    partitions keeps no :class:`Geometry` and no stage records: their tables
    hold everything). :func:`corridor.result.result_of` turns a finished run
    into the typed :class:`corridor.result.Result` the outputs are written from.
    """

    #: The run configuration.
    config: Config
    #: Every input layer, canonical, with the rejections so far.
    inputs: Inputs
    #: One row per asset segment: geometry columns (:func:`segment_frame`), then the
    #: columns each stage adds (``couple``, ``respond``, ``assess``; ``segment_id`` and
    #: ``rank`` after :func:`finalize`).
    segment_table: gpd.GeoDataFrame
    #: One row per (asset, power line, continuous run) (:func:`exposure_frame`).
    exposure_table: gpd.GeoDataFrame
    #: The exposure geometry (:func:`stage_geometry`); None in a merged run.
    geometry: Geometry | None = None
    #: Stage ``couple``: EMFs, capacitive currents and earth potentials per segment.
    coupling: Coupling | None = None
    #: Stage ``respond``: voltages and currents along every asset.
    response: Response | None = None
    #: Stage ``assess``: the limit set's evaluation (``quantities``, ``ratios``,
    #: ``utilization``, ``governing``, ``hazard_class``, ``permitted``).
    assessment: dict[str, Any] | None = None
    #: The run's limit set, loaded by the first stage that needs it
    #: (:func:`corridor.steps.load_run_limit_set`).
    limit_set: LimitSet | None = None
    #: Permitted value of every criterion on every segment, as the assess step found it
    #: (``asset_id``, ``segment_index``, ``permitted_<criterion>``): the report's profiles
    #: present it (:func:`limits_frame`); a per-asset table, cached and merged.
    limits_table: pd.DataFrame | None = None
    #: Stage ``ground``: grounding sites as points (``sites`` layer) ...
    sites: gpd.GeoDataFrame | None = None
    #: ... the grounding work list (``grounding_sites.csv``) ...
    grounding_sites: pd.DataFrame | None = None
    #: ... and the segment voltages with the proposed grounds in place (report profiles).
    segment_table_after_grounding: gpd.GeoDataFrame | None = None
    #: Stage ``tables`` (``steps/report_tables.py``): one row per segment at or above the
    #: review threshold (``hazards`` layer) and one row per asset (``assets`` layer).
    hazards: gpd.GeoDataFrame | None = None
    assets: gpd.GeoDataFrame | None = None
    #: Changes since the previous run (``changes.csv``), from :mod:`corridor.changes`.
    changes: pd.DataFrame | None = None
    #: Per-asset pair and section counts of a run merged from partitions or the
    #: cache, which keeps no :class:`Geometry` (``asset_id``, ``pairs``, ``sections``).
    asset_counts: pd.DataFrame | None = None
    #: Entries the run adds to run.json (criteria not assessed, change summary,
    #: input state, fingerprint, rejected lines, defaults used).
    record: dict[str, Any] = field(default_factory=dict)
    #: The plugin hook: a plugin step's own tables, ``layer:<name>`` (GeoDataFrame) or
    #: ``csv:<file>`` (the built-in stages use the typed fields above).
    extra_tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    #: Seconds per stage, by stage name.
    timings_s: dict[str, float] = field(default_factory=dict)
    #: Counts for run.json and the report (segments, pairs, exposures, ...).
    counts: dict[str, int] = field(default_factory=dict)


class _Timer:
    """Logs a step and records its seconds in ``timings_s[name]``."""

    def __init__(self, timings_s: dict[str, float], name: str, level: int = logging.INFO):
        self.timings_s, self.name, self.level = timings_s, name, level

    def __enter__(self):
        self.t0 = time.perf_counter()
        log.log(self.level, "step %s ...", self.name)
        return self

    def __exit__(self, *exc):
        dt = time.perf_counter() - self.t0
        self.timings_s[self.name] = round(dt, 4)
        if exc[0] is None:
            log.log(self.level, "step %s done in %.2f s", self.name, dt)
        return False


def stage_geometry(cfg: Config, inputs: Inputs) -> Geometry:
    """Segment the assets and find their exposures to the power lines."""
    s = cfg.run
    segments = split_lines(inputs.assets.geometry.to_numpy(), s.segment_length_m)
    edges = LineEdges.from_geometries(inputs.lines.geometry.to_numpy())
    pairs = find_pairs(segments, edges, s.screening_distance_m, s.min_separation_m,
                       s.parallel_angle_deg)
    sections = split_sections(pairs, s.min_separation_m, s.oblique_ratio)
    eq = equivalent_separation(sections, len(pairs))
    exposures = build_exposures(pairs, segments, eq)
    soil = soil_per_segment(inputs, segments, s.default_soil_resistivity_ohm_m)
    return Geometry(segments, edges, pairs, sections, eq, exposures,
                    nearest_line(pairs, len(segments)), *soil)


def soil_per_segment(inputs: Inputs, segments, default_ohm_m: float):
    """Top (or homogeneous), bottom, top thickness and local resistivity per segment.

    Each segment takes the soil polygon under its midpoint (docs/methods.md §9). A polygon
    with ``top_resistivity_ohm_m`` uses it over ``soil_resistivity_ohm_m``; a two-layer soil
    needs ``bottom_resistivity_ohm_m`` and ``top_thickness_m``; ``local_resistivity_ohm_m``
    (else the top layer) serves the local quantities.
    """
    n = len(segments)
    top = np.full(n, float(default_ohm_m))
    bottom = np.full(n, np.nan)
    thick = np.full(n, np.nan)
    local = np.full(n, np.nan)
    soil = inputs.soil
    if soil is not None and len(soil):
        poly = value_at_midpoints(segments, soil.geometry.to_numpy(),
                                  np.arange(len(soil), dtype=float), -1.0).astype(np.int64)
        has = poly >= 0
        p = np.where(has, poly, 0)

        def column(name):
            if name not in soil:
                return np.full(n, np.nan)
            values = pd.to_numeric(soil[name], errors="coerce").to_numpy(float)
            return np.where(has, values[p], np.nan)

        hom = column("soil_resistivity_ohm_m")
        given_top = column("top_resistivity_ohm_m")
        top = np.where(np.isfinite(given_top), given_top,
                       np.where(np.isfinite(hom), hom, top))
        bottom = column("bottom_resistivity_ohm_m")
        thick = column("top_thickness_m")
        layered = np.isfinite(bottom) & np.isfinite(thick) & (thick > 0)
        bottom = np.where(layered, bottom, np.nan)
        thick = np.where(layered, thick, np.nan)
        local = column("local_resistivity_ohm_m")
    local = np.where(np.isfinite(local), local, top)
    return top, bottom, thick, local


def segment_frame(inputs: Inputs, geo: Geometry) -> gpd.GeoDataFrame:
    """The per-segment table with its geometry values."""
    seg = geo.segments
    assets = inputs.assets
    line_ids = inputs.lines["line_id"].to_numpy(dtype=object)
    near = geo.nearest
    has = near >= 0
    p = geo.pairs
    idx = np.where(has, near, 0)

    def pick(values, fill=np.nan):
        if len(p) == 0:
            return np.full(len(seg), fill)
        return np.where(has, values[idx], fill)

    in_reach = np.bincount(p.segment, minlength=len(seg)) if len(p) else np.zeros(len(seg), int)
    cls = np.where(has, CLASSES[p.exposure_class[idx]] if len(p) else "", "none")
    seg_in_asset = np.arange(len(seg)) - np.searchsorted(seg.feature, seg.feature)
    frame = pd.DataFrame({
        "asset_id": assets["asset_id"].to_numpy(dtype=object)[seg.feature],
        "asset_kind": assets["asset_kind"].to_numpy(dtype=object)[seg.feature],
        "part": seg.part,
        "segment_index": seg_in_asset,
        "chainage_m": seg.chainage_m,
        "length_m": seg.length_m,
        "line_id": np.where(has, line_ids[p.line[idx]] if len(p) else "", ""),
        "separation_m": pick(p.separation_m),
        "angle_deg": pick(p.angle_deg),
        "projected_length_m": pick(np.abs(p.projected_length_m)),
        "exposure_class": cls,
        "lines_in_reach": in_reach.astype(np.int64),
        # the local quantities' soil (docs/methods.md §9); the earth return's layers beside it
        "soil_resistivity_ohm_m": geo.local_resistivity_ohm_m,
        "top_resistivity_ohm_m": geo.soil_resistivity_ohm_m,
        "bottom_resistivity_ohm_m": geo.soil_bottom_resistivity_ohm_m,
        "top_thickness_m": geo.soil_top_thickness_m,
    })
    return gpd.GeoDataFrame(frame, geometry=seg.geometries(), crs=inputs.crs)


def exposure_frame(inputs: Inputs, geo: Geometry) -> gpd.GeoDataFrame:
    """One row per (asset, power line, continuous run)."""
    ex = geo.exposures
    assets = inputs.assets
    lines = inputs.lines
    frame = pd.DataFrame({
        "exposure_id": np.arange(len(ex), dtype=np.int64),
        "asset_id": assets["asset_id"].to_numpy(dtype=object)[ex.asset],
        "asset_kind": assets["asset_kind"].to_numpy(dtype=object)[ex.asset],
        "line_id": lines["line_id"].to_numpy(dtype=object)[ex.line],
        "line_voltage_kv": lines["voltage_kv"].to_numpy(float)[ex.line],
        "start_chainage_m": ex.start_chainage_m,
        "end_chainage_m": ex.end_chainage_m,
        "parallel_length_m": ex.parallel_length_m,
        "min_separation_m": ex.min_separation_m,
        "mean_separation_m": ex.mean_separation_m,
        "equivalent_separation_m": ex.equivalent_separation_m,
        "mean_angle_deg": ex.mean_angle_deg,
        "crossings": ex.n_crossings,
    })
    order = np.lexsort((frame["start_chainage_m"].to_numpy(), frame["line_id"].to_numpy(),
                        frame["asset_id"].to_numpy()))
    frame = frame.iloc[order].reset_index(drop=True)
    frame["exposure_id"] = np.arange(len(frame), dtype=np.int64)
    geoms = ex.geometry[order]
    return gpd.GeoDataFrame(frame, geometry=geoms, crs=inputs.crs)


def versions() -> dict[str, str]:
    """Versions of corridor and the libraries whose behaviour shapes its results."""
    import geopandas
    import pyogrio
    import pyproj
    import scipy

    return {
        "corridor": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "geopandas": geopandas.__version__,
        "shapely": shapely.__version__,
        "pyproj": pyproj.__version__,
        "pyogrio": pyogrio.__version__,
        "gdal": pyogrio.__gdal_version_string__,
        "geos": shapely.geos_version_string,
        "proj": pyproj.proj_version_str,
    }


def subset_inputs(inputs: Inputs, keep_asset: np.ndarray) -> Inputs:
    """The same inputs with only the assets where ``keep_asset`` is true.

    Per-asset results do not depend on which other assets are in the run, so
    a subset computes exactly the rows a full run gives for those assets.
    """
    import copy

    sub = copy.copy(inputs)
    sub.assets = inputs.assets[np.asarray(keep_asset, bool)].reset_index(drop=True)
    if inputs.grounds is not None:
        sub.grounds = inputs.grounds[inputs.grounds["asset_id"].isin(
            sub.assets["asset_id"])].reset_index(drop=True)
    from corridor.io.layers import Rejected

    sub.rejected = Rejected()
    return sub


def compute(cfg: Config, inputs: Inputs, stages: dict | None = None,
            step_log_level: int = logging.INFO) -> Run:
    """Exposure geometry and every per-asset stage, for any subset of the assets.

    ``step_log_level`` is the level of the per-step log messages (a partition
    of a larger run logs them at DEBUG and reports once when it is done)."""
    timings_s: dict[str, float] = {}
    with _Timer(timings_s, "expose", step_log_level):
        geometry = stage_geometry(cfg, inputs)
        segment_table = segment_frame(inputs, geometry)
        exposure_table = exposure_frame(inputs, geometry)
    run = Run(cfg, inputs, segment_table, exposure_table, geometry=geometry,
              timings_s=timings_s)
    for name, fn in (stages or {}).items():
        with _Timer(run.timings_s, name, step_log_level):
            fn(run)
    if getattr(cfg, "uncertainty", None) is not None and run.assessment is not None:
        from corridor.uncertainty.ensemble import stage_bands  # [uncertainty] (§16)

        with _Timer(run.timings_s, "bands", step_log_level):
            stage_bands(run)
    run.limits_table = limits_frame(run)
    run.counts["segments"] = len(geometry.segments)
    run.counts["pairs"] = len(geometry.pairs)
    run.counts["sections"] = len(geometry.sections)
    run.counts["exposures"] = len(geometry.exposures)
    return run


def limits_frame(run: Run) -> pd.DataFrame | None:
    """Per segment, the permitted value of each criterion the assess step judged it by.

    Taken from ``run.assessment["permitted"]`` (rows of ``run.segment_table`` as the
    per-asset stages left it); None when no assess step ran.
    """
    res = run.assessment
    t = run.segment_table
    if res is None or "permitted" not in res:
        return None
    frame = pd.DataFrame({"asset_id": t["asset_id"].to_numpy(dtype=object),
                          "segment_index": t["segment_index"].to_numpy(np.int64)})
    for name, values in res["permitted"].items():
        frame[f"permitted_{name}"] = np.broadcast_to(np.asarray(values, float), len(t))
    return frame


def finalize(run: Run, stages: dict | None = None, ranked=None) -> Run:
    """Run-wide steps on the per-asset results: ids, ranks, summary layers.

    Parameters
    ----------
    ranked : callable, optional
        ``ranked(run, later)``, called right after the stage named ``rank`` with the
        stages still to run (name -> function): the runner starts writing the
        segment layer there (:class:`corridor.io.write.EarlyLayers`).
    """
    inputs, t = run.inputs, run.segment_table
    from corridor.ordering import in_asset_order

    ids = pd.Index(inputs.assets["asset_id"].astype(str))
    if in_asset_order(t["asset_id"], ids, within=t["segment_index"].to_numpy()):
        t = t.reset_index(drop=True)  # merged runs arrive in order: no copy
    else:
        key = np.lexsort((t["segment_index"].to_numpy(), ids.get_indexer(t["asset_id"])))
        t = t.iloc[key].reset_index(drop=True)
    t.insert(0, "segment_id", np.arange(len(t), dtype=np.int64))
    run.segment_table = t
    items = list((stages or {}).items())
    for i, (name, fn) in enumerate(items):
        with _Timer(run.timings_s, name):
            fn(run)
        if name == "rank" and ranked is not None:
            ranked(run, dict(items[i + 1:]))
    if "bands" in run.extra_tables:
        from corridor.uncertainty.tables import add_band_columns  # [uncertainty] (§16)

        add_band_columns(run)
    run.counts.update(inputs.counts)
    run.counts["rejected"] = len(inputs.rejected.rows)
    return run
