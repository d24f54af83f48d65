"""Registry of asset kinds, coupling models and limit sets, extended by plugins.

A plugin is an installed distribution that declares an entry point in the
group ``corridor.plugins``. Its value names a callable ``register(registry)``
that adds what the plugin brings through the methods of :class:`Registry`:

.. code-block:: toml

    # the plugin's pyproject.toml
    [project.entry-points."corridor.plugins"]
    water_main = "corridor_water_main:register"

.. code-block:: python

    def register(registry):
        registry.add_asset_kind("water_main", fields=(...), defaults={...},
                                line_constants=water_main_constants,
                                terminations=("continuing", "continuing"),
                                above_ground=False)
        registry.add_limit_sets(Path(__file__).parent / "limits")

Plugins are loaded once per process, lazily: when a run configuration is
loaded (:func:`corridor.config.load_config`) or when the asset-kind tables of
:mod:`corridor.schema` are first consulted. A plugin that fails to import or
to register is rolled back completely and reported as a
:class:`~corridor.errors.ConfigError` naming the plugin (and its entry point)
on every later configuration load, so a broken plugin is never half-applied
and never silently ignored.

Who consults the registry
-------------------------
- :mod:`corridor.schema` — ``ASSET_KINDS``, ``KIND_FIELDS`` and
  ``KIND_DEFAULTS`` are live views of the registered kinds, so config
  validation (kinds, ``[defaults.<kind>]``, field names) and the layer reader
  see plugin kinds without change;
- :func:`corridor.steps.respond.line_constants` dispatches each kind's
  segments to the kind's ``line_constants`` callable;
- :func:`corridor.config.load_config` resolves ``run.limit_set`` names
  provided by plugins to their files;
- the limit-set validator's list of asset kinds
  (``corridor.limits.limit_sets.ASSET_KINDS``) is kept equal to the
  registered kinds, so a plugin's limit set may name its own kind in
  ``applies_to``.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import logging
import re
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np

from corridor.errors import ConfigError

log = logging.getLogger(__name__)

#: Entry-point group plugins declare.
ENTRY_POINT_GROUP = "corridor.plugins"

_NAME_RE = re.compile(r"^[a-z][a-z0-9_]*$")
_DTYPES = ("float", "int", "str", "bool")


@dataclass(frozen=True)
class KindSegments:
    """The segments of one asset kind, as its line-constant model sees them.

    Attributes
    ----------
    kind : str
        The asset kind.
    frequency_hz : float
        System frequency [Hz].
    soil_resistivity_ohm_m : ndarray, shape (n,)
        Soil resistivity under each segment [Ω·m].
    height_m : ndarray, shape (n,)
        Height of the conductor above ground [m]; negative is depth of burial.
    assets : DataFrame
        The run's asset table (one row per asset, every kind).
    feature : ndarray of int, shape (n,)
        Row of ``assets`` each segment belongs to.
    """

    kind: str
    frequency_hz: float
    soil_resistivity_ohm_m: np.ndarray
    height_m: np.ndarray
    assets: Any
    feature: np.ndarray

    def __len__(self) -> int:
        return len(self.feature)

    def column(self, name: str, default) -> np.ndarray:
        """Per-segment values of asset attribute ``name``; missing or NaN take ``default``."""
        from corridor.steps.respond import asset_column

        return asset_column(self.assets, name, default)[self.feature]


#: A kind's line-constant model: ``fn(segments: KindSegments)`` returning
#: ``(z_ohm_per_m, y_s_per_m)`` or ``(z_ohm_per_m, y_s_per_m, emf_scale)``,
#: arrays of shape (n,) (complex series impedance [Ω/m], complex shunt
#: admittance [S/m], real EMF scale factor [-], default 1).
LineConstantFn = Callable[[KindSegments], tuple]


@dataclass(frozen=True)
class AssetKind:
    """One asset kind: its attributes, defaults and response model.

    Attributes
    ----------
    name : str
        Lower-case identifier used in configs and layers (``asset_kind``).
    fields : tuple of FieldSpec
        The kind's own attributes (the common ones — ``asset_id``,
        ``height_m``, terminations — come from :mod:`corridor.schema`).
    defaults : Mapping
        Default of every attribute but ``asset_id``; each value's provenance
        belongs in a comment where it is written.
    line_constants : callable
        See :data:`LineConstantFn`.
    terminations : tuple of (str, str)
        Default (start, end) terminations: ``open``, ``grounded``,
        ``continuing``.
    above_ground : bool
        True for a conductor carried above ground (electric-field coupling
        applies); its default ``height_m`` must then be positive, otherwise
        zero or negative.
    description : str
        One line for listings.
    plugin : str
        Entry-point name of the plugin that added the kind; ``""`` built in.
    """

    name: str
    fields: tuple
    defaults: Mapping
    line_constants: LineConstantFn | None
    terminations: tuple[str, str]
    above_ground: bool
    description: str = ""
    plugin: str = ""


@dataclass
class _PluginRecord:
    name: str
    value: str
    version: str
    undo: list[Callable[[], None]] = field(default_factory=list)


def _builtin_kinds() -> dict[str, AssetKind]:
    from corridor import schema

    descriptions = {
        "pipeline": "coated buried steel pipeline",
        "fence": "wire fence on metal or wooden posts",
        "rail": "railway track, both rails in parallel",
        "telecom": "telecom cable: the pair against earth, sheath as a screening factor",
    }
    out = {}
    for name in schema.BUILTIN_ASSET_KINDS:
        d = schema.BUILTIN_KIND_DEFAULTS[name]
        out[name] = AssetKind(
            name=name, fields=schema.BUILTIN_KIND_FIELDS[name],
            defaults=MappingProxyType(dict(d)),
            line_constants=None,  # resolved lazily: corridor.steps.respond.BUILTIN_LINE_CONSTANTS
            terminations=(d["start_termination"], d["end_termination"]),
            above_ground=float(d["height_m"]) > 0, description=descriptions[name])
    return out


class Registry:
    """What corridor can screen: asset kinds, limit-set folders, coupling methods.

    Use the module-level :data:`registry`; plugins receive it in
    ``register(registry)``.
    """

    def __init__(self):
        self._kinds: dict[str, AssetKind] = {}
        self._limit_dirs: list[tuple[Path, str]] = []
        self._plugins: dict[str, _PluginRecord] = {}
        self._current: _PluginRecord | None = None
        self._loaded = False
        self._loading = False
        self._errors: list[str] = []

    # ------------------------------------------------------------------ kinds
    def _ensure_builtins(self) -> None:
        if not self._kinds:
            self._kinds.update(_builtin_kinds())

    def kind_names(self) -> tuple[str, ...]:
        """Registered asset kinds, built-ins first, then in registration order."""
        ensure_loaded()
        self._ensure_builtins()
        return tuple(self._kinds)

    def kind(self, name: str) -> AssetKind:
        """The :class:`AssetKind` called ``name`` (KeyError if unknown)."""
        ensure_loaded()
        self._ensure_builtins()
        return self._kinds[name]

    def kinds(self) -> tuple[AssetKind, ...]:
        ensure_loaded()
        self._ensure_builtins()
        return tuple(self._kinds.values())

    def line_constant_model(self, name: str) -> LineConstantFn:
        """The line-constant callable of kind ``name``."""
        k = self.kind(name)
        if k.line_constants is not None:
            return k.line_constants
        from corridor.steps.respond import BUILTIN_LINE_CONSTANTS

        return BUILTIN_LINE_CONSTANTS[name]

    def add_asset_kind(self, name: str, fields: Iterable, defaults: Mapping,
                       line_constants: LineConstantFn,
                       terminations: tuple[str, str] = ("open", "open"),
                       above_ground: bool = False, description: str = "") -> None:
        """Add an asset kind.

        Parameters
        ----------
        name : str
            Lower-case identifier, not already registered.
        fields : iterable of FieldSpec
            The kind's own attributes; names carry their unit and may not
            repeat a common attribute (``asset_id``, ``height_m``,
            ``start_termination``, ``end_termination``,
            ``termination_resistance_ohm``).
        defaults : mapping
            A valid default for every attribute but ``asset_id`` (the common
            ones included; ``start_termination``/``end_termination`` may be
            left out and come from ``terminations``).
        line_constants : callable
            See :data:`LineConstantFn`.
        terminations : (str, str)
            Default (start, end) terminations.
        above_ground : bool
            Conductor carried above ground.
        description : str
            One line for listings.

        Raises
        ------
        ConfigError
            Listing every problem with the declaration.
        """
        from corridor.config import _check_value
        from corridor.schema import COMMON_ASSET_FIELDS, TERMINATIONS, FieldSpec

        self._ensure_builtins()
        problems: list[str] = []
        where = f"asset kind {name!r}"
        if not isinstance(name, str) or not _NAME_RE.match(name):
            raise ConfigError(f"{where}: the name must be a lower-case identifier")
        if name in self._kinds:
            raise ConfigError(f"{where}: already registered"
                              f" ({self._kinds[name].plugin or 'built in'})")
        fields = tuple(fields)
        common = {s.name for s in COMMON_ASSET_FIELDS}
        seen: set[str] = set()
        for s in fields:
            if not isinstance(s, FieldSpec):
                problems.append(f"{where}: fields: {s!r} is not a corridor.schema.FieldSpec")
                continue
            if s.name in common or s.name in seen or s.name == "asset_kind":
                problems.append(f"{where}: field {s.name!r} repeats a common or earlier field")
            if s.dtype not in _DTYPES:
                problems.append(f"{where}: field {s.name!r}: dtype {s.dtype!r} is not one of"
                                f" {', '.join(_DTYPES)}")
            seen.add(s.name)
        if not callable(line_constants):
            problems.append(f"{where}: line_constants must be callable")
        terms = tuple(terminations)
        if len(terms) != 2 or any(t not in TERMINATIONS for t in terms):
            problems.append(f"{where}: terminations: expected two of {', '.join(TERMINATIONS)},"
                            f" got {terminations!r}")
            terms = ("open", "open")
        merged = {"start_termination": terms[0], "end_termination": terms[1],
                  **dict(defaults)}
        specs = {s.name: s for s in (*COMMON_ASSET_FIELDS, *fields) if isinstance(s, FieldSpec)}
        for key, value in merged.items():
            if key not in specs or key == "asset_id":
                problems.append(f"{where}: defaults.{key}: not a field of the kind")
                continue
            if specs[key].dtype == "float" and isinstance(value, int) and not isinstance(
                    value, bool):
                value = float(value)
                merged[key] = value
            err = _check_value(value, specs[key])
            if err:
                problems.append(f"{where}: defaults.{key}: {err}")
        for key in specs:
            if key != "asset_id" and key not in merged:
                problems.append(f"{where}: defaults.{key}: missing (every field needs a default)")
        height = merged.get("height_m")
        if isinstance(height, float) and bool(above_ground) != (height > 0):
            problems.append(f"{where}: above_ground={bool(above_ground)} contradicts the default"
                            f" height_m = {height} m")
        if problems:
            raise ConfigError(problems)
        plugin = self._current.name if self._current else ""
        self._kinds[name] = AssetKind(name, fields, MappingProxyType(merged), line_constants,
                                      (merged["start_termination"], merged["end_termination"]),
                                      bool(above_ground), description, plugin)
        self._sync_limit_kinds()

        def undo():
            self._kinds.pop(name, None)
            self._sync_limit_kinds()

        self._record(undo)

    def _sync_limit_kinds(self) -> None:
        # The limit-set validator checks ``applies_to`` against its module-level
        # tuple; keep it equal to the registered kinds.
        from corridor.limits import limit_sets

        limit_sets.ASSET_KINDS = tuple(self._kinds)

    # ------------------------------------------------------------- limit sets
    def add_limit_sets(self, directory: str | Path) -> None:
        """Make every ``*.toml`` limit set in ``directory`` available by name.

        Raises
        ------
        ConfigError
            The folder does not exist, holds no ``.toml`` file, or a name is
            already taken (by ``config/limits/`` or another plugin).
        """
        d = Path(directory).resolve()
        if not d.is_dir():
            raise ConfigError(f"limit-set folder {d}: not found")
        names = sorted(p.stem for p in d.glob("*.toml"))
        if not names:
            raise ConfigError(f"limit-set folder {d}: holds no .toml file")
        taken = set(self.limit_set_names())
        clash = [n for n in names if n in taken]
        if clash:
            raise ConfigError(f"limit-set folder {d}: name(s) already taken: {', '.join(clash)}")
        entry = (d, self._current.name if self._current else "")
        self._limit_dirs.append(entry)
        self._record(lambda: self._limit_dirs.remove(entry))

    def limit_set_names(self) -> tuple[str, ...]:
        """Names of the shipped limit sets and those plugins add."""
        from corridor.limits.limit_sets import available_limit_sets
        from corridor.steps import LIMITS_DIR

        names = list(available_limit_sets(LIMITS_DIR))
        for d, _plugin in self._limit_dirs:
            names.extend(sorted(p.stem for p in d.glob("*.toml")))
        return tuple(names)

    def resolve_limit_set(self, name: str) -> str:
        """The file of a plugin's limit set ``name``; anything else unchanged."""
        for d, _plugin in self._limit_dirs:
            path = d / f"{name}.toml"
            if path.is_file():
                return str(path)
        return name

    # -------------------------------------------------------- coupling models
    def add_mutual_impedance_method(self, name: str, fn: Callable, *,
                                    replace: bool = False) -> None:
        """Add (or, with ``replace=True``, replace) an earth-return method.

        ``fn(big_d, small_d, theta, m, w, rho, f)`` with the arguments of
        :data:`corridor.physics.earth_return.MUTUAL_IMPEDANCE_METHODS`
        (distance to the image [m], direct distance [m], angle [rad],
        √(ωμ0/ρ) [1/m], ω [rad/s], ρ [Ω·m], f [Hz]) returns Z [Ω/m]. The
        production dispatcher uses the entries named ``low_frequency``,
        ``surface`` and ``carson_table``; replacing one of those changes
        every run, a new name only makes the method available to code that
        asks for it.
        """
        from corridor.physics import earth_return

        self._add_to_dict(earth_return.MUTUAL_IMPEDANCE_METHODS, name, fn, replace,
                          "mutual-impedance method")

    def _add_to_dict(self, table: dict, name: str, fn: Callable, replace: bool,
                     what: str) -> None:
        if not isinstance(name, str) or not _NAME_RE.match(name):
            raise ConfigError(f"{what} {name!r}: the name must be a lower-case identifier")
        if not callable(fn):
            raise ConfigError(f"{what} {name!r}: not callable")
        if name in table and not replace:
            raise ConfigError(f"{what} {name!r}: already registered (pass replace=True)")
        missing = object()
        old = table.get(name, missing)
        table[name] = fn

        def undo():
            if old is missing:
                table.pop(name, None)
            else:
                table[name] = old

        self._record(undo)

    # ---------------------------------------------------------------- plugins
    def _record(self, undo: Callable[[], None]) -> None:
        if self._current is not None:
            self._current.undo.append(undo)

    def plugins(self) -> dict[str, str]:
        """Loaded plugins: entry-point name -> ``distribution version (value)``."""
        return {p.name: f"{p.version} ({p.value})" for p in self._plugins.values()}

    def fingerprint(self) -> str:
        """Short hash of the loaded plugins and their versions (for caches and records)."""
        text = ";".join(f"{p.name}={p.version}:{p.value}" for p in self._plugins.values())
        return hashlib.sha256(text.encode()).hexdigest()[:12]

    def load(self, entry_points: Iterable | None = None) -> None:
        """Load every plugin once; failures are kept and raised by :meth:`check`."""
        if self._loaded or self._loading:
            return
        self._loading = True
        try:
            self._ensure_builtins()
            if entry_points is None:
                entry_points = importlib.metadata.entry_points(group=ENTRY_POINT_GROUP)
            for ep in sorted(entry_points, key=lambda e: e.name):
                self._load_one(ep)
            self._loaded = True
        finally:
            self._loading = False

    def _load_one(self, ep) -> None:
        dist = getattr(ep, "dist", None)
        version = f"{dist.name} {dist.version}" if dist is not None else "?"
        label = f"plugin {ep.name!r} (entry point {ep.value!r} in group {ENTRY_POINT_GROUP!r})"
        if ep.name in self._plugins:
            self._errors.append(f"{label}: a plugin of that name is already loaded")
            return
        rec = _PluginRecord(ep.name, ep.value, version)
        self._current = rec
        try:
            fn = ep.load()
            if not callable(fn):
                raise ConfigError(f"{ep.value} is not callable")
            fn(self)
        except ConfigError as exc:
            self._rollback(rec)
            self._errors.extend(f"{label}: {p}" for p in exc.problems)
        except Exception as exc:  # a plugin may fail in any way; report it by name
            self._rollback(rec)
            self._errors.append(f"{label}: failed to load: {type(exc).__name__}: {exc}")
        else:
            self._plugins[ep.name] = rec
            log.debug("loaded %s, %s", label, version)
        finally:
            self._current = None

    @staticmethod
    def _rollback(rec: _PluginRecord) -> None:
        for undo in reversed(rec.undo):
            undo()
        rec.undo.clear()

    def check(self) -> None:
        """Raise the plugin failures (if any) as one :class:`ConfigError`."""
        if self._errors:
            raise ConfigError(list(self._errors))

    def unload(self) -> None:
        """Undo every plugin and forget the load (tests, or a fresh scan)."""
        for rec in reversed(list(self._plugins.values())):
            self._rollback(rec)
        self._plugins.clear()
        self._errors.clear()
        self._loaded = False


#: The process-wide registry.
registry = Registry()


def ensure_loaded() -> None:
    """Load the installed plugins if not done yet (never raises; see :func:`load_plugins`)."""
    registry.load()


def load_plugins(entry_points: Iterable | None = None) -> Registry:
    """Load the installed plugins once and raise any plugin failure.

    Parameters
    ----------
    entry_points : iterable of importlib.metadata.EntryPoint, optional
        Instead of the installed ``corridor.plugins`` entry points (tests).

    Raises
    ------
    ConfigError
        A plugin failed to import or register; every message names the plugin.
    """
    registry.load(entry_points)
    registry.check()
    return registry
