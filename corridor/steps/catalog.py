"""The screening as named processing steps, each runnable on its own.

read -> segment -> expose -> couple -> respond -> assess -> ground -> rank -> report

Every step declares its typed inputs, outputs and parameters
(:class:`StepSpec`): enough for ``corridor steps`` to list them and for a
desktop GIS processing framework to wrap them in a thin adapter. Everything is
declared with the one spec of :mod:`corridor.settings`: parameters are run
settings (``[run]`` in the config), each the setting's own
:class:`corridor.settings.Spec` from :data:`corridor.settings.RUN_SETTINGS`
(type, unit, default, range, meaning), which also parses and checks
``--set KEY=VALUE``; inputs and outputs are :class:`corridor.settings.DataSpec`
(the same spec with a data kind, ``line_layer`` .. ``file``, and ``optional``),
which checks a path given for a saved input. The step bodies are in
:mod:`corridor.steps.step_runs`.

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
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import Any

from corridor.errors import ConfigError
from corridor.settings import RUN_SETTINGS, DataSpec, Spec
from corridor.steps.step_runs import (
    StepCancelled,
    StepContext,
    _check,
    _run_assess,
    _run_couple,
    _run_expose,
    _run_ground,
    _run_rank,
    _run_read,
    _run_report,
    _run_respond,
    _run_segment,
)

__all__ = ["DataSpec", "StepSpec", "StepCancelled", "STEPS", "step_names", "get_step",
           "run_step", "describe", "convert_parameter", "setting_param"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class StepSpec:
    """A named processing step.

    Attributes
    ----------
    name, title, description : str
        Plain name (CLI and API), a title and what the step does.
    inputs, outputs : tuple of DataSpec
        The layers, tables and files the step reads and writes.
    parameters : tuple of Spec
        The run settings the step uses.
    run : callable
        ``run(ctx: StepContext) -> dict`` of output name -> table (internal).
    from_saved : tuple of str
        Inputs the step may start from instead of recomputing (``segments``).
    """

    name: str
    title: str
    description: str
    inputs: tuple[DataSpec, ...]
    outputs: tuple[DataSpec, ...]
    parameters: tuple[Spec, ...]
    run: Callable
    from_saved: tuple[str, ...] = ()


def setting_param(name: str) -> Spec:
    """The :class:`corridor.settings.Spec` of run setting ``name``."""
    return RUN_SETTINGS[name]


def _settings(*names: str) -> tuple[Spec, ...]:
    return tuple(setting_param(n) for n in names)


# --------------------------------------------------------------------------
# Declared inputs and outputs
# --------------------------------------------------------------------------
def _data(name: str, kind: str, doc: str, optional: bool = False) -> DataSpec:
    """An input or output of kind ``kind`` (:data:`corridor.settings.DATA_KINDS`)."""
    return DataSpec(name, kind, doc=doc, optional=optional)


_CONFIG_LAYERS = (
    _data("power_lines", "line_layer", "Power lines ([layers.power_lines])."),
    _data("assets", "line_layer", "Asset layers ([[layers.assets]])."),
    _data("soil", "polygon_layer", "Soil resistivity polygons ([layers.soil]).",
          optional=True),
    _data("grounds", "point_layer", "Existing grounds and series breaks"
          " ([layers.grounds]).", optional=True),
    _data("towers", "point_layer", "Towers ([layers.towers]).", optional=True),
)
_SAVED_SEGMENTS = _data("segments", "line_layer", "A saved segments layer to start"
                        " from instead of recomputing (see the module notes for the columns).",
                        optional=True)


def _seg_out(what: str) -> DataSpec:
    return _data("segments", "line_layer", f"Asset segments with {what}.")


_OUT = {
    "read": (
        _data("lines", "line_layer", "Power lines, canonical fields, run CRS."),
        _data("assets", "line_layer", "Assets, canonical fields and kind defaults,"
              " run CRS."),
        _data("soil", "polygon_layer", "Soil polygons, run CRS.", optional=True),
        _data("grounds", "point_layer", "Grounds and breaks, run CRS.",
              optional=True),
        _data("towers", "point_layer", "Towers, run CRS.", optional=True),
        _data("rejected", "table", "Input features that could not be used."),
    ),
    "segment": (_seg_out("identity, chainage_m and length_m"),),
    "expose": (
        _data("exposures", "line_layer", "One row per (asset, power line,"
              " continuous run) with parallel length and separations."),
        _seg_out("the nearest line, separation, angle, class and soil"),
    ),
    "couple": (_seg_out("the coupling: emf_normal_v, emf_fault_v (before a telecom sheath's"
                        " screening factor) [V], fault_current_ka [kA],"
                        " earth_potential_fault_v [V], i_capacitive_source_ma [mA]"),),
    "respond": (_seg_out("voltages and currents along the assets (README: segments)"),),
    "assess": (_seg_out("ratio_<criterion>, utilization, governing and hazard_class"),),
    "ground": (
        _data("sites", "point_layer", "Proposed grounding sites."),
        _data("grounding_sites", "table", "The sites without geometry: the work"
              " list."),
        _seg_out("the state after the proposed grounding"),
    ),
    "rank": (_seg_out("rank (1 = worst of the run)"),),
    "report": (
        _data("screening", "file", "Everything `corridor run` writes:"
              " screening.gpkg, CSVs, run.json, report.html."),
    ),
}


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
           "tower_current_share", "footing_radius_m", "outage_scenario")
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


def convert_parameter(p: Spec, value) -> Any:
    """``value`` (typed, or a string from the command line) checked against ``p``.

    Raises
    ------
    ConfigError
        Wrong type, outside the valid range or not one of the choices.
    """
    where = f"parameter {p.name}"
    if isinstance(value, str) and p.dtype != "str":
        try:
            return p.parse(value)
        except ValueError as exc:
            raise ConfigError(f"{where}: {exc}") from None
    checked, problem = p.validate(value)
    if problem:
        raise ConfigError(f"{where}: {problem}")
    return checked


def _apply(cfg, spec: StepSpec, params: Mapping[str, Any]):
    if not params:
        return cfg
    from corridor.registry import registry

    known = {p.name: p for p in spec.parameters}
    problems, changes = [], {}
    for key, value in params.items():
        if key not in known:
            problems.append(f"parameter {key}: not a parameter of step {spec.name}"
                            f" (parameters: {', '.join(known) or 'none'})")
            continue
        try:
            changes[key] = convert_parameter(known[key], value)
        except ConfigError as exc:
            problems.extend(exc.problems)
    if problems:
        raise ConfigError(problems)
    if changes.get("crs"):
        from pyproj import CRS

        try:
            projected = CRS.from_user_input(changes["crs"]).is_projected
        except Exception:  # pyproj's CRSError; any failure is the user's value
            projected = None
        if not projected:
            raise ConfigError(f"parameter crs: {changes['crs']!r} is not a projected (metric)"
                              " CRS pyproj understands")
    if "limit_set" in changes:
        changes["limit_set"] = registry.resolve_limit_set(changes["limit_set"])
    return cfg.with_run(**changes)


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
        if p.dtype.endswith("_layer"):
            write_layer(frame, gpkg, p.name)
            written[p.name] = gpkg
        elif p.dtype == "table":
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
    from corridor.compute import versions
    from corridor.config import load_config
    from corridor.io.outputs import write_json

    spec = get_step(name)
    cfg = _apply(load_config(config_path), spec, dict(params or {}))
    declared = {p.name: p for p in spec.inputs}
    input_paths = {}
    for key, value in (inputs or {}).items():
        if key not in spec.from_saved:
            can = [s.name for s in STEPS.values() if key in s.from_saved]
            raise ConfigError(f"step {name}: cannot start from a saved {key!r} layer; it reads"
                              f" the config's layers (steps that can: {', '.join(can)})")
        checked, problem = declared[key].validate(value)
        if problem:
            raise ConfigError(f"step {name}: input {key}: {problem}")
        input_paths[key] = Path(checked)
    out_dir = Path(outputs_dir) if outputs_dir is not None else cfg.output_dir / "steps"
    out_dir = out_dir.resolve()
    ctx = StepContext(cfg, MappingProxyType(input_paths), out_dir,
                      progress or (lambda fraction, message: None), cancel or (lambda: False))
    t0 = time.perf_counter()
    outputs, counts = spec.run(ctx)
    _check(ctx, 1.0, "write")
    if spec.name == "report":
        written = {"screening": out_dir}
    else:
        written = _write(outputs, spec, out_dir)
        record = {"step": spec.name, "config_file": str(cfg.path),
                  "inputs": {k: str(v) for k, v in input_paths.items()},
                  "parameters": {p.name: cfg.run.as_dict()[p.name] for p in spec.parameters},
                  "counts": counts, "elapsed_s": round(time.perf_counter() - t0, 3),
                  "outputs": {k: str(v) for k, v in written.items()}, "versions": versions()}
        written["record"] = out_dir / f"{spec.name}.json"
        write_json(record, written["record"])
    log.info("step %s: wrote %s", spec.name, ", ".join(sorted(set(map(str, written.values())))))
    return written


def describe() -> list[dict]:
    """Every step as plain data (for listings and adapters)."""
    def setting(p: Spec) -> dict:
        return {**p.describe(), "optional": False}

    return [{"name": s.name, "title": s.title, "description": s.description,
             "inputs": [p.describe() for p in s.inputs],
             "outputs": [p.describe() for p in s.outputs],
             "parameters": [setting(p) for p in s.parameters], "from_saved": list(s.from_saved)}
            for s in STEPS.values()]
