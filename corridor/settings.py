"""One spec for every setting and field corridor validates, and the run settings.

A :class:`Spec` declares one value: name, type, unit, default, valid range or
choices and meaning. The same specs drive

- the validation of ``[run]``, ``[line_defaults]`` and ``[defaults.<kind>]``
  (:mod:`corridor.config`), of asset kinds that plugins declare
  (:mod:`corridor.registry`) and of the limit sets' method parameters;
- the layer reader's canonical fields (:mod:`corridor.schema`);
- the step catalog and ``corridor step ... --set KEY=VALUE``
  (:func:`Spec.parse` turns a command-line string into a typed value);
- the README's tables (:mod:`corridor.settings_tables`).

:class:`RunSettings` is the frozen ``[run]`` table of a configuration: one
typed attribute per setting, each declared once with :func:`setting`.

This module imports nothing else from corridor, so every layer may use it.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any

#: Value types a :class:`Spec` knows.
DTYPES = ("float", "int", "str", "bool", "float_list", "str_list", "table")


@dataclass(frozen=True)
class Spec:
    """One declared value: a run setting, an input field or a method parameter.

    Parameters
    ----------
    name : str
        Canonical name; a field's name carries its unit as a suffix.
    dtype : str
        One of :data:`DTYPES`: ``"float"``, ``"int"``, ``"str"``, ``"bool"``,
        ``"float_list"`` (a non-empty list of positive numbers),
        ``"str_list"`` or ``"table"`` (a TOML table, checked by ``check``).
    default : object or None
        Default value; ``None`` makes an input field required.
    low, high : float or None
        Inclusive valid range of a number (of every item of a list).
    choices : tuple or None
        Allowed values (of every item of a ``str_list``).
    doc : str
        Meaning, and the source of the default.
    unit : str
        Unit of the value (``m``, ``Hz``, ``Ω·m``), ``path`` for a file or
        folder relative to the config file, ``-`` for none.
    check : callable or None
        A rule of its own, ``check(value) -> (converted, problem or None)``,
        used instead of the type, range and choice checks (the limit sets'
        method parameters: "strictly increasing durations", "50 or 70 kg").
    """

    name: str
    dtype: str
    default: object = None
    low: float | None = None
    high: float | None = None
    choices: tuple | None = None
    doc: str = ""
    unit: str = "-"
    check: Callable[[Any], tuple[Any, str | None]] | None = field(
        default=None, compare=False, repr=False)

    @property
    def type_label(self) -> str:
        """The type as the README and ``corridor steps`` show it."""
        return "list" if self.dtype.endswith("_list") else self.dtype

    def validate(self, value: Any) -> tuple[Any, str | None]:
        """``value`` converted to the spec's type, and a problem (or None).

        Integers are accepted for floats; lists of numbers become tuples of
        floats. The problem names the expected type and unit, or the valid
        range or choices, and the value given. A spec with its own ``check``
        uses that rule instead.
        """
        if self.check is not None:
            return self.check(value)
        unit = f" [{self.unit}]" if self.unit not in ("-", "path", "") else ""
        if self.dtype in ("float", "int"):
            if isinstance(value, bool) or not isinstance(value, int | float) or (
                    self.dtype == "int" and not isinstance(value, int)):
                return None, f"expected {self.dtype}{unit}, got {_short(value)}"
            if not math.isfinite(value):
                return None, f"expected a finite number{unit}, got {value!r}"
            if self.dtype == "float":
                value = float(value)
            problem = self._range(value, unit)
            if problem:
                return None, problem
        elif self.dtype == "bool":
            if not isinstance(value, bool):
                return None, f"expected bool (true or false), got {_short(value)}"
        elif self.dtype == "str":
            if not isinstance(value, str):
                return None, f"expected str, got {_short(value)}"
            if self.unit == "path" and "\0" in value:
                return None, f"contains a NUL byte: {value!r}"
        elif self.dtype == "float_list":
            if not isinstance(value, list | tuple) or not value or any(
                    isinstance(v, bool) or not isinstance(v, int | float)
                    or not math.isfinite(v) or v <= 0 for v in value):
                return None, f"expected a non-empty list of positive numbers{unit}, got" \
                             f" {_short(value)}"
            value = tuple(float(v) for v in value)
            for v in value:
                problem = self._range(v, unit)
                if problem:
                    return None, problem
        elif self.dtype == "str_list":
            if not isinstance(value, list | tuple) or any(not isinstance(v, str) for v in value):
                return None, f"expected a list of strings, got {_short(value)}"
            value = tuple(value)
        if self.choices is not None:
            items = value if self.dtype == "str_list" else (value,)
            bad = [v for v in items if v not in self.choices]
            if bad:
                what = "a list drawn from" if self.dtype == "str_list" else "one of"
                return None, (f"{_short(bad[0] if self.dtype == 'str_list' else value)} is not"
                              f" {what} {', '.join(map(str, self.choices))}")
        return value, None

    def _range(self, value: float, unit: str) -> str | None:
        if self.low is not None and value < self.low:
            return f"{value!r}{unit} is below the valid range [{self.low}, {self.high}]"
        if self.high is not None and value > self.high:
            return f"{value!r}{unit} is above the valid range [{self.low}, {self.high}]"
        return None

    def parse(self, text: str) -> Any:
        """A command-line string (``--set KEY=VALUE``) as a typed value, then validated.

        Raises
        ------
        ValueError
            The text is not a value of the spec's type, or the value is
            invalid; the message says why.
        """
        s = text.strip()
        try:
            value: Any
            if self.dtype == "float":
                value = float(s)
            elif self.dtype == "int":
                value = int(s)
            elif self.dtype == "bool":
                if s.lower() not in ("true", "false", "1", "0", "yes", "no"):
                    raise ValueError(s)
                value = s.lower() in ("true", "1", "yes")
            elif self.dtype == "float_list":
                value = [float(v) for v in s.strip("[]").split(",") if v.strip()]
            elif self.dtype == "str_list":
                value = [v.strip().strip("'\"") for v in s.strip("[]").split(",") if v.strip()]
            else:
                value = s
        except ValueError:
            raise ValueError(f"{text!r} is not a {self.dtype}"
                             f" [{self.unit}]") from None
        value, problem = self.validate(value)
        if problem:
            raise ValueError(problem)
        return value

    def describe(self) -> dict[str, Any]:
        """The spec as plain data (listings, JSON)."""
        return {"name": self.name, "type": self.dtype, "unit": self.unit,
                "default": _plain(self.default), "description": self.doc, "low": self.low,
                "high": self.high, "choices": list(self.choices) if self.choices else None}


#: Kinds of data a processing step reads or writes (the ``dtype`` of a :class:`DataSpec`):
#: vector layers by geometry, a CSV table, a file or folder.
DATA_KINDS = ("line_layer", "point_layer", "polygon_layer", "table", "file")


@dataclass(frozen=True)
class DataSpec(Spec):
    """A processing step's input or output: a layer, table or file, declared as a :class:`Spec`.

    The step catalog (:mod:`corridor.steps.catalog`) declares its parameters
    with the run settings' own :class:`Spec` and its inputs and outputs with
    this extension of it, so that one spec type describes everything a step
    takes and gives.

    Parameters
    ----------
    name, doc, unit, default
        As for :class:`Spec` (``unit`` ``-``, ``default`` None: the data come from
        the config's layers or from a path given to the step).
    dtype : str
        One of :data:`DATA_KINDS`: ``line_layer``, ``point_layer``,
        ``polygon_layer`` (vector layers), ``table`` (CSV) or ``file``.
    optional : bool
        The data may be absent (no soil layer, no grounding sites).
    """

    optional: bool = False

    def __post_init__(self) -> None:
        if self.dtype not in DATA_KINDS:
            raise ValueError(f"DataSpec {self.name}: dtype {self.dtype!r} is not one of"
                             f" {', '.join(DATA_KINDS)}")

    def validate(self, value: Any) -> tuple[Any, str | None]:
        """A path to the data (str or path-like, not empty), and a problem (or None)."""
        import os

        if not isinstance(value, str | os.PathLike) or not os.fspath(value):
            return None, f"expected a path to a {self.dtype.replace('_', ' ')}, got" \
                         f" {_short(value)}"
        if "\0" in os.fspath(value):
            return None, f"contains a NUL byte: {value!r}"
        return value, None

    def describe(self) -> dict[str, Any]:
        """The declaration as plain data (listings, JSON, the QGIS adapter)."""
        return {"name": self.name, "type": self.dtype, "unit": self.unit,
                "default": _plain(self.default), "description": self.doc, "low": self.low,
                "high": self.high, "optional": self.optional}


def _short(value: Any, limit: int = 60) -> str:
    """``repr(value)``, cut to ``limit`` characters for a message."""
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _plain(value: Any) -> Any:
    return list(value) if isinstance(value, tuple) else value


# --------------------------------------------------------------------------
# Run settings
# --------------------------------------------------------------------------

def setting(default: Any, unit: str, doc: str, *, low: float | None = None,
            high: float | None = None, choices: tuple | None = None, dtype: str = "") -> Any:
    """Declare one run setting: a dataclass field whose metadata holds its :class:`Spec`."""
    if not dtype:
        dtype = {bool: "bool", int: "int", float: "float", str: "str"}[type(default)]
    return field(default=default, metadata={"spec": (dtype, default, low, high, choices, doc,
                                                     unit)})


@dataclass(frozen=True)
class RunSettings:
    """The ``[run]`` table of a configuration: every setting, typed and frozen.

    Each attribute is declared once below with its type, unit, default,
    valid range or choices and meaning (:data:`RUN_SETTINGS` lists them as
    :class:`Spec`). Lists are tuples, so the settings can be hashed and
    pickled as they are.
    """

    output_dir: str = setting("out", "path", "Output folder, relative to the config file.")
    crs: str = setting("", "-", "Projected CRS of the run whose axes are in metres (e.g."
                       " 'EPSG:32615'); a CRS in feet or degrees is refused. Inputs in any CRS"
                       " are reprojected to it. Empty: the inputs' own CRS if projected in"
                       " metres, else a UTM zone chosen from the data.")
    frequency_hz: float = setting(50.0, "Hz", "System frequency.", low=1.0, high=1000.0)
    screening_distance_m: float = setting(
        1000.0, "m", "Distance within which a power line is considered to couple into an"
        " asset.", low=1.0, high=5000.0)
    segment_length_m: float = setting(50.0, "m", "Maximum length of an asset segment.",
                                      low=1.0, high=1000.0)
    min_separation_m: float = setting(1.0, "m", "Separation floor at crossings (no log of"
                                      " zero).", low=0.01, high=100.0)
    parallel_angle_deg: float = setting(
        10.0, "deg", "Largest angle between asset and line still classed parallel (common"
        " practice).", low=0.0, high=45.0)
    oblique_ratio: float = setting(
        3.0, "-", "Largest ratio of the separations at the two ends of an oblique section"
        " (ITU-T Directives practice).", low=1.1, high=10.0)
    default_soil_resistivity_ohm_m: float = setting(
        100.0, "Ω·m", "Soil resistivity where no soil polygon covers a segment.",
        low=0.1, high=1e5)
    limit_set: str = setting("iec_en", "-", "Limit set: the name of a shipped set"
                             " (corridor/data/limits/) or of a plugin's, or a path.")
    arrangements: str = setting(
        "arrangements.toml", "path", "Tower and conductor arrangements file, relative to the"
        " config file. When the setting is left out and no such file lies beside the config,"
        " the example arrangements shipped with corridor are used.")
    use_kind_defaults: bool = setting(
        True, "-", "Missing asset values (NULL or blank) take the kind's default (with a"
        " warning, counted in run.json) instead of rejecting the feature. A field the layer"
        " lacks always takes the default (counted too); a present but invalid value always"
        " rejects the feature.")
    accept_rejected_lines: bool = setting(
        False, "-", "A rejected power line does not change the exit code: set it only when"
        " leaving such lines out is intended. The report still names every rejected line.")
    tower_span_m: float = setting(300.0, "m", "Assumed tower spacing when no tower layer is"
                                  " given.", low=10.0, high=2000.0)
    tower_zone_m: float = setting(1000.0, "m", "Largest distance from a faulted tower at which"
                                  " its earth potential is computed (the zone of influence ends"
                                  " sooner where the potential falls below"
                                  " tower_zone_threshold_v).", low=1.0, high=5000.0)
    tower_zone_threshold_v: float = setting(
        50.0, "V", "Earth potential at which a faulted tower's zone of influence ends,"
        " r = ρI/(2πV) (project default; docs/methods.md §4.5).", low=0.1, high=1e5)
    tower_current_share: float = setting(
        0.0, "-", "Share of the fault current discharged by the faulted tower's footing;"
        " 0: from the earth-wire ladder with the local soil and footing_radius_m"
        " (docs/methods.md §4.3).", low=0.0, high=1.0)
    footing_radius_m: float = setting(1.0, "m", "Equivalent hemispherical radius of a tower"
                                      " footing.", low=0.05, high=50.0)
    outage_scenario: bool = setting(
        True, "-", "Normal load: also take each circuit of a multi-circuit line out of"
        " service in turn, the others carrying the line's total, and keep the worse case"
        " (docs/methods.md §8).")
    grounding_menu_ohm: tuple[float, ...] = setting(
        (10.0, 5.0, 2.0, 1.0), "Ω", "Ground resistances the grounding design may choose,"
        " easiest first.", dtype="float_list")
    output_formats: tuple[str, ...] = setting(
        ("gpkg",), "-", "Output layer formats: 'gpkg' always, plus 'fgb' (FlatGeobuf) and/or"
        " 'parquet' (GeoParquet), one file per layer.", choices=("gpkg", "fgb", "parquet"),
        dtype="str_list")
    max_sites_per_asset: int = setting(6, "-", "Largest number of grounding sites proposed on"
                                       " one asset.", low=1, high=100)
    threads: int = setting(
        0, "-", "Threads of the local backend: partitions of whole assets computed side by"
        " side, rows identical to one thread; 0: up to 2 when the run has 300,000 segments or"
        " more, else 1.", low=0, high=64)
    cache_dir: str = setting(
        "auto", "path", "Cache of per-asset results for incremental reruns (GeoParquet + JSON"
        " index; safe to delete). 'auto': the folder '<output folder>.cache' beside the"
        " output folder; '': no cache; any other value: a folder relative to the config"
        " file.")
    change_threshold: float = setting(
        0.1, "-", "Change of an asset's worst utilization since the previous run that"
        " changes.csv reports as moved.", low=0.0, high=100.0)
    backend: str = setting(
        "local", "-", "Where the per-asset compute runs: 'local' (this process) or 'dask' (a"
        " dask.distributed cluster, spatial partitions of whole assets; needs the 'dask'"
        " extra).")
    scheduler_address: str = setting(
        "", "-", "Dask scheduler to use with backend 'dask' (e.g."
        " 'tcp://scheduler.example:8786'); '': start a LocalCluster on this machine for the"
        " run.")
    dask_workers: int = setting(2, "-", "Workers of the LocalCluster started when"
                                " scheduler_address is empty (one thread each).",
                                low=1, high=256)
    dask_processes: bool = setting(
        True, "-", "LocalCluster workers are processes (true) or threads of this process"
        " (false; GEOS and LAPACK release the GIL).")
    partitions: int = setting(
        0, "-", "Spatial partitions of whole assets. Backend 'dask', 0: max(2, estimated"
        " segments / 500,000). Backend 'local', 0: one piece below 300,000 segments on one"
        " thread, else max(threads, estimated segments / 250,000), so that peak memory stays"
        " bounded.", low=0, high=100000)
    work_dir: str = setting(
        "", "path", "Folder for the partition files of backend 'dask', relative to the config"
        " file; must be reachable by every worker. '': beside the output folder.")

    def as_dict(self) -> dict[str, Any]:
        """Every setting as plain JSON-ready data (lists for tuples), in declaration order."""
        return {name: _plain(getattr(self, name)) for name in RUN_SETTINGS}

    def replace(self, **changes: Any) -> RunSettings:
        """A copy with ``changes`` (validated; ValueError naming the setting)."""
        problems = []
        for key, value in changes.items():
            spec = RUN_SETTINGS.get(key)
            if spec is None:
                problems.append(f"run.{key}: unknown setting")
                continue
            changes[key], problem = spec.validate(value)
            if problem:
                problems.append(f"run.{key}: {problem}")
        if problems:
            raise ValueError("; ".join(problems))
        return dataclasses.replace(self, **changes)


def _run_specs() -> dict[str, Spec]:
    out = {}
    for f in dataclasses.fields(RunSettings):
        dtype, default, low, high, choices, doc, unit = f.metadata["spec"]
        out[f.name] = Spec(f.name, dtype, default, low, high, choices, doc, unit)
    return out


#: Every run setting: name -> :class:`Spec`, in declaration order.
RUN_SETTINGS: Mapping[str, Spec] = _run_specs()


class FrozenMap(Mapping):
    """A read-only mapping that pickles as it is (unlike ``types.MappingProxyType``)."""

    def __init__(self, data: Mapping | None = None, /, **kw: Any):
        self._data = dict(data or {}, **kw)

    def __getitem__(self, key: Any) -> Any:
        return self._data[key]

    def __iter__(self) -> Iterator:
        return iter(self._data)

    def __len__(self) -> int:
        return len(self._data)

    def __repr__(self) -> str:
        return f"FrozenMap({self._data!r})"
