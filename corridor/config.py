"""Run configuration: one TOML file per run, loaded once into frozen objects.

Every setting is documented in :data:`RUN_SETTINGS` (type, unit, default,
meaning); the README's configuration table is generated from the same words.
All problems are collected and raised together as one :class:`ConfigError`
naming the file and key.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

from corridor.errors import ConfigError
from corridor.schema import (
    ASSET_KINDS,
    GROUND_FIELDS,
    KIND_DEFAULTS,
    LINE_FIELDS,
    SOIL_FIELDS,
    FieldSpec,
    asset_fields,
)

# name: (type, unit, default, meaning, (low, high) or None)
RUN_SETTINGS: dict[str, tuple[type, str, Any, str, tuple[float, float] | None]] = {
    "output_dir": (str, "path", "out", "Output folder, relative to the config file.", None),
    "crs": (str, "-", "", "Metric projected CRS of the run (e.g. 'EPSG:32615'); empty: the"
            " inputs' own projected CRS, or a UTM zone chosen from geographic data.", None),
    "frequency_hz": (float, "Hz", 50.0, "System frequency.", (1.0, 1000.0)),
    "screening_distance_m": (float, "m", 1000.0, "Distance within which a power line is"
                             " considered to couple into an asset.", (1.0, 5000.0)),
    "segment_length_m": (float, "m", 50.0, "Maximum length of an asset segment.", (1.0, 1000.0)),
    "min_separation_m": (float, "m", 1.0, "Separation floor at crossings (no log of zero).",
                         (0.01, 100.0)),
    "parallel_angle_deg": (float, "deg", 10.0, "Largest angle between asset and line still"
                           " classed parallel (common practice).", (0.0, 45.0)),
    "oblique_ratio": (float, "-", 3.0, "Largest ratio of the separations at the two ends of an"
                      " oblique section (ITU-T Directives practice).", (1.1, 10.0)),
    "default_soil_resistivity_ohm_m": (float, "Ω·m", 100.0, "Soil resistivity where no soil"
                                       " polygon covers a segment.", (0.1, 1e5)),
    "limit_set": (str, "-", "iec_en", "Limit set: a name in config/limits/ or a path.", None),
    "arrangements": (str, "path", "arrangements.toml", "Tower and conductor arrangements"
                     " file, relative to the config file.", None),
    "use_kind_defaults": (bool, "-", True, "Missing or invalid asset attributes take the"
                          " kind's default (with a warning) instead of rejecting the feature.",
                          None),
    "tower_span_m": (float, "m", 300.0, "Assumed tower spacing when no tower layer is given.",
                     (10.0, 2000.0)),
    "tower_zone_m": (float, "m", 1000.0, "Largest distance from a faulted tower at which its"
                     " earth potential is computed (the zone of influence ends sooner where"
                     " the potential falls below tower_zone_threshold_v).", (1.0, 5000.0)),
    "tower_zone_threshold_v": (float, "V", 50.0, "Earth potential at which a faulted tower's"
                               " zone of influence ends, r = ρI/(2πV) (project default;"
                               " docs/methods.md §4.5).", (0.1, 1e5)),
    "tower_current_share": (float, "-", 0.0, "Share of the fault current discharged by the"
                            " faulted tower's footing; 0: from the earth-wire ladder with the"
                            " local soil and footing_radius_m (docs/methods.md §4.3).",
                            (0.0, 1.0)),
    "footing_radius_m": (float, "m", 1.0, "Equivalent hemispherical radius of a tower"
                         " footing.", (0.05, 50.0)),
    "grounding_menu_ohm": (list, "Ω", [10.0, 5.0, 2.0, 1.0], "Ground resistances the grounding"
                           " design may choose, easiest first.", None),
    "output_formats": (list, "-", ["gpkg"], "Output layer formats: 'gpkg' always, plus 'fgb'"
                       " (FlatGeobuf) and/or 'parquet' (GeoParquet), one file per layer.", None),
    "max_sites_per_asset": (int, "-", 6, "Largest number of grounding sites proposed on one"
                            " asset.", (1, 100)),
    "threads": (int, "-", 0, "Threads of the local backend: partitions of whole assets computed"
                " side by side, rows identical to one thread; 0: up to 2 when the run has"
                " 300,000 segments or more, else 1.", (0, 64)),
    "cache_dir": (str, "path", "auto", "Cache of per-asset results for incremental reruns"
                  " (GeoParquet + JSON index; safe to delete). 'auto': the folder"
                  " '<output folder>.cache' beside the output folder; '': no cache; any other"
                  " value: a folder relative to the config file.", None),
    "change_threshold": (float, "-", 0.1, "Change of an asset's worst utilization since the"
                         " previous run that changes.csv reports as moved.", (0.0, 100.0)),
    "backend": (str, "-", "local", "Where the per-asset compute runs: 'local' (this process)"
                " or 'dask' (a dask.distributed cluster, spatial partitions of whole assets;"
                " needs the 'dask' extra).", None),
    "scheduler_address": (str, "-", "", "Dask scheduler to use with backend 'dask' (e.g."
                          " 'tcp://scheduler.example:8786'); '': start a LocalCluster on this"
                          " machine for the run.", None),
    "dask_workers": (int, "-", 2, "Workers of the LocalCluster started when"
                     " scheduler_address is empty (one thread each).", (1, 256)),
    "dask_processes": (bool, "-", True, "LocalCluster workers are processes (true) or threads"
                       " of this process (false; GEOS and LAPACK release the GIL).", None),
    "partitions": (int, "-", 0, "Spatial partitions of whole assets. Backend 'dask', 0:"
                   " max(2, estimated segments / 500,000). Backend 'local', 0: one piece below"
                   " 300,000 segments on one thread, else max(threads, estimated segments /"
                   " 250,000), so that peak memory stays bounded.", (0, 100000)),
    "work_dir": (str, "path", "", "Folder for the partition files of backend 'dask', relative"
                 " to the config file; must be reachable by every worker. '': beside the"
                 " output folder.", None),
}

LINE_DEFAULT_KEYS = {
    "load_current_a": 400.0,
    "residual_current_pct": 5.0,
    "fault_current_start_ka": 10.0,
    "fault_current_end_ka": 10.0,
    "clearing_time_s": 0.5,
    "high_reliability": False,
}

LAYER_KEYS = {"path", "layer", "fields", "kind", "crs"}
TOP_KEYS = {"run", "line_defaults", "defaults", "layers", "limits"}
LAYER_ROLES = {"power_lines", "assets", "soil", "grounds", "towers"}


@dataclass(frozen=True)
class LayerSource:
    """Where one input layer comes from and how its fields map to corridor's.

    Attributes
    ----------
    role : str
        ``power_lines``, ``assets``, ``soil``, ``grounds`` or ``towers``.
    path : Path
        File path (any vector format GDAL reads).
    layer : str or None
        Layer name inside the file; None for single-layer formats.
    fields : Mapping[str, str]
        corridor field name -> user attribute name.
    kind : str or None
        Asset kind for every feature of an asset layer; None reads the kind
        from the ``asset_kind`` field.
    crs : str or None
        CRS to declare for a layer that carries none.
    """

    role: str
    path: Path
    layer: str | None
    fields: MappingProxyType
    kind: str | None = None
    crs: str | None = None

    @property
    def label(self) -> str:
        """Name used in messages: ``file:layer``."""
        return f"{self.path.name}:{self.layer}" if self.layer else self.path.name


@dataclass(frozen=True)
class Conductor:
    """One conductor of a tower arrangement, positions relative to the centreline."""

    x_m: float
    height_m: float
    radius_m: float
    gmr_m: float
    resistance_ohm_per_km: float
    circuit: int  # -1 for an earth wire
    phase: str  # 'A', 'B', 'C'; '' for an earth wire
    material: str = "acsr"


@dataclass(frozen=True)
class Arrangement:
    """A named tower and conductor arrangement."""

    name: str
    description: str
    conductors: tuple[Conductor, ...]

    @property
    def n_circuits(self) -> int:
        return 1 + max(c.circuit for c in self.conductors)


@dataclass(frozen=True)
class Config:
    """A validated, immutable run configuration."""

    path: Path
    run: MappingProxyType
    line_defaults: MappingProxyType
    kind_defaults: MappingProxyType  # kind -> MappingProxyType
    power_lines: LayerSource
    assets: tuple[LayerSource, ...]
    soil: LayerSource | None
    grounds: LayerSource | None
    towers: LayerSource | None
    arrangements: MappingProxyType  # name -> Arrangement
    arrangements_path: Path
    limit_overrides: MappingProxyType
    resolved: MappingProxyType = field(repr=False)

    @property
    def output_dir(self) -> Path:
        return (self.path.parent / self.run["output_dir"]).resolve()

    def setting(self, name: str) -> Any:
        return self.run[name]


def _check_value(value, spec: FieldSpec) -> str | None:
    """Return a problem description or None."""
    if spec.dtype == "float":
        if isinstance(value, bool) or not isinstance(value, int | float):
            return f"expected a number, got {value!r}"
        if not math.isfinite(float(value)):
            return f"expected a finite number, got {value!r}"
    elif spec.dtype == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            return f"expected an integer, got {value!r}"
    elif spec.dtype == "bool":
        if not isinstance(value, bool):
            return f"expected true or false, got {value!r}"
    elif spec.dtype == "str" and not isinstance(value, str):
        return f"expected a string, got {value!r}"
    if spec.low is not None and spec.dtype in ("float", "int") and value < spec.low:
        return f"{value!r} is below the valid range [{spec.low}, {spec.high}]"
    if spec.high is not None and spec.dtype in ("float", "int") and value > spec.high:
        return f"{value!r} is above the valid range [{spec.low}, {spec.high}]"
    if spec.choices is not None and value not in spec.choices:
        return f"{value!r} is not one of {', '.join(spec.choices)}"
    return None


def _layer(raw: Any, role: str, where: str, base: Path, problems: list[str],
           allowed_fields: set[str]) -> LayerSource | None:
    if not isinstance(raw, dict):
        problems.append(f"{where}: expected a table")
        return None
    for key in raw:
        if key not in LAYER_KEYS:
            allowed = ", ".join(sorted(LAYER_KEYS))
            problems.append(f"{where}.{key}: unknown key (allowed: {allowed})")
    path = raw.get("path")
    if not isinstance(path, str):
        problems.append(f"{where}.path: required, a string")
        return None
    full = (base / path).resolve()
    if not full.exists():
        problems.append(f"{where}.path: file not found: {full}")
    layer = raw.get("layer")
    if layer is not None and not isinstance(layer, str):
        problems.append(f"{where}.layer: expected a string")
        layer = None
    fields = raw.get("fields", {})
    if not isinstance(fields, dict):
        problems.append(f"{where}.fields: expected a table of corridor_name = \"user_name\"")
        fields = {}
    for key, value in fields.items():
        if key not in allowed_fields:
            problems.append(f"{where}.fields.{key}: unknown corridor field")
        if not isinstance(value, str):
            problems.append(f"{where}.fields.{key}: expected the user's field name as a string")
    kind = raw.get("kind")
    if kind is not None and kind not in ASSET_KINDS:
        problems.append(f"{where}.kind: {kind!r} is not one of {', '.join(ASSET_KINDS)}")
    if kind is not None and role != "assets":
        problems.append(f"{where}.kind: only asset layers take a kind")
    crs = raw.get("crs")
    if crs is not None:
        try:
            from pyproj import CRS

            CRS.from_user_input(crs)
        except Exception:  # pyproj raises its own CRSError; any failure is the user's value
            problems.append(f"{where}.crs: {crs!r} is not a CRS pyproj understands")
    return LayerSource(role, full, layer, MappingProxyType(dict(fields)), kind, crs)


def _conductor(raw: dict, where: str, problems: list[str], circuit: int, phase: str,
               index: int) -> Conductor | None:
    def pick(key, default=None, *, plural=None):
        value = raw.get(key, default)
        if isinstance(value, list):
            if index >= len(value):
                problems.append(f"{where}.{key}: list is too short")
                return math.nan
            value = value[index]
        if value is None or isinstance(value, bool) or not isinstance(value, int | float):
            problems.append(f"{where}.{key}: expected a number")
            return math.nan
        return float(value)

    x = pick("x_m")
    h = pick("height_m")
    r = pick("radius_m")
    gmr = pick("gmr_m", raw.get("radius_m", 0.0) * 0.7788 if isinstance(raw.get("radius_m"),
               int | float) else None)
    res = pick("resistance_ohm_per_km")
    for name, value in (("height_m", h), ("radius_m", r), ("gmr_m", gmr),
                        ("resistance_ohm_per_km", res)):
        if not math.isnan(value) and value <= 0:
            problems.append(f"{where}.{name}: must be positive, got {value}")
    return Conductor(x, h, r, gmr, res, circuit, phase, str(raw.get("material", "acsr")))


CIRCUIT_KEYS = {"phasing", "x_m", "height_m", "radius_m", "gmr_m", "resistance_ohm_per_km",
                "material"}
EARTH_WIRE_KEYS = {"x_m", "height_m", "radius_m", "gmr_m", "resistance_ohm_per_km", "material"}


def load_arrangements(path: Path) -> dict[str, Arrangement]:
    """Load and validate a tower-arrangement file.

    Each entry ``[arrangements.NAME]`` has a ``description``, one or more
    ``[[arrangements.NAME.circuits]]`` (``phasing`` such as ``"ABC"``, and
    three-element lists ``x_m``, ``height_m`` plus conductor data) and zero or
    more ``[[arrangements.NAME.earth_wires]]``.
    """
    problems: list[str] = []
    try:
        with open(path, "rb") as fh:
            raw = tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(f"{path}: arrangements file not found") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    out: dict[str, Arrangement] = {}
    for key in raw:
        if key != "arrangements":
            problems.append(f"{path.name}: {key}: unknown key (expected [arrangements.NAME])")
    for name, entry in raw.get("arrangements", {}).items():
        where = f"{path.name}: arrangements.{name}"
        if not isinstance(entry, dict):
            problems.append(f"{where}: expected a table")
            continue
        for key in entry:
            if key not in {"description", "circuits", "earth_wires"}:
                problems.append(f"{where}.{key}: unknown key")
        conductors: list[Conductor] = []
        circuits = entry.get("circuits", [])
        if not circuits:
            problems.append(f"{where}.circuits: at least one circuit is required")
        for ci, circ in enumerate(circuits):
            cw = f"{where}.circuits[{ci}]"
            for key in circ:
                if key not in CIRCUIT_KEYS:
                    problems.append(f"{cw}.{key}: unknown key")
            phasing = circ.get("phasing", "ABC")
            if not isinstance(phasing, str) or sorted(phasing) != ["A", "B", "C"]:
                problems.append(f"{cw}.phasing: expected a permutation of 'ABC', got {phasing!r}")
                phasing = "ABC"
            for k in ("x_m", "height_m"):
                if not (isinstance(circ.get(k), list) and len(circ[k]) == 3):
                    problems.append(f"{cw}.{k}: expected a list of three numbers")
            if any(p.startswith(cw) for p in problems):
                continue
            for j in range(3):
                c = _conductor(circ, cw, problems, ci, phasing[j], j)
                if c is not None:
                    conductors.append(c)
        for wi, wire in enumerate(entry.get("earth_wires", [])):
            ww = f"{where}.earth_wires[{wi}]"
            for key in wire:
                if key not in EARTH_WIRE_KEYS:
                    problems.append(f"{ww}.{key}: unknown key")
            c = _conductor(wire, ww, problems, -1, "", 0)
            if c is not None:
                conductors.append(c)
        out[name] = Arrangement(name, str(entry.get("description", "")), tuple(conductors))
    if problems:
        raise ConfigError(problems)
    return out


def load_config(path: str | Path) -> Config:
    """Load, validate and freeze a run configuration.

    Parameters
    ----------
    path : str or Path
        The run's TOML file.

    Raises
    ------
    ConfigError
        Listing every problem, each naming the file and key.
    """
    path = Path(path).resolve()
    name = path.name
    try:
        with open(path, "rb") as fh:
            raw = tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(f"{path}: config file not found") from None
    except IsADirectoryError:
        raise ConfigError(f"{path}: is a folder, expected a TOML file") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{name}: not valid TOML: {exc}") from None
    problems: list[str] = []
    base = path.parent
    from corridor.registry import load_plugins

    try:  # plugins (asset kinds, limit sets) load once, here; a failure names the plugin
        plugin_registry = load_plugins()
    except ConfigError as exc:
        problems.extend(exc.problems)
        plugin_registry = None
    for key in raw:
        if key not in TOP_KEYS:
            allowed = ", ".join(sorted(TOP_KEYS))
            problems.append(f"{name}: {key}: unknown section (allowed: {allowed})")

    run: dict[str, Any] = {}
    raw_run = raw.get("run", {})
    for key in raw_run:
        if key not in RUN_SETTINGS:
            problems.append(f"{name}: run.{key}: unknown setting")
    for key, (typ, unit, default, _doc, rng) in RUN_SETTINGS.items():
        value = raw_run.get(key, default)
        if typ is float and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
        if key == "output_formats":
            ok = isinstance(value, list) and all(v in ("gpkg", "fgb", "parquet") for v in value)
            if not ok:
                problems.append(f"{name}: run.{key}: expected a list of 'gpkg', 'fgb',"
                                f" 'parquet', got {value!r}")
                continue
            run[key] = list(value)
            continue
        if typ is list:
            ok = isinstance(value, list) and value and all(
                isinstance(v, int | float) and not isinstance(v, bool) and v > 0 for v in value)
            if not ok:
                problems.append(f"{name}: run.{key}: expected a list of positive numbers [{unit}]")
                continue
            value = [float(v) for v in value]
        elif not isinstance(value, typ) or (typ is not bool and isinstance(value, bool)):
            problems.append(f"{name}: run.{key}: expected {typ.__name__} [{unit}], got {value!r}")
            continue
        if rng is not None and not (rng[0] <= value <= rng[1]):
            problems.append(f"{name}: run.{key}: {value} [{unit}] outside the valid range"
                            f" {rng[0]}..{rng[1]}")
        run[key] = value
    if plugin_registry is not None and "limit_set" in run:
        run["limit_set"] = plugin_registry.resolve_limit_set(run["limit_set"])
    if run.get("crs"):
        try:
            from pyproj import CRS

            crs = CRS.from_user_input(run["crs"])
            if not crs.is_projected:
                problems.append(f"{name}: run.crs: {run['crs']} is not a projected (metric) CRS")
        except Exception:  # pyproj's CRSError; any failure here is the user's value
            problems.append(f"{name}: run.crs: {run['crs']!r} is not a CRS pyproj understands")

    line_defaults: dict[str, Any] = dict(LINE_DEFAULT_KEYS)
    specs = {s.name: s for s in LINE_FIELDS}
    for key, value in raw.get("line_defaults", {}).items():
        if key not in LINE_DEFAULT_KEYS:
            problems.append(f"{name}: line_defaults.{key}: unknown key")
            continue
        if specs[key].dtype == "float" and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
        err = _check_value(value, specs[key])
        if err:
            problems.append(f"{name}: line_defaults.{key}: {err}")
        line_defaults[key] = value

    kind_defaults: dict[str, MappingProxyType] = {}
    raw_defaults = raw.get("defaults", {})
    for kind in raw_defaults:
        if kind not in ASSET_KINDS:
            problems.append(f"{name}: defaults.{kind}: unknown asset kind"
                            f" (allowed: {', '.join(ASSET_KINDS)})")
    for kind in ASSET_KINDS:
        merged = dict(KIND_DEFAULTS[kind])
        kspecs = {s.name: s for s in asset_fields(kind)}
        for key, value in raw_defaults.get(kind, {}).items():
            if key not in kspecs or key == "asset_id":
                problems.append(f"{name}: defaults.{kind}.{key}: unknown field for a {kind}")
                continue
            is_int = isinstance(value, int) and not isinstance(value, bool)
            if kspecs[key].dtype == "float" and is_int:
                value = float(value)
            err = _check_value(value, kspecs[key])
            if err:
                problems.append(f"{name}: defaults.{kind}.{key}: {err}")
            merged[key] = value
        kind_defaults[kind] = MappingProxyType(merged)

    layers = raw.get("layers", {})
    for key in layers:
        if key not in LAYER_ROLES:
            problems.append(f"{name}: layers.{key}: unknown layer role"
                            f" (allowed: {', '.join(sorted(LAYER_ROLES))})")
    line_names = {s.name for s in LINE_FIELDS}
    asset_names = {s.name for k in ASSET_KINDS for s in asset_fields(k)} | {"asset_kind"}
    power_lines = None
    if "power_lines" not in layers:
        problems.append(f"{name}: layers.power_lines: required")
    else:
        power_lines = _layer(layers["power_lines"], "power_lines", f"{name}: layers.power_lines",
                             base, problems, line_names)
    assets: list[LayerSource] = []
    raw_assets = layers.get("assets", [])
    if isinstance(raw_assets, dict):
        raw_assets = [raw_assets]
    if not raw_assets:
        problems.append(f"{name}: layers.assets: at least one asset layer is required")
    for i, entry in enumerate(raw_assets):
        src = _layer(entry, "assets", f"{name}: layers.assets[{i}]", base, problems, asset_names)
        if src is not None:
            assets.append(src)
    optional: dict[str, LayerSource | None] = {}
    for role, names in (("soil", {s.name for s in SOIL_FIELDS}),
                        ("grounds", {s.name for s in GROUND_FIELDS} | {"ground_id"}),
                        ("towers", {"line_id", "tower_id"})):
        optional[role] = (_layer(layers[role], role, f"{name}: layers.{role}", base, problems,
                                 names) if role in layers else None)

    arrangements: dict[str, Arrangement] = {}
    arr_path = (base / run.get("arrangements", "arrangements.toml")).resolve()
    try:
        arrangements = load_arrangements(arr_path)
    except ConfigError as exc:
        problems.extend(exc.problems)

    limit_overrides = raw.get("limits", {})
    if not isinstance(limit_overrides, dict):
        problems.append(f"{name}: limits: expected a table of overrides")
        limit_overrides = {}

    if problems:
        raise ConfigError(problems)
    resolved = {
        "run": run,
        "line_defaults": line_defaults,
        "defaults": {k: dict(v) for k, v in kind_defaults.items()},
        "layers": {
            "power_lines": _layer_dict(power_lines),
            "assets": [_layer_dict(a) for a in assets],
            **{k: _layer_dict(v) for k, v in optional.items() if v is not None},
        },
        "limits": limit_overrides,
        "arrangements_file": str(arr_path),
    }
    return Config(
        path=path,
        run=MappingProxyType(run),
        line_defaults=MappingProxyType(line_defaults),
        kind_defaults=MappingProxyType(kind_defaults),
        power_lines=power_lines,
        assets=tuple(assets),
        soil=optional["soil"],
        grounds=optional["grounds"],
        towers=optional["towers"],
        arrangements=MappingProxyType(arrangements),
        arrangements_path=arr_path,
        limit_overrides=MappingProxyType(limit_overrides),
        resolved=MappingProxyType(resolved),
    )


def _layer_dict(src: LayerSource) -> dict[str, Any]:
    return {"path": str(src.path), "layer": src.layer, "fields": dict(src.fields),
            "kind": src.kind, "crs": src.crs}
