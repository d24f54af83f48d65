"""Run configuration: one TOML file per run, loaded once into frozen objects.

Every ``[run]`` setting is declared once in :class:`corridor.settings.RunSettings`
(type, unit, default, range, meaning; :data:`RUN_SETTINGS` lists the specs); the
README's configuration tables are generated from the same declarations. All
problems are collected and raised together as one :class:`ConfigError` naming
the file and key. A :class:`Config` is frozen and pickles as it is.
"""

from __future__ import annotations

import dataclasses
import stat
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from corridor.arrangements import (
    CIRCUIT_KEYS,
    EARTH_WIRE_KEYS,
    PACKAGED_ARRANGEMENTS,
    Arrangement,
    Conductor,
    load_arrangements,
)
from corridor.errors import ConfigError
from corridor.registry import load_plugins, registry
from corridor.schema import GROUND_FIELDS, LINE_FIELDS, SOIL_FIELDS, SUBSTATION_FIELDS
from corridor.settings import RUN_SETTINGS, FrozenMap, RunSettings
from corridor.toml_read import read_toml, section_table, short_repr

__all__ = ["RUN_SETTINGS", "RunSettings", "Config", "LayerSource", "Arrangement", "Conductor",
           "load_config", "load_arrangements", "read_toml", "PACKAGED_ARRANGEMENTS",
           "CIRCUIT_KEYS", "EARTH_WIRE_KEYS"]


LINE_DEFAULT_KEYS = {
    "load_current_a": 400.0,
    "residual_current_pct": 5.0,
    "fault_current_start_ka": 10.0,
    "fault_current_end_ka": 10.0,
    "clearing_time_s": 0.5,
    "high_reliability": False,
    # two-terminal fault source model (docs/methods.md §8.1): common practice, from memory
    "source_x_over_r_start": 10.0,
    "source_x_over_r_end": 10.0,
    "source_z0_over_z1_start": 1.0,
    "source_z0_over_z1_end": 1.0,
}

LAYER_KEYS = {"path", "layer", "fields", "kind", "crs", "format", "osm"}
TOP_KEYS = {"run", "line_defaults", "defaults", "layers", "limits", "uncertainty", "load_series",
            "readings", "calibration"}
LAYER_ROLES = {"power_lines", "assets", "soil", "grounds", "towers", "substations"}


@dataclass(frozen=True)
class LayerSource:
    """Where one input layer comes from and how its fields map to corridor's.

    Attributes
    ----------
    role : str
        ``power_lines``, ``assets``, ``soil``, ``grounds``, ``towers`` or ``substations``.
    path : Path
        File path (any vector format GDAL reads).
    layer : str or None
        Layer name inside the file; None for single-layer formats.
    fields : FrozenMap[str, str]
        corridor field name -> user attribute name.
    kind : str or None
        Asset kind for every feature of an asset layer; None reads the kind
        from the ``asset_kind`` field.
    crs : str, int or None
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
    fields: FrozenMap
    kind: str | None = None
    crs: str | int | None = None
    format: str | None = None
    osm: FrozenMap | None = None

    @property
    def label(self) -> str:
        """Name used in messages: ``file:layer``."""
        return f"{self.path.name}:{self.layer}" if self.layer else self.path.name


@dataclass(frozen=True)
class Config:
    """A validated, immutable run configuration."""

    path: Path
    run: RunSettings
    line_defaults: FrozenMap
    kind_defaults: FrozenMap  # kind -> FrozenMap
    power_lines: LayerSource
    assets: tuple[LayerSource, ...]
    soil: LayerSource | None
    grounds: LayerSource | None
    towers: LayerSource | None
    arrangements: FrozenMap  # name -> Arrangement
    arrangements_path: Path
    limit_overrides: FrozenMap
    resolved: FrozenMap = field(repr=False)
    substations: LayerSource | None = None  # optional substation layer (docs/methods.md §18.4)
    #: The ``[uncertainty]`` section (corridor.uncertainty.settings.Bands); None: no bands.
    uncertainty: Any = None
    #: Optional load time series (``[load_series]``, :mod:`corridor.series`).
    load_series: Any = None
    #: ``[readings]`` and ``[calibration]`` checked (corridor/reconcile/settings.py), or None.
    readings: Mapping[str, Any] | None = None
    calibration: Mapping[str, Any] | None = None

    @property
    def output_dir(self) -> Path:
        return (self.path.parent / self.run.output_dir).resolve()

    def setting(self, name: str) -> Any:
        """The run setting ``name`` (AttributeError if there is none)."""
        return getattr(self.run, name)

    def with_run(self, **changes: Any) -> Config:
        """A copy with some run settings replaced, validated and recorded in ``resolved``.

        Raises
        ------
        ConfigError
            A name that is not a run setting, or an invalid value.
        """
        try:
            run = self.run.replace(**changes)
        except ValueError as exc:
            raise ConfigError([f"{self.path.name}: {p}" for p in str(exc).split("; ")]) \
                from None
        resolved = dict(self.resolved)
        resolved["run"] = run.as_dict()
        return dataclasses.replace(self, run=run, resolved=FrozenMap(resolved))


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
    kinds = registry.kind_names()
    if kind is not None and (not isinstance(kind, str) or kind not in kinds):
        problems.append(f"{where}.kind: {kind!r} is not one of {', '.join(kinds)}")
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
    return LayerSource(role, full, layer, FrozenMap(fields), kind, crs, fmt, osm)


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
    from corridor.io import osm_preset

    for key in ("layer", "fields"):
        if key in raw:
            problems.append(f"{where}.{key}: not used with an OpenStreetMap extract; the tag"
                            " preset maps tags to fields (override it in the layer's osm table)")
    table = raw.get("osm", {})
    found = osm_preset.check_overrides(table, role, where, registry.kind_names())
    problems.extend(found)
    return fmt, (FrozenMap(table) if not found and table else None)


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
    raw_run = section_table(raw, "run", f"{name}: run", problems)
    for key in raw_run:
        if key not in RUN_SETTINGS:
            problems.append(f"{name}: run.{key}: unknown setting")
    for key, spec in RUN_SETTINGS.items():
        value, problem = spec.validate(raw_run.get(key, spec.default))
        if problem:
            problems.append(f"{name}: run.{key}: {problem}")
        else:
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
    raw_defaults = section_table(raw, "line_defaults", f"{name}: line_defaults", problems)
    for key, value in raw_defaults.items():
        if key not in LINE_DEFAULT_KEYS:
            problems.append(f"{name}: line_defaults.{key}: unknown key")
            continue
        checked, err = specs[key].validate(value)
        if err:
            problems.append(f"{name}: line_defaults.{key}: {err}")
        line_defaults[key] = checked if err is None else value

    kind_defaults: dict[str, FrozenMap] = {}
    raw_defaults = section_table(raw, "defaults", f"{name}: defaults", problems)
    kinds = registry.kind_names()
    for kind in raw_defaults:
        if kind not in kinds:
            problems.append(f"{name}: defaults.{kind}: unknown asset kind"
                            f" (allowed: {', '.join(kinds)})")
    for kind in kinds:
        merged = dict(registry.kind(kind).defaults)
        kspecs = {s.name: s for s in registry.asset_fields(kind)}
        for key, value in section_table(raw_defaults, kind, f"{name}: defaults.{kind}",
                                 problems).items():
            if key not in kspecs or key == "asset_id":
                problems.append(f"{name}: defaults.{kind}.{key}: unknown field for a {kind}")
                continue
            checked, err = kspecs[key].validate(value)
            if err:
                problems.append(f"{name}: defaults.{kind}.{key}: {err}")
            merged[key] = checked if err is None else value
        kind_defaults[kind] = FrozenMap(merged)

    layers = section_table(raw, "layers", f"{name}: layers", problems)
    for key in layers:
        if key not in LAYER_ROLES:
            problems.append(f"{name}: layers.{key}: unknown layer role"
                            f" (allowed: {', '.join(sorted(LAYER_ROLES))})")
    line_names = {s.name for s in LINE_FIELDS}
    asset_names = {s.name for k in kinds for s in registry.asset_fields(k)} | {"asset_kind"}
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
                        f" {short_repr(raw_assets)}")
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
                        ("towers", {"line_id", "tower_id"}),
                        ("substations", {s.name for s in SUBSTATION_FIELDS} | {"substation_id"})):
        optional[role] = (_layer(layers[role], role, f"{name}: layers.{role}", base, problems,
                                 names) if role in layers else None)

    arrangements: dict[str, Arrangement] = {}
    arr_path = (base / run.get("arrangements", "arrangements.toml")).resolve()
    if "arrangements" not in raw_run and not arr_path.is_file():
        # no arrangements named and none beside the config: the shipped examples
        arr_path = PACKAGED_ARRANGEMENTS
    try:
        arrangements = load_arrangements(arr_path)
    except ConfigError as exc:
        problems.extend(exc.problems)
    if any(s is not None and _is_osm(s) for s in (power_lines, *assets)):
        # OpenStreetMap lines take typical arrangements (corridor/data/osm_arrangements.toml)
        from corridor.io.osm_preset import ARRANGEMENTS_PATH

        try:
            arrangements = {**load_arrangements(ARRANGEMENTS_PATH), **arrangements}
        except ConfigError as exc:
            problems.extend(exc.problems)

    limit_overrides = raw.get("limits", {})
    if not isinstance(limit_overrides, dict):
        problems.append(f"{name}: limits: expected a table of overrides")
        limit_overrides = {}

    from corridor.uncertainty.settings import parse_uncertainty

    bands, found = parse_uncertainty(raw.get("uncertainty"), name)
    problems.extend(found)
    if bands is not None and bands.soil_polygons and optional["soil"] is None:
        problems.append(f"{name}: uncertainty.soil_resistivity_ohm_m: per-polygon ranges need"
                        " a soil layer ([layers.soil])")

    from corridor.series.settings import parse_load_series

    load_series = parse_load_series(raw.get("load_series"), name, base, problems)

    from corridor.reconcile.settings import parse_calibration, parse_readings

    readings = parse_readings(raw.get("readings"), name, base, problems)
    calibration = parse_calibration(raw.get("calibration"), name, base, problems)

    if problems:
        raise ConfigError(problems)
    assert power_lines is not None  # a missing or bad power-line layer is a problem above
    run_settings = RunSettings(**run)
    resolved = {
        "run": run_settings.as_dict(),
        "line_defaults": line_defaults,
        "defaults": {k: dict(v) for k, v in kind_defaults.items()},
        "layers": {
            "power_lines": _layer_dict(power_lines),
            "assets": [_layer_dict(a) for a in assets],
            **{k: _layer_dict(v) for k, v in optional.items() if v is not None},
        },
        "limits": limit_overrides,
        "arrangements_file": str(arr_path),
        **({"readings": readings} if readings is not None else {}),
        **({"calibration": calibration} if calibration is not None else {}),
    }
    if bands is not None:
        resolved["uncertainty"] = bands.as_dict()
    if load_series is not None:
        resolved["load_series"] = load_series.as_dict()
    return Config(
        path=path,
        run=run_settings,
        line_defaults=FrozenMap(line_defaults),
        kind_defaults=FrozenMap(kind_defaults),
        power_lines=power_lines,
        assets=tuple(assets),
        soil=optional["soil"],
        grounds=optional["grounds"],
        towers=optional["towers"],
        substations=optional["substations"],
        arrangements=FrozenMap(arrangements),
        arrangements_path=arr_path,
        limit_overrides=FrozenMap(limit_overrides),
        resolved=FrozenMap(resolved),
        uncertainty=bands,
        load_series=load_series,
        readings=readings,
        calibration=calibration,
    )


def _is_osm(src: LayerSource) -> bool:
    from corridor.io.osm_preset import source_is_osm

    return source_is_osm(src)


def _layer_dict(src: LayerSource) -> dict[str, Any]:
    out = {"path": str(src.path), "layer": src.layer, "fields": dict(src.fields),
           "kind": src.kind, "crs": src.crs}
    if src.format is not None or src.osm is not None:
        from corridor.io.osm_preset import _plain

        out.update(format=src.format, osm=_plain(src.osm or {}))
    return out
