"""Earth-return impedances of long parallel conductors over homogeneous or two-layer soil.

All functions take array_like inputs that broadcast against each other and
return complex phasor impedances per unit length [Ω/m]. Heights are metres
above the earth surface; a height ≤ 0 (buried or on the surface) is treated
as the surface, the common practice for shallow buried assets.

Symbols used throughout: ω = 2πf, m = √(ωμ0/ρ) [1/m], d = √(x² + (hi−hj)²),
D = √(x² + (hi+hj)²), dimensionless r = D·m and θ = atan(x/(hi+hj)), and
Z = jωμ0/(2π)·[ln(D/d) + 2J(r, θ)] with Carson's integral J from
:mod:`corridor.physics.carson` (its names are importable from here too).
Sunde's two-layer correction lives in :mod:`corridor.physics._two_layer`;
helpers both use are in :mod:`corridor.physics._earth_common`.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from corridor.physics._earth_common import (
    MIN_SEPARATION_M,
    image_geometry,
    layer_resistivities,
    omega_rad_per_s,
    reference_resistivity_ohm_m,
    wavenumber_per_m,
)
from corridor.physics._two_layer import _two_layer_correction_ohm_per_m
from corridor.physics.carson import (
    CarsonTable,
    carson_correction_dimensionless,
    carson_correction_fast,
    carson_correction_table,
)
from corridor.physics.constants import EULER_GAMMA, MU0_H_PER_M

__all__ = [
    "LOW_FREQUENCY_K_BOUND",
    "MIN_SEPARATION_M",
    "CarsonTable",
    "carson_correction_dimensionless",
    "carson_correction_fast",
    "carson_correction_table",
    "equivalent_earth_depth_m",
    "low_frequency_mutual_impedance",
    "mutual_impedance",
    "self_impedance",
    "surface_mutual_impedance",
]

#: Largest k = D·√(ωμ0/ρ) at which the low-frequency form stays within 1 % of
#: Carson's integral for every angle θ, in the worst geometry ln(D/d) = 0
#: (any ln(D/d) > 0 only lowers the relative error). Found numerically by
#: bisection on max_θ |Z_LF − Z_Carson|/|Z_Carson| = 0.01 (see
#: ``test_low_frequency_bound_is_where_error_reaches_one_percent`` in
#: tests/physics/test_earth_return.py); the worst angle is θ = 0. In typical
#: geometries, where ln(D/d) > 0, the error stays near 1 % up to k ≈ 0.2 (from memory).
LOW_FREQUENCY_K_BOUND = 0.056

#: Exact constant of De = C·√(ρ/f): C = 2·e^{1/2−γ}/√(8π²·10⁻⁷) ≈ 658.87 [m·√(Hz/(Ω·m))].
EQUIVALENT_DEPTH_CONSTANT = 2.0 * math.exp(0.5 - EULER_GAMMA) / math.sqrt(
    2.0 * math.pi * MU0_H_PER_M
)


def equivalent_earth_depth_m(soil_resistivity_ohm_m, frequency_hz):
    """Depth of the equivalent earth-return conductor De [m].

    Parameters
    ----------
    soil_resistivity_ohm_m : array_like
        Soil resistivity ρ [Ω·m].
    frequency_hz : array_like
        Frequency f [Hz].

    Returns
    -------
    ndarray
        De [m].

    Notes
    -----
    De = 2e^{1/2−γ}/√(ωμ0/ρ) = 658.87·√(ρ/f) (γ Euler's constant), from the
    constant term of Carson's series; textbooks round it to 658.9·√(ρ/f).

    References
    ----------
    .. [1] T. Gönen, Electric Power Transmission System Engineering.
    .. [2] J. R. Carson, Bell System Technical Journal 5, 1926.
    """
    rho = np.asarray(soil_resistivity_ohm_m, float)
    return EQUIVALENT_DEPTH_CONSTANT * np.sqrt(rho / np.asarray(frequency_hz, float))


def low_frequency_mutual_impedance(separation_m, soil_resistivity_ohm_m, frequency_hz):
    """Low-frequency (modified Carson) earth-return mutual impedance.

    Parameters
    ----------
    separation_m : array_like
        Direct distance d between the conductors (or GMR for self terms) [m].
    soil_resistivity_ohm_m : array_like
        Soil resistivity ρ [Ω·m].
    frequency_hz : array_like
        Frequency f [Hz].

    Returns
    -------
    ndarray of complex
        Impedance per unit length [Ω/m].

    Notes
    -----
    Z = ωμ0/8 + j(ωμ0/2π)·ln(De/d), De from :func:`equivalent_earth_depth_m`.
    At 50 Hz: 0.0493 + j0.1447·log10(De/d) Ω/km. Valid only while
    k = D·√(ωμ0/ρ) ≤ :data:`LOW_FREQUENCY_K_BOUND` (1 %); its reactance turns
    negative for d > De, where the exact integral stays positive.

    References
    ----------
    .. [1] T. Gönen, Electric Power Transmission System Engineering.
    .. [2] W. H. Kersting, Distribution System Modeling and Analysis, ch. 4.
    """
    w = omega_rad_per_s(frequency_hz)
    d = np.maximum(np.asarray(separation_m, float), MIN_SEPARATION_M)
    de = equivalent_earth_depth_m(soil_resistivity_ohm_m, frequency_hz)
    return w * MU0_H_PER_M / 8.0 + 1j * w * MU0_H_PER_M / (2 * np.pi) * np.log(de / d)


def _one_minus_z_k1_over_z2(z):
    """(1 − z·K1(z))/z², by series for |z| ≤ 1 and scipy.special.kv beyond."""
    z = np.asarray(z, dtype=complex)
    out = np.empty_like(z)
    small = np.abs(z) <= 1.0
    zs = z[small]
    if zs.size:
        # z·K1(z) = 1 + Σ_k (z²/4)^k/(k!(k+1)!)·(z²/2)[ln(z/2) − (ψ(k+1)+ψ(k+2))/2]
        q = 0.25 * zs * zs
        lg = np.log(0.5 * zs)
        acc = np.zeros_like(zs)
        term = np.ones_like(zs)
        for k in range(12):
            if k:
                term = term * q / (k * (k + 1))
            acc = acc + term * (lg - 0.5 * (special.digamma(k + 1) + special.digamma(k + 2)))
        out[small] = -0.5 * acc
    zl = z[~small]
    if zl.size:
        out[~small] = (1.0 - zl * special.kv(1, zl)) / (zl * zl)
    return out


def surface_mutual_impedance(separation_m, soil_resistivity_ohm_m, frequency_hz):
    """Mutual impedance of two earth-return conductors on the earth surface.

    Parameters
    ----------
    separation_m : array_like
        Horizontal distance a between the conductors [m] (> 0; floored at
        :data:`MIN_SEPARATION_M`).
    soil_resistivity_ohm_m : array_like
        Soil resistivity ρ [Ω·m].
    frequency_hz : array_like
        Frequency f [Hz].

    Returns
    -------
    ndarray of complex
        Mutual impedance per unit length [Ω/m].

    Notes
    -----
    Z(a) = ρ/(πa²)·[1 − γa·K₁(γa)], γ = √(jωμ0/ρ). Written as
    Z = (ρ/π)·γ²·(1 − zK₁(z))/z², z = γa, so small a needs no cancellation:
    a power series of zK₁(z) is used for |z| ≤ 1 (limit: the LF form
    ωμ0/8 + j(ωμ0/2π)ln(De/a)). Far field: Z → ρ/(πa²). Equals Carson's
    integral at hi = hj = 0.

    References
    ----------
    .. [1] E. D. Sunde, Earth Conduction Effects in Transmission Systems,
       Dover, 1968.
    """
    a = np.maximum(np.asarray(separation_m, float), MIN_SEPARATION_M)
    rho = np.asarray(soil_resistivity_ohm_m, float)
    gamma2 = 1j * omega_rad_per_s(frequency_hz) * MU0_H_PER_M / rho
    a, rho, gamma2 = np.broadcast_arrays(a, rho, gamma2)
    z = np.sqrt(gamma2) * a
    with np.errstate(under="ignore"):
        return rho / np.pi * gamma2 * _one_minus_z_k1_over_z2(z)


# -- Production dispatcher ------------------------------------------------------


def _method_low_frequency(big_d, small_d, theta, m, w, rho, f):
    return low_frequency_mutual_impedance(small_d, rho, f)


def _method_surface(big_d, small_d, theta, m, w, rho, f):
    return surface_mutual_impedance(small_d, rho, f)


def _method_carson_table(big_d, small_d, theta, m, w, rho, f):
    jcar = carson_correction_fast(big_d * m, theta)
    return (1j * MU0_H_PER_M / (2 * np.pi)) * w * (np.log(big_d / small_d) + 2.0 * jcar)


#: Methods the dispatcher chooses from, by name.
MUTUAL_IMPEDANCE_METHODS = {
    "low_frequency": _method_low_frequency,
    "surface": _method_surface,
    "carson_table": _method_carson_table,
}


def mutual_impedance(
    height_i_m,
    height_j_m,
    horizontal_offset_m,
    soil_resistivity_ohm_m,
    frequency_hz,
    *,
    low_frequency_k_bound=LOW_FREQUENCY_K_BOUND,
    bottom_resistivity_ohm_m=None,
    top_thickness_m=None,
):
    """Production earth-return mutual impedance, choosing the method per pair.

    Parameters
    ----------
    height_i_m, height_j_m : array_like
        Heights above ground [m]; ≤ 0 (buried or surface) is taken as the
        surface (common practice for shallow buried assets).
    horizontal_offset_m : array_like
        Horizontal distance [m].
    soil_resistivity_ohm_m : array_like
        Soil resistivity [Ω·m]; with a two-layer soil, the top layer's ρ₁.
    frequency_hz : array_like
        Frequency [Hz].
    low_frequency_k_bound : float, optional
        Use the LF form where k = D·√(ωμ0/ρ) ≤ this (default
        :data:`LOW_FREQUENCY_K_BOUND`, the 1 % bound); pass 0 to use the
        exact forms everywhere.
    bottom_resistivity_ohm_m : array_like, optional
        Resistivity ρ₂ below the top layer [Ω·m]; None or NaN: homogeneous.
    top_thickness_m : array_like, optional
        Thickness t of the top layer [m]; None or NaN: homogeneous.

    Returns
    -------
    ndarray of complex
        Mutual impedance per unit length [Ω/m].

    Notes
    -----
    Per pair: k ≤ bound → ωμ0/8 + j(ωμ0/2π)ln(De/d); both heights ≤ 0 →
    Sunde's closed form ρ/(πa²)[1 − γaK₁(γa)]; otherwise Carson's integral
    from the cached table. The three are looked up by name
    (``low_frequency``, ``surface``, ``carson_table``) in
    :data:`MUTUAL_IMPEDANCE_METHODS`. A two-layer soil adds Sunde's layered
    correction jωμ0/π·ΔJ(D, θ) to the homogeneous value in ρ₁, from a cached
    per-soil table (:mod:`corridor.physics._two_layer`, docs/methods.md §9).

    References
    ----------
    .. [1] J. R. Carson, Bell System Technical Journal 5, 1926.
    .. [2] E. D. Sunde, Earth Conduction Effects in Transmission Systems, 1968.
    """
    hi = np.asarray(height_i_m, float)
    hj = np.asarray(height_j_m, float)
    big_d, small_d, theta = image_geometry(hi, hj, horizontal_offset_m)
    rho_top = np.asarray(soil_resistivity_ohm_m, float)
    f = np.asarray(frequency_hz, float)
    rho2, t_top = layer_resistivities(rho_top, bottom_resistivity_ohm_m, top_thickness_m)
    # the homogeneous part uses the two-layer correction's reference soil
    rho = reference_resistivity_ohm_m(rho_top, rho2, t_top, f)
    m = wavenumber_per_m(rho, f)
    w = omega_rad_per_s(f)
    arrays = np.broadcast_arrays(big_d, small_d, theta, m, w, rho, f, hi, hj, rho2, t_top,
                                 rho_top)
    shape = arrays[0].shape
    big_d, small_d, theta, m, w, rho, f, hi, hj, rho2, t_top, rho_top = (
        a.ravel() for a in arrays)
    k = big_d * m
    # the low-frequency form's 1 % would add to the layered correction's error: exact
    # forms only under a two-layer soil
    layered = (rho2 != rho_top) & np.isfinite(t_top)
    choice = np.where(
        (k <= low_frequency_k_bound) & ~layered, 0, np.where((hi <= 0.0) & (hj <= 0.0), 1, 2)
    )
    out = np.empty(k.shape, dtype=complex)
    for code, name in enumerate(("low_frequency", "surface", "carson_table")):
        sel = choice == code
        if sel.all():
            out = MUTUAL_IMPEDANCE_METHODS[name](big_d, small_d, theta, m, w, rho, f)
            break
        if sel.any():
            out[sel] = MUTUAL_IMPEDANCE_METHODS[name](
                big_d[sel], small_d[sel], theta[sel], m[sel], w[sel], rho[sel], f[sel]
            )
    if bottom_resistivity_ohm_m is not None:
        out = out + _two_layer_correction_ohm_per_m(big_d, theta, rho_top, rho2, t_top, f)
    return out.reshape(shape)


def self_impedance(
    height_m, radius_or_gmr_m, internal_impedance_ohm_per_m, soil_resistivity_ohm_m, frequency_hz,
    *, bottom_resistivity_ohm_m=None, top_thickness_m=None,
):
    """Self impedance of an earth-return conductor [Ω/m].

    Parameters
    ----------
    height_m : array_like
        Height above ground [m]; ≤ 0 is taken as the surface.
    radius_or_gmr_m : array_like
        Outer radius (then pass the internal impedance) or the geometric
        mean radius (then pass the resistance only, the GMR already holds the
        internal reactance) [m].
    internal_impedance_ohm_per_m : array_like
        Internal impedance (or AC resistance with a GMR) [Ω/m].
    soil_resistivity_ohm_m, frequency_hz : array_like
        Soil resistivity [Ω·m] (two-layer soil: the top layer's), frequency [Hz].
    bottom_resistivity_ohm_m, top_thickness_m : array_like, optional
        Two-layer soil: ρ₂ [Ω·m] and the top layer's thickness [m] (see
        :func:`mutual_impedance`); None or NaN: homogeneous.

    Returns
    -------
    ndarray of complex
        Self impedance per unit length [Ω/m].

    Notes
    -----
    Overhead: Carson's integral with d → radius/GMR and D → 2h (via
    :func:`mutual_impedance` with x = 0, hi = hj = h), plus the internal term.
    Surface/buried: Sunde's surface form with a = radius. For a ≪ De it
    equals ωμ0/8 + j(ωμ0/2π)ln(De/a) (its small-argument limit), so the two
    choices agree; the closed form is kept because it stays exact for thick
    conductors in very low resistivity soil.

    References
    ----------
    .. [1] J. R. Carson, Bell System Technical Journal 5, 1926.
    .. [2] E. D. Sunde, Earth Conduction Effects in Transmission Systems, 1968.
    """
    h = np.asarray(height_m, float)
    a = np.asarray(radius_or_gmr_m, float)
    zint = np.asarray(internal_impedance_ohm_per_m, complex)
    rho_top = np.asarray(soil_resistivity_ohm_m, float)
    if bottom_resistivity_ohm_m is not None:
        rho2, t_top = layer_resistivities(rho_top, bottom_resistivity_ohm_m, top_thickness_m)
        rho_ref = reference_resistivity_ohm_m(rho_top, rho2, t_top, np.asarray(frequency_hz, float))
    else:
        rho_ref = rho_top
    h, a, rho, f = np.broadcast_arrays(
        h, a, rho_ref, np.asarray(frequency_hz, float)
    )
    out = np.empty(h.shape, dtype=complex)
    above = h > 0
    if above.any():
        # d = GMR, D = 2h: give the dispatcher a vertical "pair" h ± GMR/2... exactly:
        hp = h[above]
        ap = a[above]
        big_d = 2 * hp
        m = wavenumber_per_m(rho[above], f[above])
        k = big_d * m
        w = omega_rad_per_s(f[above])
        lf = k <= LOW_FREQUENCY_K_BOUND
        zz = np.empty(hp.shape, dtype=complex)
        zz[lf] = low_frequency_mutual_impedance(ap[lf], rho[above][lf], f[above][lf])
        nl = ~lf
        if nl.any():
            jcar = carson_correction_fast(k[nl], np.zeros(int(nl.sum())))
            zz[nl] = (1j * MU0_H_PER_M / (2 * np.pi)) * w[nl] * (
                np.log(big_d[nl] / ap[nl]) + 2.0 * jcar
            )
        out[above] = zz
    if (~above).any():
        out[~above] = surface_mutual_impedance(a[~above], rho[~above], f[~above])
    if bottom_resistivity_ohm_m is not None:
        big_d = np.where(above, 2.0 * np.maximum(h, 0.0), np.maximum(a, MIN_SEPARATION_M))
        theta = np.where(above, 0.0, 0.5 * np.pi)
        out = out + _two_layer_correction_ohm_per_m(big_d, theta, rho_top, rho2, t_top,
                                                    f).reshape(out.shape)
    return out + zint
