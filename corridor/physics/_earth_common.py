"""Helpers shared by the earth-return impedances and the two-layer soil kernel.

Package-internal (used by :mod:`corridor.physics.earth_return` and
:mod:`corridor.physics._two_layer`): angular frequency, the soil wavenumber,
the image geometry of a conductor pair, and the reading of a two-layer soil's
arguments (which layer the homogeneous part of the impedance is taken in).
Symbols as in :mod:`corridor.physics.earth_return`.
"""

from __future__ import annotations

import numpy as np

from corridor.physics.constants import MU0_H_PER_M

__all__ = [
    "MIN_SEPARATION_M",
    "image_geometry",
    "layer_resistivities",
    "omega_rad_per_s",
    "reference_is_bottom",
    "reference_resistivity_ohm_m",
    "wavenumber_per_m",
]

#: Separations below this are floored to it to keep ln(D/d) finite [m].
MIN_SEPARATION_M = 1e-6


def omega_rad_per_s(frequency_hz):
    """Angular frequency ω = 2πf [rad/s] of ``frequency_hz`` [Hz]."""
    return 2.0 * np.pi * np.asarray(frequency_hz, dtype=float)


def wavenumber_per_m(soil_resistivity_ohm_m, frequency_hz):
    """m = √(ωμ0/ρ) [1/m] of a soil of resistivity ρ [Ω·m] at ``frequency_hz`` [Hz]."""
    return np.sqrt(omega_rad_per_s(frequency_hz) * MU0_H_PER_M
                   / np.asarray(soil_resistivity_ohm_m, float))


def image_geometry(height_i_m, height_j_m, horizontal_offset_m):
    """Image distance D, direct distance d [m] and angle θ [rad] of a conductor pair.

    Heights ≤ 0 are taken as the surface; D and d are floored at
    :data:`MIN_SEPARATION_M`; θ = atan(x/(hi+hj)).
    """
    hi = np.maximum(np.asarray(height_i_m, float), 0.0)
    hj = np.maximum(np.asarray(height_j_m, float), 0.0)
    x = np.abs(np.asarray(horizontal_offset_m, float))
    big_d = np.maximum(np.hypot(x, hi + hj), MIN_SEPARATION_M)
    small_d = np.maximum(np.hypot(x, hi - hj), MIN_SEPARATION_M)
    theta = np.arctan2(x, hi + hj)
    return big_d, small_d, theta


def layer_resistivities(rho, bottom_resistivity_ohm_m, top_thickness_m):
    """Bottom resistivity ρ₂ [Ω·m] and top thickness t [m], homogeneous where unset.

    None or NaN gives ρ₂ = ρ and t = ∞ (a homogeneous soil); a thickness
    ≤ 0 raises ``ValueError``.
    """
    rho2 = rho if bottom_resistivity_ohm_m is None else np.asarray(bottom_resistivity_ohm_m, float)
    t = np.inf if top_thickness_m is None else np.asarray(top_thickness_m, float)
    rho2 = np.where(np.isfinite(rho2), rho2, rho)
    if np.any(np.asarray(t) <= 0):
        raise ValueError("top_thickness_m: must be > 0")
    t = np.where(np.isfinite(t), t, np.inf)
    return rho2, t


def reference_is_bottom(rho1, rho2, thickness_m, f):
    """Whether the homogeneous reference of a two-layer soil is the bottom layer.

    A top layer thinner than 1/m₁ = √(ρ₁/(ωμ0)) (about 0.7 skin depths) barely
    changes the earth-return path; the correction to the bottom-layer value
    is then small, and so is its interpolation error. Otherwise the top layer
    is the reference.
    """
    return thickness_m * np.sqrt(2.0 * np.pi * f * MU0_H_PER_M / rho1) < 1.0


def reference_resistivity_ohm_m(rho_top, rho2, t_top, f):
    """Resistivity of the homogeneous part: ρ₂ where :func:`reference_is_bottom`, else ρ₁."""
    layered = (rho_top != rho2) & np.isfinite(t_top)
    with np.errstate(invalid="ignore"):
        bottom = layered & reference_is_bottom(rho_top, rho2, np.where(layered, t_top, 1.0), f)
    return np.where(bottom, rho2, rho_top)
