"""Internal impedances of line conductors, steel pipes and rails.

Arrays in, arrays out; complex phasors [Ω/m]. The internal impedance is what
:func:`corridor.physics.earth_return.self_impedance` adds to the external
(earth-return) term when the conductor's outer radius is used as ``d``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from corridor.physics.constants import MU0_H_PER_M

__all__ = [
    "RailEquivalent",
    "pipe_internal_impedance",
    "rail_equivalent",
    "skin_depth_m",
]


def skin_depth_m(resistivity_ohm_m, relative_permeability, frequency_hz):
    """Skin depth δ = √(2ρ/(ωμ0μr)) [m].

    Parameters
    ----------
    resistivity_ohm_m : array_like
        Metal resistivity [Ω·m].
    relative_permeability : array_like
        μr [-].
    frequency_hz : array_like
        Frequency [Hz].

    Returns
    -------
    ndarray
        Skin depth [m].

    References
    ----------
    .. [1] S. Ramo, J. R. Whinnery, T. Van Duzer, Fields and Waves in
       Communication Electronics, §5.
    """
    w = 2 * np.pi * np.asarray(frequency_hz, float)
    mu_r = np.asarray(relative_permeability, float)
    return np.sqrt(2 * np.asarray(resistivity_ohm_m, float) / (w * MU0_H_PER_M * mu_r))


def pipe_internal_impedance(
    outer_diameter_m,
    wall_thickness_m,
    steel_resistivity_ohm_m=1.7e-7,
    relative_permeability=300.0,
    frequency_hz=50.0,
):
    """Internal impedance of a steel pipe with the current returning outside.

    Parameters
    ----------
    outer_diameter_m : array_like
        Outer diameter D [m].
    wall_thickness_m : array_like
        Wall thickness t [m].
    steel_resistivity_ohm_m : array_like
        Steel resistivity [Ω·m] (default 1.7e-7, memory).
    relative_permeability : array_like
        μr of the steel [-] (default 300, memory).
    frequency_hz : array_like
        Frequency [Hz].

    Returns
    -------
    ndarray of complex
        Internal impedance per unit length [Ω/m].

    Notes
    -----
    Finite wall, field on the outer face only: Z = ρ·q·coth(q t)/(πD),
    q = (1+j)/δ, δ = √(2ρ/(ωμ0μr)). For t ≫ δ it tends to the thin-skin form
    Z = ρ(1+j)/(πDδ) (coth → 1, within 0.1 % once t > 3.8δ); for t ≪ δ to the
    DC value ρ/(πDt). Curvature is neglected (δ ≪ D).

    References
    ----------
    .. [1] CIGRE Technical Brochure 95, Guide on the influence of high
       voltage AC power systems on metallic pipelines, 1995 (memory).
    .. [2] S. Ramo, J. R. Whinnery, T. Van Duzer, Fields and Waves in
       Communication Electronics (surface impedance of a conducting slab).
    """
    dia = np.asarray(outer_diameter_m, float)
    rho = np.asarray(steel_resistivity_ohm_m, float)
    delta = skin_depth_m(rho, relative_permeability, frequency_hz)
    q = (1 + 1j) / delta
    t = np.asarray(wall_thickness_m, float)
    qt = q * t
    # coth(qt) = (1 + e^{-2qt})/(1 − e^{-2qt}), stable for large qt
    e2 = np.exp(-2.0 * np.minimum(qt.real, 350.0) - 2j * qt.imag)
    return rho * q * (1 + e2) / (1 - e2) / (np.pi * dia)


@dataclass(frozen=True)
class RailEquivalent:
    """Equivalent round conductor of one running rail (all values from memory).

    Attributes
    ----------
    equivalent_radius_m : float
        Radius of the circle with the rail's perimeter, used as ``d`` for the
        external inductance [m].
    dc_resistance_ohm_per_m : float
        DC resistance of one rail [Ω/m].
    internal_impedance_ohm_per_m : complex
        Internal AC impedance at ``frequency_hz`` [Ω/m].
    frequency_hz : float
        Frequency the internal impedance was computed for [Hz].
    """

    equivalent_radius_m: float
    dc_resistance_ohm_per_m: float
    internal_impedance_ohm_per_m: complex
    frequency_hz: float


def rail_equivalent(
    perimeter_m=0.69,
    cross_section_m2=7.67e-3,
    steel_resistivity_ohm_m=2.2e-7,
    relative_permeability=100.0,
    frequency_hz=50.0,
):
    """Equivalent conductor of a flat-bottom rail (defaults: a 60 kg/m rail).

    Parameters
    ----------
    perimeter_m : float
        Rail perimeter [m] (≈0.69 m for a 60 kg/m UIC60-type rail, memory).
    cross_section_m2 : float
        Steel cross-section [m²] (≈76.7 cm² for UIC60, memory).
    steel_resistivity_ohm_m : float
        Rail steel resistivity [Ω·m] (≈2.2e-7, memory).
    relative_permeability : float
        Effective μr of rail steel at traction currents [-] (≈100, memory;
        falls at high currents by saturation).
    frequency_hz : float
        Frequency [Hz].

    Returns
    -------
    RailEquivalent
        Equivalent radius, DC resistance and internal impedance.

    Notes
    -----
    r_eq = p/(2π); R_dc = ρ/A; Z_int = ρ(1+j)/(p·δ) (skin effect, current
    returning outside the rail, δ ≪ rail dimensions). With the defaults at
    50 Hz: δ ≈ 3.3 mm, Z_int ≈ 0.096 + j0.096 Ω/km, R_dc ≈ 0.029 Ω/km —
    in the range quoted for single rails (≈0.1–0.2 Ω/km at 50 Hz, memory).

    References
    ----------
    .. [1] UIC 60 rail profile data, EN 13674-1 (dimensions, memory).
    """
    delta = float(skin_depth_m(steel_resistivity_ohm_m, relative_permeability, frequency_hz))
    z_int = steel_resistivity_ohm_m * (1 + 1j) / (perimeter_m * delta)
    return RailEquivalent(
        equivalent_radius_m=perimeter_m / (2 * math.pi),
        dc_resistance_ohm_per_m=steel_resistivity_ohm_m / cross_section_m2,
        internal_impedance_ohm_per_m=complex(z_int),
        frequency_hz=float(frequency_hz),
    )
