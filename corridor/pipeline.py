"""The screening run: the one sequence every entry point calls.

:func:`screen` is the sequence of a run::

    read_inputs   io/layers.py: every layer, checked; rejected features listed
    asset_keys    keys.py: what each asset's results depend on, hashed
    plan          cache.py (unchanged assets from the cache) and partitions.py
                  (spatial partitions of whole assets, for the backend)
    compute       backends/ run compute() below on each partition: segment
                  geometry here, then the per-asset steps (couple, respond,
                  assess, ground in steps/)
    merge         partitions.merge: rows in full-run order, ids renumbered
    finalize      finalize() below: segment ids, the run-wide steps (rank,
                  summary layers)
    compare       changes.py: changes.csv against the previous run

The CLI and the step catalog reach it through :func:`corridor.runner.publish`
(lock, staging folder, writing through :mod:`corridor.io.write`, publish);
the cache (:func:`corridor.cache.incremental_compute`) and both backends
(:mod:`corridor.backends`) call :func:`compute` on pieces of whole assets
(:func:`subset_inputs`) and :func:`corridor.partitions.merge` to put them
together. Per-asset stages (segment geometry here, then couple, respond,
assess, ground in :mod:`corridor.steps`) run inside :func:`compute`;
run-wide stages (rank, summary tables) in :func:`finalize`. The typed
result that the outputs are written from is :class:`corridor.result.Result`.

Nothing here does physics itself: it turns
tables into arrays for :mod:`corridor.physics`, :mod:`corridor.network` and
:mod:`corridor.limits`, and writes their answers back into tables.
"""

from __future__ import annotations

import logging
import platform
import time
from dataclasses import dataclass, field
from pathlib import Path

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
from corridor.io.layers import Inputs, read_inputs

log = logging.getLogger(__name__)


@dataclass
class Geometry:
    """Asset segments and their exposure to the power lines."""

    segments: Segments
    edges: LineEdges
    pairs: Pairs
    sections: Sections
    pair_equivalent_separation_m: np.ndarray
    exposures: Exposures
    nearest: np.ndarray  # per segment: index into pairs, -1 where no line in reach
    soil_resistivity_ohm_m: np.ndarray  # per segment


@dataclass
class Run:
    """Everything one screening run produced, stage by stage."""

    config: Config
    inputs: Inputs | None = None
    geometry: Geometry | None = None
    segment_table: gpd.GeoDataFrame | None = None
    exposure_table: gpd.GeoDataFrame | None = None
    extra_tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    timings_s: dict[str, float] = field(default_factory=dict)
    counts: dict[str, int] = field(default_factory=dict)
    limit_set: object = None
    coupling: object = None
    response: object = None
    assessment: dict | None = None
    segment_table_after_grounding: gpd.GeoDataFrame | None = None
    #: Per-asset pair and section counts of a run merged from partitions or the
    #: cache, which keeps no :class:`Geometry` (``asset_id``, ``pairs``, ``sections``).
    asset_counts: pd.DataFrame | None = None
    #: Permitted value of every criterion on every segment, as the assess step found it
    #: (``asset_id``, ``segment_index``, ``permitted_<criterion>``): the report's profiles
    #: present it (:func:`limits_frame`); a per-asset table, cached and merged.
    limits_table: pd.DataFrame | None = None


class _Timer:
    def __init__(self, run: Run, name: str, level: int = logging.INFO):
        self.run, self.name, self.level = run, name, level

    def __enter__(self):
        self.t0 = time.perf_counter()
        log.log(self.level, "step %s ...", self.name)
        return self

    def __exit__(self, *exc):
        dt = time.perf_counter() - self.t0
        self.run.timings_s[self.name] = round(dt, 4)
        if exc[0] is None:
            log.log(self.level, "step %s done in %.2f s", self.name, dt)
        return False


def stage_geometry(cfg: Config, inputs: Inputs) -> Geometry:
    """Segment the assets and find their exposures to the power lines."""
    s = cfg.run
    segments = split_lines(inputs.assets.geometry.to_numpy(), s["segment_length_m"])
    edges = LineEdges.from_geometries(inputs.lines.geometry.to_numpy())
    pairs = find_pairs(segments, edges, s["screening_distance_m"], s["min_separation_m"],
                       s["parallel_angle_deg"])
    sections = split_sections(pairs, s["min_separation_m"], s["oblique_ratio"])
    eq = equivalent_separation(sections, len(pairs))
    exposures = build_exposures(pairs, segments, eq)
    if inputs.soil is not None:
        soil = value_at_midpoints(segments, inputs.soil.geometry.to_numpy(),
                                  inputs.soil["soil_resistivity_ohm_m"].to_numpy(float),
                                  s["default_soil_resistivity_ohm_m"])
    else:
        soil = np.full(len(segments), s["default_soil_resistivity_ohm_m"])
    return Geometry(segments, edges, pairs, sections, eq, exposures,
                    nearest_line(pairs, len(segments)), soil)


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
        "soil_resistivity_ohm_m": geo.soil_resistivity_ohm_m,
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
    run = Run(cfg, inputs=inputs)
    with _Timer(run, "expose", step_log_level):
        run.geometry = stage_geometry(cfg, inputs)
        run.segment_table = segment_frame(inputs, run.geometry)
        run.exposure_table = exposure_frame(inputs, run.geometry)
    for name, fn in (stages or {}).items():
        with _Timer(run, name, step_log_level):
            fn(run)
    run.limits_table = limits_frame(run)
    run.counts["segments"] = len(run.geometry.segments)
    run.counts["pairs"] = len(run.geometry.pairs)
    run.counts["sections"] = len(run.geometry.sections)
    run.counts["exposures"] = len(run.geometry.exposures)
    return run


def limits_frame(run: Run) -> pd.DataFrame | None:
    """Per segment, the permitted value of each criterion the assess step judged it by.

    Taken from ``run.assessment["permitted"]`` (rows of ``run.segment_table`` as the
    per-asset stages left it); None when no assess step ran.
    """
    res = run.assessment
    t = run.segment_table
    if not isinstance(res, dict) or "permitted" not in res or t is None:
        return None
    frame = pd.DataFrame({"asset_id": t["asset_id"].to_numpy(dtype=object),
                          "segment_index": t["segment_index"].to_numpy(np.int64)})
    for name, values in res["permitted"].items():
        frame[f"permitted_{name}"] = np.broadcast_to(np.asarray(values, float), len(t))
    return frame


def finalize(run: Run, stages: dict | None = None) -> Run:
    """Run-wide steps on the per-asset results: ids, ranks, summary layers."""
    ids = pd.Index(run.inputs.assets["asset_id"].astype(str))
    t = run.segment_table
    key = np.lexsort((t["segment_index"].to_numpy(), ids.get_indexer(t["asset_id"])))
    if np.array_equal(key, np.arange(len(t))):  # merged runs arrive in order: no copy
        t = t.reset_index(drop=True)
    else:
        t = t.iloc[key].reset_index(drop=True)
    t.insert(0, "segment_id", np.arange(len(t), dtype=np.int64))
    run.segment_table = t
    for name, fn in (stages or {}).items():
        with _Timer(run, name):
            fn(run)
    run.counts.update(run.inputs.counts)
    run.counts["rejected"] = len(run.inputs.rejected.rows)
    return run


def run_screening(cfg: Config, stages: dict | None = None,
                  final_stages: dict | None = None) -> Run:
    """Read, compute every asset, finalize (no writing)."""
    t0 = time.perf_counter()
    inputs = read_inputs(cfg)
    read_s = round(time.perf_counter() - t0, 4)
    run = compute(cfg, inputs, stages)
    run.timings_s = {"read": read_s, **run.timings_s}
    return finalize(run, final_stages)


# -- the one sequence: read -> plan partitions -> compute -> merge -> finalize -> compare

def cache_folder(cfg: Config, out_dir: Path) -> Path | None:
    """The cache folder of a run (``run.cache_dir``), or None for no cache."""
    value = str(cfg.run.get("cache_dir", "auto"))
    if value == "":
        return None
    if value == "auto":
        return out_dir.parent / f"{out_dir.name}.cache"
    return (cfg.path.parent / value).resolve()


#: Fields whose filled-in defaults run.json lists by feature id (safety relevant).
DEFAULT_IDS_LISTED = ("fault_current_start_ka", "fault_current_end_ka", "clearing_time_s",
                      "post_type", "coating_resistance_ohm_m2", "coating_type",
                      "start_termination", "end_termination")


def _row_role(row: dict, cfg: Config, asset_labels: set[str]) -> str:
    role = row.get("role")
    if role:
        return "power_lines" if role == "power_lines" else (
            "assets" if role == "assets" else "other")
    if row.get("layer") == cfg.power_lines.label:
        return "power_lines"
    return "assets" if row.get("layer") in asset_labels else "other"


def rejected_summary(cfg: Config, inputs) -> dict:
    """Rejected features of a run split by role.

    Returns
    -------
    dict
        ``counts``: ``rejected_power_lines``, ``rejected_assets``,
        ``rejected_other`` (features, each counted once); ``power_lines``:
        ``[{"line_id", "field", "reason"}]`` for run.json; ``assets`` and
        ``other``: the rejected rows of those roles.
    """
    asset_labels = {a.label for a in cfg.assets}
    parts: dict[str, list[dict]] = {"power_lines": [], "assets": [], "other": []}
    for row in inputs.rejected.rows:
        parts[_row_role(row, cfg, asset_labels)].append(row)

    def features(rows):
        return len({(r.get("layer"), r.get("feature_id")) for r in rows})

    return {"counts": {"rejected_power_lines": features(parts["power_lines"]),
                       "rejected_assets": features(parts["assets"]),
                       "rejected_other": features(parts["other"])},
            "power_lines": [{"line_id": str(r["feature_id"]), "field": str(r["field"]),
                             "reason": str(r["reason"])} for r in parts["power_lines"]],
            "assets": parts["assets"], "other": parts["other"]}


def defaults_used_record(inputs) -> dict:
    """run.json's ``defaults_used``: field -> count, with ids for the safety-relevant fields."""
    used = getattr(inputs, "defaults_used", None) or {}
    out = {}
    for fld, ids in sorted(used.items()):
        ids = [str(i) for i in ids]
        entry: dict = {"count": len(ids)}
        if fld in DEFAULT_IDS_LISTED:
            entry["ids"] = ids
        out[fld] = entry
    return out


def screen(cfg: Config, out_dir: Path, stages: dict | None = None,
           final_stages: dict | None = None) -> Run:
    """Read, compute (incrementally when a cache is configured), finalize, compare."""
    from corridor import backends, progress
    from corridor import cache as cache_mod
    from corridor import changes as changes_mod
    from corridor import keys as keys_mod
    from corridor.io.layers import read_inputs

    compute_fn = backends.compute_function(cfg, out_dir.parent)
    total = 5
    progress.stage("read", 1, total)
    t0 = time.perf_counter()
    inputs = read_inputs(cfg)
    read_s = round(time.perf_counter() - t0, 4)
    rejected = rejected_summary(cfg, inputs)
    if len(inputs.assets) == 0:
        from corridor.errors import InputError

        raise InputError(["asset layers: no usable asset features; every one was rejected:"]
                         + [f"layer {r['layer']}: feature {r['feature_id']}: field"
                            f" '{r['field']}': {r['reason']}" for r in inputs.rejected.rows])
    progress.stage("compute", 2, total)
    t1 = time.perf_counter()
    keys = keys_mod.asset_keys(cfg, inputs)
    hash_s = round(time.perf_counter() - t1, 4)
    folder = cache_folder(cfg, out_dir)
    if folder is not None:
        with cache_mod.locked(folder) as usable:  # None: cache unusable, warned
            run = backends.incremental_compute(cache_mod, cfg, inputs, stages, usable, keys,
                                               compute_fn)
    else:
        run = compute_fn(cfg, inputs, stages)
        run.counts["assets_recomputed"] = len(inputs.assets)
        run.counts["assets_from_cache"] = 0
    run.timings_s = {"read": read_s, "hash": hash_s, **run.timings_s}
    run.counts.update(rejected["counts"])
    progress.stage("finalize", 3, total)
    finalize(run, final_stages)
    run.counts["assets_recomputed"] = int(run.counts.get("assets_recomputed", 0))
    progress.stage("compare", 4, total)
    state = changes_mod.inputs_state(run, keys)
    previous = changes_mod.read_previous(out_dir)
    frame, summary = changes_mod.compare(run, keys, state, previous,
                                         float(cfg.run.get("change_threshold", 0.1)))
    run.extra_tables["csv:changes.csv"] = frame
    extra_json = dict(run.extra_tables.get("json", {}))
    extra_json["changes"] = summary
    extra_json["inputs_state"] = state
    extra_json["rejected_power_lines"] = rejected["power_lines"]
    extra_json["defaults_used"] = defaults_used_record(inputs)
    run.extra_tables["json"] = extra_json
    progress.stage("write", 5, total)
    return run


