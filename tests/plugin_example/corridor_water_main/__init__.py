"""Example corridor plugin: buried ductile-iron water mains.

Installing this distribution makes ``water_main`` an asset kind (``kind =
"water_main"`` in ``[[layers.assets]]``, ``[defaults.water_main]``) and adds
the limit set ``water_main_en`` (``run.limit_set = "water_main_en"``).

Model
-----
A ductile-iron barrel under loose polyethylene sleeving, treated like a
coated pipe: series impedance z = Z_int + Z_earth with the finite-wall
internal impedance of the iron (μr, ρ_iron) and the earth-return self
impedance of a conductor on the surface (a main 1–2 m deep is treated as
lying on the surface, common practice); shunt admittance y = πD/r_sleeve,
the sleeving's leakage conductance per metre (docs/methods.md §5 form). The
sleeving's capacitance (ωC of a few µS/m) is left out beside πD/r_sleeve of
about 1 mS/m.

The main is taken as electrically continuous. Push-on joints with rubber
gaskets usually are not (common practice: they break the main into pipe
lengths unless bonded), so a continuous main is the conservative screening
case: it gathers the EMF of the whole exposure.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from corridor.physics import conductors, earth_return
from corridor.schema import FieldSpec

KIND = "water_main"

FIELDS = (
    FieldSpec("diameter_m", "float", low=0.05, high=2.5,
              doc="Outer diameter of the barrel [m]."),
    FieldSpec("wall_thickness_m", "float", low=0.003, high=0.05,
              doc="Iron wall thickness [m]."),
    FieldSpec("sleeve_resistance_ohm_m2", "float", low=0.1, high=1e7,
              doc="Specific leakage resistance of the polyethylene sleeving [Ω·m²]."),
    FieldSpec("iron_relative_permeability", "float", low=1.0, high=1000.0,
              doc="Relative permeability of the ductile iron [-]."),
    FieldSpec("iron_resistivity_ohm_m", "float", low=1e-8, high=1e-5,
              doc="Resistivity of the ductile iron [Ω·m]."),
)

DEFAULTS = {
    "height_m": -1.2,  # depth of cover of a water main, 1.0-1.5 m for frost (common practice)
    "termination_resistance_ohm": 10.0,  # a grounded end (common practice, as for pipelines)
    "diameter_m": 0.326,  # DN 300 ductile-iron pipe, EN 545 outside diameter 326 mm (from memory)
    # EN 545 class K9 nominal wall e = 9·(0.5 + 0.001·DN) mm = 7.2 mm at DN 300 (from memory)
    "wall_thickness_m": 0.0072,
    # loose PE sleeving is not a bonded coating: water gets under it; an order of
    # magnitude only, 1e3 Ω·m² (from memory)
    "sleeve_resistance_ohm_m2": 1.0e3,
    "iron_relative_permeability": 100.0,  # ductile iron, about 100 (from memory)
    "iron_resistivity_ohm_m": 6.0e-7,  # ductile iron 0.5-0.7 µΩ·m (from memory)
}


def water_main_constants(segments):
    """Line constants of the water-main segments.

    Parameters
    ----------
    segments : corridor.registry.KindSegments
        The run's ``water_main`` segments.

    Returns
    -------
    z_ohm_per_m : ndarray of complex
        Series impedance [Ω/m].
    y_s_per_m : ndarray of complex
        Shunt admittance [S/m].

    Notes
    -----
    z = Z_int(D, t, ρ_iron, μr) + Z_earth(D/2),   y = πD/r_sleeve.
    """
    f = segments.frequency_hz
    d = segments.column("diameter_m", DEFAULTS["diameter_m"])
    zint = conductors.pipe_internal_impedance(
        d, steel_resistivity_ohm_m=segments.column("iron_resistivity_ohm_m",
                                                   DEFAULTS["iron_resistivity_ohm_m"]),
        relative_permeability=segments.column("iron_relative_permeability",
                                              DEFAULTS["iron_relative_permeability"]),
        frequency_hz=f,
        wall_thickness_m=segments.column("wall_thickness_m", DEFAULTS["wall_thickness_m"]))
    zext = earth_return.self_impedance(segments.height_m, d / 2, 0.0,
                                       segments.soil_resistivity_ohm_m, f)
    r_sleeve = segments.column("sleeve_resistance_ohm_m2", DEFAULTS["sleeve_resistance_ohm_m2"])
    y = np.pi * d / r_sleeve + 0j
    return np.asarray(zint + zext, dtype=complex), y


def register(registry):
    """Entry point of the ``corridor.plugins`` group."""
    registry.add_asset_kind(
        KIND, fields=FIELDS, defaults=DEFAULTS, line_constants=water_main_constants,
        terminations=("continuing", "continuing"),  # mains run on beyond the data
        above_ground=False, description="buried ductile-iron water main under PE sleeving")
    registry.add_limit_sets(Path(__file__).parent / "limits")
