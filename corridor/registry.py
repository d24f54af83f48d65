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
loaded (:func:`corridor.config.load_config`) or when the registry is first
asked for its kinds. What a plugin registers is staged and joins the
registry only when its ``register`` returns; a plugin that fails to import
or to register leaves nothing behind and is reported as a
:class:`~corridor.errors.ConfigError` naming the plugin (and its entry point)
on every later configuration load, so a broken plugin is never half-applied
and never silently ignored.

The registry is the only store of the kinds and plugin limit sets; every
consumer asks it and nothing is copied into other modules:

- config validation (kinds, ``[defaults.<kind>]``, field names) and the
  layer reader: :meth:`Registry.kind_names`, :meth:`Registry.kind`,
  :meth:`Registry.asset_fields`;
- :func:`corridor.steps.respond.line_constants`: each kind's
  ``line_constants``; the stages act on the kinds' capabilities
  (:class:`corridor.kinds.AssetKind`), never on their names;
- :func:`corridor.config.load_config`: plugin ``run.limit_set`` names;
- the limit-set loader is handed :meth:`Registry.kind_names`, so a plugin's
  limit set may name its own kind in ``applies_to``.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import logging
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType

from corridor.errors import ConfigError
from corridor.kinds import AssetKind, KindSegments, LineConstantFn, RadiusFrom, builtin_kinds
from corridor.limits.limit_sets import DEFAULT_SEARCH_DIR, available_limit_sets
from corridor.schema import COMMON_ASSET_FIELDS, TERMINATIONS
from corridor.settings import Spec

__all__ = ["AssetKind", "KindSegments", "LineConstantFn", "RadiusFrom", "Registry", "registry",
           "ensure_loaded", "load_plugins", "ENTRY_POINT_GROUP"]

log = logging.getLogger(__name__)

#: Entry-point group plugins declare.
ENTRY_POINT_GROUP = "corridor.plugins"

_NAME_RE = re.compile(r"^[a-z][a-z0-9_]*$")
_DTYPES = ("float", "int", "str", "bool")


@dataclass
class _PluginRecord:
    """A plugin being loaded: what it registers is staged here until it succeeds."""

    name: str
    value: str
    version: str
    kinds: dict[str, AssetKind] = field(default_factory=dict)
    limit_dirs: list[tuple[Path, str]] = field(default_factory=list)


class Registry:
    """What corridor can screen: asset kinds and limit-set folders.

    Use the module-level :data:`registry`; plugins receive it in
    ``register(registry)``.
    """

    def __init__(self):
        self._kinds: dict[str, AssetKind] = builtin_kinds()
        self._limit_dirs: list[tuple[Path, str]] = []
        self._plugins: dict[str, _PluginRecord] = {}
        self._current: _PluginRecord | None = None
        self._loaded = False
        self._loading = False
        self._errors: list[str] = []

    # ------------------------------------------------------------------ kinds
    def kind_names(self) -> tuple[str, ...]:
        """Registered asset kinds, built-ins first, then in registration order."""
        ensure_loaded()
        return tuple(self._kinds)

    def kind(self, name: str) -> AssetKind:
        """The :class:`AssetKind` called ``name`` (KeyError if unknown)."""
        ensure_loaded()
        return self._kinds[name]

    def kinds(self) -> tuple[AssetKind, ...]:
        """Every registered :class:`AssetKind`, in :meth:`kind_names` order."""
        ensure_loaded()
        return tuple(self._kinds.values())

    def asset_fields(self, name: str) -> tuple[Spec, ...]:
        """Every field spec of an asset of kind ``name``: the common ones, then its own."""
        return COMMON_ASSET_FIELDS + tuple(self.kind(name).fields)

    def add_asset_kind(self, name: str, fields: Iterable, defaults: Mapping,
                       line_constants: LineConstantFn,
                       terminations: tuple[str, str] = ("open", "open"),
                       above_ground: bool = False, description: str = "", *,
                       coated: bool = False, section_emf: bool = False,
                       radius: RadiusFrom | None = None,
                       grounding_terminations: tuple[str, Mapping] | None = None) -> None:
        """Add an asset kind.

        Parameters
        ----------
        name : str
            Lower-case identifier, not already registered.
        fields : iterable of Spec
            The kind's own attributes (``corridor.schema.FieldSpec``); names
            carry their unit and may not repeat a common attribute
            (``asset_id``, ``height_m``, ``start_termination``,
            ``end_termination``, ``termination_resistance_ohm``).
        defaults : mapping
            A valid default for every attribute but ``asset_id`` (the common
            ones included; ``start_termination``/``end_termination`` may be
            left out and come from ``terminations``).
        line_constants : callable
            See :data:`corridor.kinds.LineConstantFn`.
        terminations : (str, str)
            Default (start, end) terminations.
        above_ground : bool
            Conductor carried above ground (electric-field coupling applies).
        description : str
            One line for listings.
        coated, section_emf, radius, grounding_terminations
            Capabilities, see :class:`corridor.kinds.AssetKind`.

        Raises
        ------
        ConfigError
            Listing every problem with the declaration.
        """
        problems: list[str] = []
        where = f"asset kind {name!r}"
        if not isinstance(name, str) or not _NAME_RE.match(name):
            raise ConfigError(f"{where}: the name must be a lower-case identifier")
        staged = self._current.kinds if self._current is not None else {}
        if name in self._kinds or name in staged:
            owner = self._kinds[name].plugin if name in self._kinds else ""
            raise ConfigError(f"{where}: already registered ({owner or 'built in'})")
        fields = tuple(fields)
        common = {s.name for s in COMMON_ASSET_FIELDS}
        seen: set[str] = set()
        for s in fields:
            if not isinstance(s, Spec):
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
        if radius is not None and not isinstance(radius, RadiusFrom):
            problems.append(f"{where}: radius: expected a corridor.kinds.RadiusFrom")
        merged = {"start_termination": terms[0], "end_termination": terms[1],
                  **dict(defaults)}
        specs = {s.name: s for s in (*COMMON_ASSET_FIELDS, *fields) if isinstance(s, Spec)}
        for key, value in merged.items():
            if key not in specs or key == "asset_id":
                problems.append(f"{where}: defaults.{key}: not a field of the kind")
                continue
            merged[key], err = specs[key].validate(value)
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
        kind = AssetKind(
            name, fields, MappingProxyType(merged), line_constants,
            (merged["start_termination"], merged["end_termination"]), bool(above_ground),
            coated=bool(coated), section_emf=bool(section_emf), radius=radius,
            grounding_terminations=grounding_terminations, description=description,
            plugin=self._current.name if self._current is not None else "")
        (staged if self._current is not None else self._kinds)[name] = kind

    # ------------------------------------------------------------- limit sets
    def add_limit_sets(self, directory: str | Path) -> None:
        """Make every ``*.toml`` limit set in ``directory`` available by name.

        Raises
        ------
        ConfigError
            The folder does not exist, holds no ``.toml`` file, or a name is
            already taken (by a shipped set or another plugin).
        """
        d = Path(directory).resolve()
        if not d.is_dir():
            raise ConfigError(f"limit-set folder {d}: not found")
        names = sorted(p.stem for p in d.glob("*.toml"))
        if not names:
            raise ConfigError(f"limit-set folder {d}: holds no .toml file")
        taken = set(self.limit_set_names())
        for staged, _plugin in (self._current.limit_dirs if self._current else []):
            taken.update(p.stem for p in staged.glob("*.toml"))
        clash = [n for n in names if n in taken]
        if clash:
            raise ConfigError(f"limit-set folder {d}: name(s) already taken: {', '.join(clash)}")
        entry = (d, self._current.name if self._current else "")
        (self._current.limit_dirs if self._current is not None else self._limit_dirs).append(
            entry)

    def limit_set_names(self) -> tuple[str, ...]:
        """Names of the shipped limit sets and those plugins add."""
        names = list(available_limit_sets(DEFAULT_SEARCH_DIR))
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

    # ---------------------------------------------------------------- plugins
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
            self._errors.extend(f"{label}: {p}" for p in exc.problems)
        except Exception as exc:  # a plugin may fail in any way; report it by name
            self._errors.append(f"{label}: failed to load: {type(exc).__name__}: {exc}")
        else:  # only a plugin that registered completely joins the registry
            self._kinds.update(rec.kinds)
            self._limit_dirs.extend(rec.limit_dirs)
            self._plugins[ep.name] = rec
            log.debug("loaded %s, %s", label, version)
        finally:
            self._current = None

    def check(self) -> None:
        """Raise the plugin failures (if any) as one :class:`ConfigError`."""
        if self._errors:
            raise ConfigError(list(self._errors))

    def unload(self) -> None:
        """Forget every plugin and what it registered (tests, or a fresh scan)."""
        for name in [k for k, v in self._kinds.items() if v.plugin in self._plugins]:
            del self._kinds[name]
        self._limit_dirs = [e for e in self._limit_dirs if e[1] not in self._plugins]
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
