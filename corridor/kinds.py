"""Asset kinds: what a kind declares, and the four kinds corridor ships with.

A kind declares its fields and defaults, its line-constant model and its
*capabilities*: the facts the stages act on instead of the kind's name
(above ground, coated, judged by the section EMF, ...). A kind a plugin
registers (:meth:`corridor.registry.Registry.add_asset_kind`) gets the same
treatment as a built-in one with the same capabilities.

The registry (:mod:`corridor.registry`) holds the kinds; this module only
defines them.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

import numpy as np

from corridor import schema
from corridor.network import asset_models


def asset_column(assets, name: str, default) -> np.ndarray:
    """Values of asset attribute ``name``, one per asset; missing or NaN take ``default``."""
    if name in assets:
        v = assets[name].to_numpy()
        try:
            v = v.astype(float)
            return np.where(np.isfinite(v), v, default)
        except (TypeError, ValueError):
            return np.where(v == v, v, default)
    return np.full(len(assets), default)


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
        return asset_column(self.assets, name, default)[self.feature]


#: A kind's line-constant model: ``fn(segments: KindSegments)`` returning
#: ``(z_ohm_per_m, y_s_per_m)`` or ``(z_ohm_per_m, y_s_per_m, emf_scale)``,
#: arrays of shape (n,) (complex series impedance [Ω/m], complex shunt
#: admittance [S/m], real EMF scale factor [-], default 1).
LineConstantFn = Callable[[KindSegments], tuple]


@dataclass(frozen=True)
class RadiusFrom:
    """Where a kind's equivalent radius for electric-field coupling comes from.

    radius [m] = ``factor`` × the asset's ``column`` (``missing`` where the
    value is missing), e.g. half the diameter of a pipe (docs/methods.md §3.2).
    """

    column: str
    missing: float
    factor: float = 1.0


#: Equivalent radius of an asset whose kind declares none [m] (common practice).
DEFAULT_RADIUS_M = 0.01


@dataclass(frozen=True)
class AssetKind:
    """One asset kind: its attributes, defaults, response model and capabilities.

    Attributes
    ----------
    name : str
        Lower-case identifier used in configs and layers (``asset_kind``).
    fields : tuple of Spec
        The kind's own attributes (the common ones — ``asset_id``,
        ``height_m``, terminations — come from :mod:`corridor.schema`).
    defaults : Mapping
        Default of every attribute but ``asset_id``.
    line_constants : callable
        See :data:`LineConstantFn`.
    terminations : tuple of (str, str)
        Default (start, end) terminations: ``open``, ``grounded``,
        ``continuing``.
    above_ground : bool
        Capability: a conductor carried above ground. Electric-field
        coupling applies to it whatever its ``height_m`` (and to any asset
        with a positive ``height_m``).
    coated : bool
        Capability: a coated metal pipe. The coating stress (fault voltage
        plus earth potential rise) and the AC current density at a coating
        holiday (docs/methods.md §6.1, §6.8) are judged, and a ground proposed on a cathodically
        protected asset (``cathodic_protection`` true) connects through a
        DC decoupling device.
    section_emf : bool
        Capability: judged by the longitudinal EMF summed between its
        grounded ends (the ITU-T Directives' quantity for telecom lines,
        docs/methods.md §6.6).
    radius : RadiusFrom or None
        Capability: equivalent radius for electric-field coupling; None
        takes :data:`DEFAULT_RADIUS_M`.
    grounding_terminations : (str, Mapping) or None
        Capability: terminations set by an attribute instead of
        ``start_termination``/``end_termination``: the attribute's name and
        a map of its value -> (start, end).
    description : str
        One line for listings.
    plugin : str
        Entry-point name of the plugin that added the kind; ``""`` built in.
    """

    name: str
    fields: tuple
    defaults: Mapping
    line_constants: LineConstantFn
    terminations: tuple[str, str]
    above_ground: bool
    coated: bool = False
    section_emf: bool = False
    radius: RadiusFrom | None = None
    grounding_terminations: tuple[str, Mapping] | None = None
    description: str = ""
    plugin: str = ""


# The built-in kinds: each reads its columns (missing or NaN take the
# default) and hands the arrays to its model in corridor.network.asset_models.
def _pipeline_constants(s: KindSegments):
    """Coated buried steel pipeline (:func:`asset_models.pipeline_line_constants`)."""
    return asset_models.pipeline_line_constants(
        s.column("diameter_m", 0.508), s.column("wall_thickness_m", 0.0095),
        s.column("coating_resistance_ohm_m2", 1e5), s.height_m, s.soil_resistivity_ohm_m,
        s.frequency_hz, steel_relative_permeability=s.column("steel_relative_permeability",
                                                             300.0))


def _fence_constants(s: KindSegments):
    """Wire fence (:func:`asset_models.fence_line_constants`)."""
    return asset_models.fence_line_constants(
        s.column("wire_count", 4).astype(np.int64), s.column("wire_radius_m", 0.00125),
        s.column("post_spacing_m", 3.0), s.column("post_resistance_ohm", 100.0),
        s.column("post_type", "metal").astype(str), s.height_m, s.soil_resistivity_ohm_m,
        s.frequency_hz)


def _rail_constants(s: KindSegments):
    """Railway track (:func:`asset_models.rail_line_constants`)."""
    return asset_models.rail_line_constants(
        s.column("ballast_resistance_ohm_km", 5.0), s.column("rail_resistance_ohm_per_km", 0.03),
        s.soil_resistivity_ohm_m, s.frequency_hz)


def _telecom_constants(s: KindSegments):
    """Telecom pair against earth; the EMF is scaled by the sheath screening factor."""
    lc = asset_models.telecom_line_constants(s.column("conductor_radius_m", 0.01), s.height_m,
                                             s.soil_resistivity_ohm_m, s.frequency_hz)
    return lc.z_ohm_per_m, lc.y_s_per_m, s.column("screening_factor", 1.0)


def builtin_kinds() -> dict[str, AssetKind]:
    """The four kinds corridor ships with, by name, in listing order."""
    models: dict[str, LineConstantFn] = {
        "pipeline": _pipeline_constants, "fence": _fence_constants,
        "rail": _rail_constants, "telecom": _telecom_constants}
    capabilities: dict[str, dict[str, Any]] = {
        "pipeline": {"coated": True, "radius": RadiusFrom("diameter_m", 0.5, 0.5),
                     "description": "coated buried steel pipeline"},
        "fence": {"radius": RadiusFrom("wire_radius_m", 0.00125),
                  "description": "wire fence on metal or wooden posts"},
        "rail": {"description": "railway track, both rails in parallel"},
        "telecom": {"section_emf": True, "radius": RadiusFrom("conductor_radius_m", 0.01),
                    "grounding_terminations": (
                        "cable_grounding",
                        MappingProxyType(dict(asset_models.TELECOM_GROUNDING_TERMINATIONS))),
                    "description": "telecom cable: the pair against earth, sheath as a"
                                   " screening factor"},
    }
    out = {}
    for name in schema.BUILTIN_ASSET_KINDS:
        d = schema.BUILTIN_KIND_DEFAULTS[name]
        out[name] = AssetKind(
            name=name, fields=schema.BUILTIN_KIND_FIELDS[name],
            defaults=MappingProxyType(dict(d)), line_constants=models[name],
            terminations=(str(d["start_termination"]), str(d["end_termination"])),
            above_ground=float(d["height_m"]) > 0,  # type: ignore[arg-type]
            **capabilities[name])
    return out
