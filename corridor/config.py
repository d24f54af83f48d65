"""Run configuration: one TOML file per run, loaded once into frozen objects.

Every setting is documented in :data:`RUN_SETTINGS` (type, unit, default,
meaning); the README's configuration table is generated from the same words.
All problems are collected and raised together as one :class:`ConfigError`
naming the file and key.
"""

from __future__ import annotations

import math
import stat
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
    "crs": (str, "-", "", "Projected CRS of the run whose axes are in metres (e.g."
            " 'EPSG:32615'); a CRS in feet or degrees is refused. Inputs in any CRS are"
            " reprojected to it. Empty: the inputs' own CRS if projected in metres, else a UTM"
            " zone chosen from the data.", None),
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
    "use_kind_defaults": (bool, "-", True, "Missing asset values (NULL or blank) take the"
                          " kind's default (with a warning, counted in run.json) instead of"
                          " rejecting the feature. A field the layer lacks always takes the"
                          " default (counted too); a present but invalid value always rejects"
                          " the feature.", None),
    "accept_rejected_lines": (bool, "-", False, "A rejected power line does not change the exit"
                              " code: set it only when leaving such lines out is intended. The"
                              " report still names every rejected line.", None),
    "tower_span_m": (float, "m", 300.0, "Assumed tower spacing when no tower layer is given.",
                     (10.0, 2000.0)),
    "tower_zone_m": (float, "m", 100.0, "Distance from a tower within which the earth"
                     " potential rise during a fault is computed.", (1.0, 2000.0)),
    "tower_current_share": (float, "-", 0.2, "Share of the fault current discharged by the"
                            " faulted tower's footing (5-30 %, METHODS.md §4, from memory).",
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

LAYER_KEYS = {"path", "layer", "fields", "kind", "crs", "format", "osm"}
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
    format : str or None
        ``"osm"``: an OpenStreetMap extract read with the tag preset
        (:mod:`corridor.io.osm`); ``"gdal"``: a plain layer; None: ``osm`` for
        files named ``.osm`` / ``.osm.pbf``, else plain.
    osm : Mapping or None
        The layer's ``osm`` table: overrides of the OSM tag preset.
    """

    role: str
    path: Path
    layer: str | None
    fields: MappingProxyType
    kind: str | None = None
    crs: str | None = None
    format: str | None = None
    osm: MappingProxyType | None = None

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


def run_crs_problem(crs) -> str | None:
    """Why ``crs`` (a :class:`pyproj.CRS`) cannot be the run's CRS, or None.

    corridor computes lengths, separations and areas in metres, so the run CRS
    must be projected with both axes in metres. A CRS in US survey feet
    (EPSG:2272, say) would make every length 3.28 times too large.
    """
    if not crs.is_projected:
        return "not a projected CRS (its coordinates are angles); choose a projected CRS in metres"
    units = sorted({a.unit_name for a in crs.axis_info if a.unit_conversion_factor != 1.0
                    or a.unit_name not in ("metre", "meter")})
    if units or not crs.axis_info:
        unit = ", ".join(units) or "unknown"
        return (f"its axis unit is {unit}, not the metre; corridor computes in metres: choose"
                " a projected CRS in metres (e.g. the UTM zone of the corridor); inputs in any"
                " CRS are reprojected to it")
    return None


def dataset_path_problem(path: Path) -> str | None:
    """Why ``path`` cannot be an input dataset, or None.

    A dataset is a regular file (GeoPackage, Shapefile, ...) or a folder (an
    Esri File Geodatabase, a folder of Shapefiles). A FIFO, device or socket
    is refused: opening one can block forever.
    """
    try:
        mode = path.stat().st_mode
    except FileNotFoundError:
        return f"file not found: {path}"
    except (OSError, ValueError) as exc:
        return f"cannot be read: {path}: {exc}"
    if stat.S_ISREG(mode) or stat.S_ISDIR(mode):
        return None
    return (f"{path} is not a regular file or folder (a FIFO, device or socket?); corridor"
            " reads only files and folders")


def read_toml(path: Path, what: str, name: str | None = None) -> dict:
    """Read a TOML file; every failure is a :class:`ConfigError` naming the file.

    Parameters
    ----------
    path : Path
        The file.
    what : str
        What the file is, for messages (``"config file"``).
    name : str, optional
        How messages name the file (default: the full path).
    """
    name = str(path) if name is None else name
    try:
        mode = path.stat().st_mode
    except FileNotFoundError:
        raise ConfigError(f"{path}: {what} not found") from None
    except (OSError, ValueError) as exc:
        raise ConfigError(f"{path}: {what} cannot be read: {exc}") from None
    if stat.S_ISDIR(mode):
        raise ConfigError(f"{path}: is a folder, expected a TOML file")
    if not stat.S_ISREG(mode):
        raise ConfigError(f"{path}: {what} is not a regular file (a FIFO, device or socket?)")
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{name}: not valid TOML: {exc}") from None
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{name}: not UTF-8 text ({exc}); TOML files are UTF-8: save it"
                          " as UTF-8") from None
    except RecursionError:
        raise ConfigError(f"{name}: not valid TOML for corridor: arrays or tables nested too"
                          " deeply") from None
    except OSError as exc:
        raise ConfigError(f"{path}: {what} cannot be read: {exc}") from None


def _table(raw: dict, key: str, where: str, problems: list[str]) -> dict:
    """``raw[key]`` when it is a table (or absent: an empty one); else a problem."""
    value = raw.get(key, {})
    if isinstance(value, dict):
        return value
    problems.append(f"{where}: expected a table, got {_short(value)}")
    return {}


def _short(value: Any, limit: int = 60) -> str:
    """``repr(value)``, cut to ``limit`` characters for a message."""
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


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
    if not isinstance(path, str) or not path:
        problems.append(f"{where}.path: required, a string")
        return None
    if "\0" in path:
        problems.append(f"{where}.path: contains a NUL byte: {path!r}")
        return None
    full = (base / path).resolve()
    problem = dataset_path_problem(full)
    if problem:
        problems.append(f"{where}.path: {problem}")
    layer = raw.get("layer")
    if layer is not None and (not isinstance(layer, str) or "\0" in layer):
        problems.append(f"{where}.layer: expected a layer name (a string), got {layer!r}")
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
    if kind is not None and (not isinstance(kind, str) or kind not in ASSET_KINDS):
        problems.append(f"{where}.kind: {kind!r} is not one of {', '.join(ASSET_KINDS)}")
        kind = None
    if kind is not None and role != "assets":
        problems.append(f"{where}.kind: only asset layers take a kind")
    crs = raw.get("crs")
    if crs is not None:
        try:
            from pyproj import CRS

            if not isinstance(crs, str | int):
                raise TypeError(crs)
            CRS.from_user_input(crs)
        except Exception:  # pyproj raises its own CRSError; any failure is the user's value
            problems.append(f"{where}.crs: {crs!r} is not a CRS pyproj understands")
            crs = None
    fmt, osm = _layer_format(raw, role, where, full, problems)
    return LayerSource(role, full, layer, MappingProxyType(dict(fields)), kind, crs, fmt, osm)


def _layer_format(raw: dict, role: str, where: str, full: Path, problems: list[str]):
    """The layer's ``format`` and ``osm`` keys (OpenStreetMap input, :mod:`corridor.io.osm`)."""
    fmt = raw.get("format")
    if fmt is not None and fmt not in ("osm", "gdal"):
        problems.append(f"{where}.format: {fmt!r} is not 'osm' or 'gdal'")
        fmt = None
    is_osm = fmt == "osm" or (fmt is None and full.name.lower().endswith((".osm", ".pbf")))
    if not is_osm:
        if "osm" in raw:
            problems.append(f"{where}.osm: only an OpenStreetMap layer (.osm, .osm.pbf or"
                            " format = 'osm') takes an osm table")
        return fmt, None
    from corridor.io import osm

    for key in ("layer", "fields"):
        if key in raw:
            problems.append(f"{where}.{key}: not used with an OpenStreetMap extract; the tag"
                            " preset maps tags to fields (override it in the layer's osm table)")
    table = raw.get("osm", {})
    found = osm.check_overrides(table, role, where, ASSET_KINDS)
    problems.extend(found)
    return fmt, (MappingProxyType(dict(table)) if not found and table else None)


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
        if not math.isfinite(value):
            problems.append(f"{where}.{key}: expected a finite number, got {value!r}")
            return math.nan
        return float(value)

    x = pick("x_m")
    h = pick("height_m")
    r = pick("radius_m")
    # a solid round conductor's GMR is r e^(-1/4) = 0.7788 r (textbook closed form)
    gmr = pick("gmr_m") if "gmr_m" in raw else r * 0.7788
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
    raw = read_toml(path, "arrangements file")
    out: dict[str, Arrangement] = {}
    for key in raw:
        if key != "arrangements":
            problems.append(f"{path.name}: {key}: unknown key (expected [arrangements.NAME])")
    for name, entry in _table(raw, "arrangements", f"{path.name}: arrangements",
                              problems).items():
        where = f"{path.name}: arrangements.{name}"
        if not isinstance(entry, dict):
            problems.append(f"{where}: expected a table")
            continue
        for key in entry:
            if key not in {"description", "circuits", "earth_wires"}:
                problems.append(f"{where}.{key}: unknown key")
        conductors: list[Conductor] = []
        circuits = entry.get("circuits", [])
        if not isinstance(circuits, list):
            problems.append(f"{where}.circuits: expected [[...circuits]] tables")
            circuits = []
        elif not circuits:
            problems.append(f"{where}.circuits: at least one circuit is required")
        wires = entry.get("earth_wires", [])
        if not isinstance(wires, list):
            problems.append(f"{where}.earth_wires: expected [[...earth_wires]] tables")
            wires = []
        for ci, circ in enumerate(circuits):
            cw = f"{where}.circuits[{ci}]"
            if not isinstance(circ, dict):
                problems.append(f"{cw}: expected a table")
                continue
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
        for wi, wire in enumerate(wires):
            ww = f"{where}.earth_wires[{wi}]"
            if not isinstance(wire, dict):
                problems.append(f"{ww}: expected a table")
                continue
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
    if "\0" in str(path):
        raise ConfigError(f"{str(path)!r}: the config path contains a NUL byte")
    path = Path(path).resolve()
    name = path.name
    raw = read_toml(path, "config file", name)
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
    raw_run = _table(raw, "run", f"{name}: run", problems)
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
                isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)
                and v > 0 for v in value)
            if not ok:
                problems.append(f"{name}: run.{key}: expected a list of positive numbers [{unit}]")
                continue
            value = [float(v) for v in value]
        elif not isinstance(value, typ) or (typ is not bool and isinstance(value, bool)):
            problems.append(f"{name}: run.{key}: expected {typ.__name__} [{unit}], got"
                            f" {_short(value)}")
            continue
        if unit == "path" and "\0" in value:
            problems.append(f"{name}: run.{key}: contains a NUL byte: {value!r}")
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
        except Exception:  # pyproj's CRSError; any failure here is the user's value
            problems.append(f"{name}: run.crs: {run['crs']!r} is not a CRS pyproj understands")
        else:
            problem = run_crs_problem(crs)
            if problem:
                problems.append(f"{name}: run.crs: {run['crs']}: {problem}")

    line_defaults: dict[str, Any] = dict(LINE_DEFAULT_KEYS)
    specs = {s.name: s for s in LINE_FIELDS}
    for key, value in _table(raw, "line_defaults", f"{name}: line_defaults", problems).items():
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
    raw_defaults = _table(raw, "defaults", f"{name}: defaults", problems)
    for kind in raw_defaults:
        if kind not in ASSET_KINDS:
            problems.append(f"{name}: defaults.{kind}: unknown asset kind"
                            f" (allowed: {', '.join(ASSET_KINDS)})")
    for kind in ASSET_KINDS:
        merged = dict(KIND_DEFAULTS[kind])
        kspecs = {s.name: s for s in asset_fields(kind)}
        for key, value in _table(raw_defaults, kind, f"{name}: defaults.{kind}",
                                 problems).items():
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

    layers = _table(raw, "layers", f"{name}: layers", problems)
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
    if not isinstance(raw_assets, list):
        problems.append(f"{name}: layers.assets: expected [[layers.assets]] tables, got"
                        f" {_short(raw_assets)}")
        raw_assets = []
    elif not raw_assets:
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
    if any(s is not None and _is_osm(s) for s in (power_lines, *assets)):
        # OpenStreetMap lines take typical arrangements (corridor/data/osm_arrangements.toml)
        from corridor.io import osm

        arrangements = {**osm.typical_arrangements(), **arrangements}

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


def _is_osm(src: LayerSource) -> bool:
    from corridor.io.osm import source_is_osm

    return source_is_osm(src)


def _layer_dict(src: LayerSource) -> dict[str, Any]:
    out = {"path": str(src.path), "layer": src.layer, "fields": dict(src.fields),
           "kind": src.kind, "crs": src.crs}
    if src.format is not None or src.osm is not None:
        from corridor.io.osm import _plain

        out.update(format=src.format, osm=_plain(src.osm or {}))
    return out
