"""The screening as named processing steps, each runnable on its own.

read -> segment -> expose -> couple -> respond -> assess -> ground -> rank -> report

Every step declares its typed inputs, outputs and parameters
(:class:`StepSpec`, :class:`Param`): enough for ``corridor steps`` to list
them and for a desktop GIS processing framework to wrap them in a thin
adapter. Parameters are run settings (``[run]`` in the config); their type,
unit, default, meaning and range come from :data:`corridor.config.RUN_SETTINGS`.

How a step runs (:func:`run_step`)
----------------------------------
A step reads the config's input layers, runs the pipeline in memory up to
and including itself, and writes its declared outputs into the output folder:
its layers into ``<step>.gpkg`` (one GeoPackage layer per output), tables as
CSV (with the safety caution as the last column) and a ``<step>.json``
record (config, parameters, counts, timings). ``report`` is the whole run:
it publishes exactly what ``corridor run`` writes.

Two steps can instead start from a saved ``segments`` layer
(``inputs={"segments": path}``, CLI ``--in segments=PATH``):

- ``assess`` needs the columns of a ``respond`` (or later) segments layer:
  ``asset_kind``, ``soil_resistivity_ohm_m``, ``clearing_time_s``,
  ``high_reliability`` and the quantities judged (``v_normal_v``,
  ``v_touch_fault_v``, …; a missing quantity leaves its criteria
  unassessed). Per-asset categories (``coating_type``) come from a
  ``coating_type`` column if the layer has one; otherwise each criterion by
  category takes its strictest value.
- ``rank`` needs a ``utilization`` column (an ``assess`` or later layer);
  without it, the layer is assessed first as above.

Every other step recomputes what it needs from the config's layers.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np

from corridor.errors import ConfigError, CorridorError

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Param:
    """One typed input, output or parameter of a step.

    Attributes
    ----------
    name : str
        Name (a run setting for parameters, a layer or table name otherwise).
    type : str
        Parameters: ``float``, ``int``, ``bool``, ``str``, ``path``,
        ``float_list`` or ``str_list``. Inputs and outputs: ``line_layer``,
        ``point_layer``, ``polygon_layer`` (vector layers), ``table`` (CSV),
        ``file``.
    unit : str
        Unit of a value (``m``, ``Hz``, ``Ω·m``, ``-``), or ``-``.
    default : object
        Default value; ``None`` for an input taken from the config.
    description : str
        Meaning (and provenance of the default).
    low, high : float or None
        Inclusive valid range of a number.
    optional : bool
        An input or output that may be absent (e.g. no soil layer).
    """

    name: str
    type: str
    unit: str
    default: Any
    description: str
    low: float | None = None
    high: float | None = None
    optional: bool = False


@dataclass(frozen=True)
class StepSpec:
    """A named processing step.

    Attributes
    ----------
    name, title, description : str
        Plain name (CLI and API), a title and what the step does.
    inputs, outputs, parameters : tuple of Param
    run : callable
        ``run(ctx: StepContext) -> dict`` of output name -> table (internal).
    from_saved : tuple of str
        Inputs the step may start from instead of recomputing (``segments``).
    """

    name: str
    title: str
    description: str
    inputs: tuple[Param, ...]
    outputs: tuple[Param, ...]
    parameters: tuple[Param, ...]
    run: Callable
    from_saved: tuple[str, ...] = ()


class StepCancelled(CorridorError):
    """The caller's ``cancel()`` returned true between two stages."""


_PARAM_TYPES = {float: "float", int: "int", bool: "bool", str: "str"}


def setting_param(name: str) -> Param:
    """A :class:`Param` from the run setting ``name`` in ``RUN_SETTINGS``."""
    from corridor.config import RUN_SETTINGS

    typ, unit, default, doc, rng = RUN_SETTINGS[name]
    if typ is list:
        kind = "float_list" if all(isinstance(v, int | float) for v in default) else "str_list"
    elif unit == "path":
        kind = "path"
    else:
        kind = _PARAM_TYPES[typ]
    low, high = rng if rng is not None else (None, None)
    return Param(name, kind, unit, default, doc, low, high)


def _settings(*names: str) -> tuple[Param, ...]:
    return tuple(setting_param(n) for n in names)


# --------------------------------------------------------------------------
# Declared inputs and outputs
# --------------------------------------------------------------------------
_CONFIG_LAYERS = (
    Param("power_lines", "line_layer", "-", None, "Power lines ([layers.power_lines])."),
    Param("assets", "line_layer", "-", None, "Asset layers ([[layers.assets]])."),
    Param("soil", "polygon_layer", "-", None, "Soil resistivity polygons ([layers.soil]).",
          optional=True),
    Param("grounds", "point_layer", "-", None, "Existing grounds and series breaks"
          " ([layers.grounds]).", optional=True),
    Param("towers", "point_layer", "-", None, "Towers ([layers.towers]).", optional=True),
)
_SAVED_SEGMENTS = Param("segments", "line_layer", "-", None, "A saved segments layer to start"
                        " from instead of recomputing (see the module notes for the columns).",
                        optional=True)


def _seg_out(what: str) -> Param:
    return Param("segments", "line_layer", "-", None, f"Asset segments with {what}.")


_OUT = {
    "read": (
        Param("lines", "line_layer", "-", None, "Power lines, canonical fields, run CRS."),
        Param("assets", "line_layer", "-", None, "Assets, canonical fields and kind defaults,"
              " run CRS."),
        Param("soil", "polygon_layer", "-", None, "Soil polygons, run CRS.", optional=True),
        Param("grounds", "point_layer", "-", None, "Grounds and breaks, run CRS.",
              optional=True),
        Param("towers", "point_layer", "-", None, "Towers, run CRS.", optional=True),
        Param("rejected", "table", "-", None, "Input features that could not be used."),
    ),
    "segment": (_seg_out("identity, chainage_m and length_m"),),
    "expose": (
        Param("exposures", "line_layer", "-", None, "One row per (asset, power line,"
              " continuous run) with parallel length and separations."),
        _seg_out("the nearest line, separation, angle, class and soil"),
    ),
    "couple": (_seg_out("the coupling: emf_normal_v, emf_fault_v (before a telecom sheath's"
                        " screening factor) [V], fault_current_ka [kA],"
                        " earth_potential_fault_v [V], i_capacitive_source_ma [mA]"),),
    "respond": (_seg_out("voltages and currents along the assets (README: segments)"),),
    "assess": (_seg_out("ratio_<criterion>, utilization, governing and hazard_class"),),
    "ground": (
        Param("sites", "point_layer", "-", None, "Proposed grounding sites."),
        Param("grounding_sites", "table", "-", None, "The sites without geometry: the work"
              " list."),
        _seg_out("the state after the proposed grounding"),
    ),
    "rank": (_seg_out("rank (1 = worst of the run)"),),
    "report": (
        Param("screening", "file", "-", None, "Everything `corridor run` writes:"
              " screening.gpkg, CSVs, run.json, report.html."),
    ),
}


# --------------------------------------------------------------------------
# Running
# --------------------------------------------------------------------------
@dataclass
class StepContext:
    """What a step's ``run`` gets: the config (with parameters applied) and hooks."""

    config: Any
    inputs: Mapping[str, Path]
    outputs_dir: Path
    progress: Callable[[float, str], None]
    cancel: Callable[[], bool]


def _check(ctx: StepContext, fraction: float, message: str) -> None:
    if ctx.cancel():
        raise StepCancelled(f"cancelled before {message}")
    ctx.progress(fraction, message)


def _read(ctx):
    from corridor.io.layers import read_inputs

    _check(ctx, 0.0, "read")
    return read_inputs(ctx.config)


_ASSET_ORDER = ("couple", "respond", "assess", "ground")


def _compute_through(ctx: StepContext, last: str | None, before_finalize=None):
    """Read and compute the per-asset stages up to ``last`` (None: geometry only).

    ``before_finalize(run)`` may add columns while the segment table is still
    in compute order (the order of the per-segment arrays on the run).
    """
    from corridor.pipeline import compute, finalize
    from corridor.steps import asset_stages

    inputs = _read(ctx)
    stages = {}
    wanted = _ASSET_ORDER[:_ASSET_ORDER.index(last) + 1] if last else ()
    all_stages = asset_stages()
    n = len(wanted) + 2
    for i, name in enumerate(wanted):
        fn = all_stages[name]

        def wrapped(run, fn=fn, i=i, name=name):
            _check(ctx, (i + 2) / n, name)
            fn(run)

        stages[name] = wrapped
    _check(ctx, 1 / n, "expose")
    run = compute(ctx.config, inputs, stages)
    if before_finalize is not None:
        before_finalize(run)
    return finalize(run, {})  # segment ids in run order, no run-wide stages


def _layers(run) -> dict:
    return {"exposures": run.exposure_table, "segments": run.segment_table}


def _run_read(ctx):
    inputs = _read(ctx)
    out = {"lines": inputs.lines, "assets": inputs.assets, "rejected": inputs.rejected.frame()}
    for role in ("soil", "grounds", "towers"):
        frame = getattr(inputs, role)
        if frame is not None:
            out[role] = frame
    return out, inputs.counts


def _run_segment(ctx):
    import geopandas as gpd
    import pandas as pd

    from corridor.geometry.segments import split_lines

    inputs = _read(ctx)
    _check(ctx, 0.5, "segment")
    seg = split_lines(inputs.assets.geometry.to_numpy(), ctx.config.run["segment_length_m"])
    assets = inputs.assets
    frame = pd.DataFrame({
        "segment_id": np.arange(len(seg), dtype=np.int64),
        "asset_id": assets["asset_id"].to_numpy(dtype=object)[seg.feature],
        "asset_kind": assets["asset_kind"].to_numpy(dtype=object)[seg.feature],
        "part": seg.part,
        "segment_index": np.arange(len(seg)) - np.searchsorted(seg.feature, seg.feature),
        "chainage_m": seg.chainage_m,
        "length_m": seg.length_m,
    })
    layer = gpd.GeoDataFrame(frame, geometry=seg.geometries(), crs=inputs.crs)
    return {"segments": layer}, {"assets": len(assets), "segments": len(seg)}


def _run_expose(ctx):
    run = _compute_through(ctx, None)
    return _layers(run), dict(run.counts)


def _coupling_columns(run) -> None:
    t = run.segment_table
    cp = run.coupling
    emf_n = np.abs(cp.segment_emf_normal_v)
    emf_f = np.zeros(len(t))
    if len(cp.fault_seg):
        np.maximum.at(emf_f, cp.fault_seg, np.abs(cp.fault_emf_v))
    km = t["length_m"].to_numpy(float) / 1000.0
    t["emf_normal_v_per_km"] = emf_n / km
    t["emf_normal_v"] = emf_n
    t["emf_fault_v_per_km"] = emf_f / km
    t["emf_fault_v"] = emf_f
    t["fault_current_ka"] = cp.segment_fault_current_a / 1000.0
    t["earth_potential_fault_v"] = cp.earth_potential_fault_v
    t["i_capacitive_source_ma"] = np.abs(cp.capacitive_current_a) * 1000.0


def _run_couple(ctx):
    run = _compute_through(ctx, "couple", before_finalize=_coupling_columns)
    return {"segments": run.segment_table}, dict(run.counts)


def _run_respond(ctx):
    run = _compute_through(ctx, "respond")
    return {"segments": run.segment_table}, dict(run.counts)


def _saved_segments(ctx):
    import pyogrio

    path = Path(ctx.inputs["segments"])
    if not path.exists():
        raise ConfigError(f"--in segments={path}: file not found")
    layers = [str(x) for x in pyogrio.list_layers(path)[:, 0]]
    layer = "segments" if "segments" in layers else layers[0]
    try:
        return pyogrio.read_dataframe(path, layer=layer, use_arrow=True)
    except Exception as exc:  # GDAL's own errors; the file is the user's
        raise ConfigError(f"--in segments={path}: cannot read layer {layer!r}: {exc}") from None


_ASSESS_COLUMNS = ("asset_kind", "soil_resistivity_ohm_m", "clearing_time_s",
                   "high_reliability", "v_normal_v")


def _assess_saved(ctx, table):
    from corridor.limits.limit_sets import load_limit_set
    from corridor.steps import LIMITS_DIR
    from corridor.steps.assess import assess

    missing = [c for c in _ASSESS_COLUMNS if c not in table.columns]
    if missing:
        raise ConfigError(f"--in segments: the layer lacks {', '.join(missing)}; save it from"
                          " the respond step (or later)")
    cfg = ctx.config
    limit_set = load_limit_set(cfg.run["limit_set"], dict(cfg.limit_overrides) or None,
                               search_dir=LIMITS_DIR)
    cats = {}
    if "coating_type" in table.columns:
        cats["coating_type"] = table["coating_type"].fillna("").astype(str).to_numpy()
    table = table.copy()
    table["high_reliability"] = table["high_reliability"].fillna(False).astype(bool)
    res = assess(limit_set, table, cats)
    table["ac_density_a_per_m2"] = res["quantities"]["ac_density_a_per_m2"]
    for name, ratio in res["ratios"].items():
        table[f"ratio_{name}"] = ratio
    table["utilization"] = res["utilization"]
    table["governing"] = res["governing"]
    table["hazard_class"] = res["hazard_class"]
    return table, limit_set


def _run_assess(ctx):
    if "segments" in ctx.inputs:
        _check(ctx, 0.0, "read saved segments")
        t = _saved_segments(ctx)
        _check(ctx, 0.5, "assess")
        t, _ = _assess_saved(ctx, t)
        return {"segments": t}, {"segments": len(t),
                                 "segments_exceeding": int((t["utilization"] >= 1).sum())}
    run = _compute_through(ctx, "assess")
    return {"segments": run.segment_table}, dict(run.counts)


def _run_ground(ctx):
    run = _compute_through(ctx, "ground")
    sites = run.extra_tables.get("layer:sites")
    after = run.segment_table_after_grounding
    out = {"segments": after if after is not None else run.segment_table}
    if sites is not None:
        out["sites"] = sites
        out["grounding_sites"] = sites.drop(columns="geometry", errors="ignore")
    return out, dict(run.counts)


def _rank_table(t):
    from corridor.pipeline import Run
    from corridor.steps import stage_rank

    class _Cfg:  # stage_rank only reads the table and the (already loaded) limit set
        pass

    run = Run(config=_Cfg())
    run.limit_set = object()
    run.segment_table = t
    stage_rank(run)
    return run.segment_table, run.counts


def _run_rank(ctx):
    if "segments" in ctx.inputs:
        _check(ctx, 0.0, "read saved segments")
        t = _saved_segments(ctx)
        if "utilization" not in t.columns:
            _check(ctx, 0.3, "assess")
            t, _ = _assess_saved(ctx, t)
        _check(ctx, 0.7, "rank")
        t, counts = _rank_table(t.copy())
        return {"segments": t}, {"segments": len(t), **counts}
    run = _compute_through(ctx, "ground")
    _check(ctx, 0.95, "rank")
    from corridor.steps import stage_rank

    stage_rank(run)
    return {"segments": run.segment_table}, dict(run.counts)


def _run_report(ctx):
    from corridor.runner import publish
    from corridor.steps import asset_stages, run_stages

    _check(ctx, 0.0, "report")
    run = publish(ctx.config, ctx.outputs_dir, asset_stages(), run_stages())
    return {}, dict(run.counts)


STEPS: dict[str, StepSpec] = {}


def _add(name, title, description, parameters, run, inputs=_CONFIG_LAYERS, from_saved=()):
    STEPS[name] = StepSpec(name, title, description, tuple(inputs), _OUT[name],
                           _settings(*parameters), run, tuple(from_saved))


_add("read", "Read layers", "Read, validate and reproject the config's layers; apply field"
     " mappings and kind defaults; list rejected features.",
     ("crs", "use_kind_defaults"), _run_read)
_add("segment", "Segment assets", "Split every asset into segments of at most"
     " segment_length_m.", ("crs", "use_kind_defaults", "segment_length_m"), _run_segment)
_GEOM = ("crs", "use_kind_defaults", "segment_length_m", "screening_distance_m",
         "min_separation_m", "parallel_angle_deg", "oblique_ratio",
         "default_soil_resistivity_ohm_m")
_add("expose", "Find exposures", "Nearest line, separation, angle and class per segment;"
     " ITU-T oblique sections; exposures per (asset, line).", _GEOM, _run_expose)
_COUPLE = ("frequency_hz", "tower_span_m", "tower_zone_m", "tower_zone_threshold_v",
           "tower_current_share", "footing_radius_m")
_add("couple", "Coupling", "Induced EMF (normal load, worst earth fault), capacitive"
     " pickup and earth potential near towers per segment.", _GEOM + _COUPLE, _run_couple)
_add("respond", "Asset response", "Voltage to earth and current along every asset from its"
     " line constants, terminations, grounds and breaks.", _GEOM + _COUPLE, _run_respond)
_add("assess", "Assess against limits", "Ratios to the limit set, utilization, governing"
     " criterion and hazard class per segment.", _GEOM + _COUPLE + ("limit_set",),
     _run_assess, inputs=(*_CONFIG_LAYERS, _SAVED_SEGMENTS), from_saved=("segments",))
_GROUND = ("grounding_menu_ohm", "max_sites_per_asset")
_add("ground", "Design grounding", "Grounding sites at governing peaks, re-solved until the"
     " limits hold or max_sites_per_asset is reached.",
     _GEOM + _COUPLE + ("limit_set",) + _GROUND, _run_ground)
_add("rank", "Rank segments", "Rank 1 is the worst segment of the run; ties by asset id,"
     " then chainage.", _GEOM + _COUPLE + ("limit_set",) + _GROUND, _run_rank,
     inputs=(*_CONFIG_LAYERS, _SAVED_SEGMENTS), from_saved=("segments",))
_add("report", "Write the screening", "The whole run, published as `corridor run` does:"
     " screening.gpkg, CSVs, run.json, report.html.",
     _GEOM + _COUPLE + ("limit_set",) + _GROUND + ("output_formats", "cache_dir",
                                                   "change_threshold"), _run_report)


def step_names() -> tuple[str, ...]:
    """The steps in run order."""
    return tuple(STEPS)


def get_step(name: str) -> StepSpec:
    """The :class:`StepSpec` called ``name``; ConfigError listing the steps if unknown."""
    try:
        return STEPS[name]
    except KeyError:
        raise ConfigError(f"unknown step {name!r} (steps: {', '.join(STEPS)})") from None


def convert_parameter(p: Param, value) -> Any:
    """``value`` (typed, or a string from the command line) checked against ``p``.

    Raises
    ------
    ConfigError
        Wrong type or outside ``[p.low, p.high]``.
    """
    where = f"parameter {p.name}"
    try:
        if isinstance(value, str):
            s = value.strip()
            if p.type == "float":
                value = float(s)
            elif p.type == "int":
                value = int(s)
            elif p.type == "bool":
                if s.lower() not in ("true", "false", "1", "0", "yes", "no"):
                    raise ValueError(s)
                value = s.lower() in ("true", "1", "yes")
            elif p.type == "float_list":
                value = [float(v) for v in s.strip("[]").split(",") if v.strip()]
            elif p.type == "str_list":
                value = [v.strip().strip("'\"") for v in s.strip("[]").split(",") if v.strip()]
        elif p.type == "float" and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
    except ValueError:
        raise ConfigError(f"{where}: {value!r} is not a {p.type} [{p.unit}]") from None
    ok = {"float": lambda v: isinstance(v, float),
          "int": lambda v: isinstance(v, int) and not isinstance(v, bool),
          "bool": lambda v: isinstance(v, bool),
          "str": lambda v: isinstance(v, str), "path": lambda v: isinstance(v, str),
          "float_list": lambda v: isinstance(v, list) and bool(v) and all(
              isinstance(x, int | float) and not isinstance(x, bool) and x > 0 for x in v),
          "str_list": lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v)}
    if not ok[p.type](value):
        raise ConfigError(f"{where}: expected {p.type} [{p.unit}], got {value!r}")
    if p.type == "float_list":
        value = [float(v) for v in value]
    if p.low is not None and not (p.low <= value <= p.high):
        raise ConfigError(f"{where}: {value} [{p.unit}] outside the valid range"
                          f" {p.low}..{p.high}")
    return value


def _apply(cfg, spec: StepSpec, params: Mapping[str, Any]):
    if not params:
        return cfg
    from corridor.registry import registry

    known = {p.name: p for p in spec.parameters}
    problems, run = [], dict(cfg.run)
    for key, value in params.items():
        if key not in known:
            problems.append(f"parameter {key}: not a parameter of step {spec.name}"
                            f" (parameters: {', '.join(known) or 'none'})")
            continue
        try:
            run[key] = convert_parameter(known[key], value)
        except ConfigError as exc:
            problems.extend(exc.problems)
    if problems:
        raise ConfigError(problems)
    if run.get("crs") and "crs" in params:
        from pyproj import CRS

        try:
            projected = CRS.from_user_input(run["crs"]).is_projected
        except Exception:  # pyproj's CRSError; any failure is the user's value
            projected = None
        if not projected:
            raise ConfigError(f"parameter crs: {run['crs']!r} is not a projected (metric) CRS"
                              " pyproj understands")
    if "limit_set" in params:
        run["limit_set"] = registry.resolve_limit_set(run["limit_set"])
    resolved = dict(cfg.resolved)
    resolved["run"] = run
    return replace(cfg, run=MappingProxyType(run), resolved=MappingProxyType(resolved))


def _write(outputs: dict, spec: StepSpec, out_dir: Path) -> dict[str, Path]:
    from corridor.io.outputs import write_csv, write_layer

    out_dir.mkdir(parents=True, exist_ok=True)
    gpkg = out_dir / f"{spec.name}.gpkg"
    if gpkg.exists():
        gpkg.unlink()
    written: dict[str, Path] = {}
    for p in spec.outputs:
        frame = outputs.get(p.name)
        if frame is None:
            continue
        if p.type.endswith("_layer"):
            write_layer(frame, gpkg, p.name)
            written[p.name] = gpkg
        elif p.type == "table":
            path = out_dir / f"{p.name}.csv"
            write_csv(frame.drop(columns="geometry", errors="ignore"), path)
            written[p.name] = path
    return written


def run_step(name: str, config_path: str | Path, inputs: Mapping[str, str | Path] | None = None,
             outputs_dir: str | Path | None = None, params: Mapping[str, Any] | None = None,
             progress: Callable[[float, str], None] | None = None,
             cancel: Callable[[], bool] | None = None) -> dict[str, Path]:
    """Run one step and write its declared outputs.

    Parameters
    ----------
    name : str
        A step of :func:`step_names`.
    config_path : str or Path
        The run's TOML file; its layers are the step's inputs.
    inputs : mapping, optional
        ``{"segments": path}`` to start ``assess`` or ``rank`` from a saved
        segments layer (a GeoPackage with a ``segments`` layer, or any
        single-layer vector file).
    outputs_dir : str or Path, optional
        Output folder; default ``<run.output_dir>/steps``. ``report``
        publishes into it exactly as ``corridor run --out`` does.
    params : mapping, optional
        Run settings of the step (see its ``parameters``), typed values or
        strings; they override the config's ``[run]``.
    progress : callable, optional
        ``progress(fraction, message)`` before each stage; fraction in [0, 1].
    cancel : callable, optional
        Checked before each stage; when it returns true the step raises
        :class:`StepCancelled` and writes nothing.

    Returns
    -------
    dict
        Output name -> file written (layers share ``<step>.gpkg``), plus
        ``record`` -> ``<step>.json``.

    Raises
    ------
    ConfigError, InputError
        Bad config, parameter or input; nothing is written.
    """
    from corridor.config import load_config
    from corridor.io.outputs import write_json
    from corridor.pipeline import versions

    spec = get_step(name)
    cfg = _apply(load_config(config_path), spec, dict(params or {}))
    inputs = {k: Path(v) for k, v in (inputs or {}).items()}
    for key in inputs:
        if key not in spec.from_saved:
            can = [s.name for s in STEPS.values() if key in s.from_saved]
            raise ConfigError(f"step {name}: cannot start from a saved {key!r} layer; it reads"
                              f" the config's layers (steps that can: {', '.join(can)})")
    out_dir = Path(outputs_dir) if outputs_dir is not None else cfg.output_dir / "steps"
    out_dir = out_dir.resolve()
    ctx = StepContext(cfg, MappingProxyType(inputs), out_dir,
                      progress or (lambda fraction, message: None), cancel or (lambda: False))
    t0 = time.perf_counter()
    outputs, counts = spec.run(ctx)
    _check(ctx, 1.0, "write")
    if spec.name == "report":
        written = {"screening": out_dir}
    else:
        written = _write(outputs, spec, out_dir)
        record = {"step": spec.name, "config_file": str(cfg.path),
                  "inputs": {k: str(v) for k, v in inputs.items()},
                  "parameters": {p.name: cfg.run[p.name] for p in spec.parameters},
                  "counts": counts, "elapsed_s": round(time.perf_counter() - t0, 3),
                  "outputs": {k: str(v) for k, v in written.items()}, "versions": versions()}
        written["record"] = out_dir / f"{spec.name}.json"
        write_json(record, written["record"])
    log.info("step %s: wrote %s", spec.name, ", ".join(sorted(set(map(str, written.values())))))
    return written


def describe() -> list[dict]:
    """Every step as plain data (for listings and adapters)."""
    def plain(p: Param) -> dict:
        return {"name": p.name, "type": p.type, "unit": p.unit, "default": p.default,
                "description": p.description, "low": p.low, "high": p.high,
                "optional": p.optional}

    return [{"name": s.name, "title": s.title, "description": s.description,
             "inputs": [plain(p) for p in s.inputs], "outputs": [plain(p) for p in s.outputs],
             "parameters": [plain(p) for p in s.parameters], "from_saved": list(s.from_saved)}
            for s in STEPS.values()]
