"""Line constants (z, y) of each asset kind.

Each model turns an asset's attributes into the series impedance z [Ω/m] and
shunt admittance y [S/m] of its earth-return circuit, ready for
:mod:`corridor.network.response`. All functions broadcast over numpy arrays
(one value per asset or per segment); these are the functions a production
run calls, through the kinds' entries in :mod:`corridor.steps.respond`.

The earth-return self impedance comes from the physics layer,
:func:`corridor.physics.earth_return.self_impedance` (Carson's integral
above ground, Sunde's surface form for buried conductors, the low-frequency
form where it is within 1 %); internal impedances from
:mod:`corridor.physics.conductors` or :func:`wire_internal_impedance`.

The terminations of chain ends are in :mod:`corridor.network.terminations`
(importable from here too).

Provenance of defaults: ``[memory]`` recalled, check before relying on it;
``[practice]`` common practice, no single source.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy import special

from corridor.errors import InputError
from corridor.network.terminations import (
    TELECOM_GROUNDING_TERMINATIONS,
    TERMINATION_MODELS,
    termination_admittance,
)
from corridor.physics import conductors, earth_return
from corridor.physics.constants import EPS0_F_PER_M, MU0_H_PER_M

__all__ = [
    "TELECOM_GROUNDING_TERMINATIONS",
    "TERMINATION_MODELS",
    "LineConstants",
    "coating_capacitance",
    "fence_line_constants",
    "pipeline_line_constants",
    "rail_line_constants",
    "telecom_line_constants",
    "termination_admittance",
    "wire_capacitance",
    "wire_internal_impedance",
]

#: Resistivity of pipe and fence steel [Ω·m] [memory].
STEEL_RESISTIVITY_OHM_M = 1.7e-7
#: Relative permeability of pipe steel [-] [memory].
PIPE_STEEL_RELATIVE_PERMEABILITY = 300.0
#: Relative permeability of galvanised fence wire [-]; order of magnitude [memory].
WIRE_STEEL_RELATIVE_PERMEABILITY = 100.0
#: Thickness of a three-layer PE coating [m] (2.5–3.7 mm) [practice].
PE_COATING_THICKNESS_M = 3.0e-3
#: Relative permittivity of polyethylene [-] (2.25–2.35) [memory].
PE_RELATIVE_PERMITTIVITY = 2.3
#: Lowest height used for a wire's capacitance to earth [m]: a wire lying on
#: the ground still has some capacitance [practice].
MIN_WIRE_HEIGHT_M = 0.1
#: Vertical spacing of fence wires for the bundle's geometric mean radius [m] [practice].
FENCE_WIRE_SPACING_M = 0.3
#: Resistance to earth of one post when none is given, by material [Ω]: a driven
#: steel post in 100 Ω·m soil about 100 Ω [memory]; a wooden post is no insulator
#: when wet, a few kΩ per post (1–10 kΩ; a dry, treated post can exceed 100 kΩ)
#: [memory]. The wet value is the one a screen takes [practice].
TYPICAL_POST_RESISTANCE_OHM = {"metal": 100.0, "wood": 5000.0}
#: Distance between the centres of the two rails of standard-gauge track [m]:
#: 1435 mm gauge plus a 72 mm rail head [memory].
RAIL_CENTRE_SPACING_M = 1.507
#: Track-to-earth (ballast) resistance of ballasted track, 2–20 Ω·km [memory].
BALLAST_RESISTANCE_OHM_KM = 5.0
#: A 0.6 mm copper pair, both wires in parallel: ρ_Cu/(2·π·(0.3 mm)²) [Ω/m]
#: with ρ_Cu = 1.72e-8 Ω·m (annealed copper) [practice].
PAIR_RESISTANCE_OHM_PER_M = 1.72e-8 / (2 * math.pi * 0.3e-3**2)
#: Capacitance of a cable conductor to sheath / earth, ≈ 50–100 nF/km [memory].
CABLE_CAPACITANCE_F_PER_M = 80e-12


class LineConstants(NamedTuple):
    """Per-unit-length constants of an earth-return circuit."""

    #: Series impedance [Ω/m].
    z_ohm_per_m: np.ndarray
    #: Shunt admittance to earth [S/m].
    y_s_per_m: np.ndarray


def _omega(frequency_hz):
    f = np.asarray(frequency_hz, dtype=float)
    if np.any(f <= 0):
        raise InputError("frequency_hz: must be > 0")
    return 2.0 * np.pi * f


# --------------------------------------------------------------------------
# Building blocks
# --------------------------------------------------------------------------
def wire_internal_impedance(radius_m, frequency_hz,
                            resistivity_ohm_m=STEEL_RESISTIVITY_OHM_M,
                            relative_permeability=WIRE_STEEL_RELATIVE_PERMEABILITY):
    """Internal impedance of a solid round wire, exact Bessel form.

    Parameters
    ----------
    radius_m : array_like
        Wire radius [m].
    frequency_hz : array_like
        Frequency [Hz].
    resistivity_ohm_m : array_like, optional
        Wire resistivity [Ω·m]; default steel 1.7e-7 [memory].
    relative_permeability : array_like, optional
        Relative permeability [-]; default 100 for galvanised steel wire [memory].

    Returns
    -------
    ndarray of complex
        Internal impedance per unit length [Ω/m].

    Notes
    -----
    Z = k·ρ/(2πr) · I0(kr)/I1(kr),  k = √(jωμ0μr/ρ); → ρ/(πr²) at low
    frequency and → (1 + j)/(2πr)·√(ωμρ/2) when the skin depth ≪ r.
    Exponentially scaled Bessel functions keep large kr finite.

    References
    ----------
    .. [1] S. Ramo, J. R. Whinnery, T. Van Duzer, Fields and Waves in
       Communication Electronics, Wiley (internal impedance of a round wire).
    """
    omega = _omega(frequency_hz)
    r = np.asarray(radius_m, dtype=float)
    rho = np.asarray(resistivity_ohm_m, dtype=float)
    k = np.sqrt(1j * omega * MU0_H_PER_M * np.asarray(relative_permeability) / rho)
    kr = k * r
    return k * rho / (2 * np.pi * r) * special.ive(0, kr) / special.ive(1, kr)


def coating_capacitance(diameter_m, coating_thickness_m=PE_COATING_THICKNESS_M,
                        coating_relative_permittivity=PE_RELATIVE_PERMITTIVITY):
    """Capacitance of a pipe coating per unit length.

    Parameters
    ----------
    diameter_m : array_like
        Outer steel diameter [m].
    coating_thickness_m : array_like, optional
        Coating thickness [m]; default 3 mm (3LPE) [practice].
    coating_relative_permittivity : array_like, optional
        Relative permittivity [-]; default 2.3 (PE) [memory].

    Returns
    -------
    ndarray of float
        Capacitance per unit length [F/m].

    Notes
    -----
    Coaxial capacitor: C = 2πε0εr/ln(1 + 2t/D) ≈ ε0εr·πD/t.
    """
    d = np.asarray(diameter_m, dtype=float)
    t = np.asarray(coating_thickness_m, dtype=float)
    eps_f_per_m = EPS0_F_PER_M * np.asarray(coating_relative_permittivity, dtype=float)
    return 2 * np.pi * eps_f_per_m / np.log1p(2 * t / d)


def wire_capacitance(height_m, radius_m):
    """Capacitance to earth of a horizontal wire above a conducting earth [F/m].

    Parameters
    ----------
    height_m : array_like
        Height of the wire [m]; heights below :data:`MIN_WIRE_HEIGHT_M`
        (0.1 m) are raised to it.
    radius_m : array_like
        Wire radius [m].

    Returns
    -------
    ndarray
        C = 2πε0/ln(2h/r) [F/m].

    References
    ----------
    .. [1] J. D. Glover, M. S. Sarma, T. Overbye, Power System Analysis and
       Design, ch. 4 (capacitance of a conductor above earth, method of
       images).
    """
    h = np.maximum(np.asarray(height_m, dtype=float), MIN_WIRE_HEIGHT_M)
    return 2 * np.pi * EPS0_F_PER_M / np.log(2 * h / np.asarray(radius_m, dtype=float))


# --------------------------------------------------------------------------
# Per-kind models
# --------------------------------------------------------------------------
def pipeline_line_constants(diameter_m, wall_thickness_m, coating_resistance_ohm_m2, height_m,
                            soil_resistivity_ohm_m, frequency_hz,
                            steel_relative_permeability=PIPE_STEEL_RELATIVE_PERMEABILITY,
                            steel_resistivity_ohm_m=STEEL_RESISTIVITY_OHM_M,
                            coating_thickness_m=PE_COATING_THICKNESS_M,
                            coating_relative_permittivity=PE_RELATIVE_PERMITTIVITY,
                            soil_layers=None):
    """Line constants of a coated buried steel pipeline.

    Parameters
    ----------
    diameter_m : array_like
        Outer diameter D [m].
    wall_thickness_m : array_like
        Steel wall thickness t [m].
    coating_resistance_ohm_m2 : array_like
        Specific coating resistance r_coat [Ω·m²] (1e4–1e6 for 3LPE/FBE,
        1e2–1e4 for bitumen/coal tar) [memory].
    height_m : array_like
        Height of the pipe axis [m]; negative is depth of burial (a pipe
        1–2 m deep is treated as lying on the surface [practice]).
    soil_resistivity_ohm_m : array_like
        Soil resistivity [Ω·m].
    frequency_hz : float
        Frequency [Hz].
    steel_relative_permeability, steel_resistivity_ohm_m : array_like, optional
        Steel μr [-] (default 300) and resistivity [Ω·m] (default 1.7e-7) [memory].
    coating_thickness_m, coating_relative_permittivity : array_like, optional
        See :func:`coating_capacitance`; pass ``coating_thickness_m=None`` to
        leave the coating capacitance out.
    soil_layers : dict, optional
        ``bottom_resistivity_ohm_m`` and ``top_thickness_m`` of a two-layer
        soil for the earth-return impedance (``soil_resistivity_ohm_m`` is
        then the top layer's).

    Returns
    -------
    LineConstants
        z [Ω/m] and y [S/m].

    Notes
    -----
    z = Z_int + Z_earth: the finite-wall internal impedance of the steel
    (:func:`corridor.physics.conductors.pipe_internal_impedance`) and the
    earth-return self impedance of a conductor of radius D/2
    (:func:`corridor.physics.earth_return.self_impedance`).
    y = πD/r_coat + jωC_coat: the coating's leakage conductance per metre
    (the coated area per metre is πD) and its capacitance. C_coat (≈ 11 nF/m
    for D = 0.5 m, 3 mm PE) adds ωC ≈ 4e-6 S/m, small beside πD/r_coat for
    ordinary coatings but dominant for r_coat ≳ 4e5 Ω·m².

    References
    ----------
    .. [1] CIGRE Technical Brochure 95, Guide on the influence of high
       voltage AC power systems on metallic pipelines, 1995 (memory).
    .. [2] E. D. Sunde, Earth Conduction Effects in Transmission Systems, 1968.
    """
    d = np.asarray(diameter_m, dtype=float)
    r_coat = np.asarray(coating_resistance_ohm_m2, dtype=float)
    if np.any(d <= 0) or np.any(r_coat <= 0):
        raise InputError("diameter_m and coating_resistance_ohm_m2: must be > 0")
    omega = _omega(frequency_hz)
    y = np.pi * d / r_coat + 0j
    if coating_thickness_m is not None:
        y = y + 1j * omega * coating_capacitance(d, coating_thickness_m,
                                                 coating_relative_permittivity)
    z_int = conductors.pipe_internal_impedance(
        d, steel_resistivity_ohm_m=steel_resistivity_ohm_m,
        relative_permeability=steel_relative_permeability, frequency_hz=frequency_hz,
        wall_thickness_m=wall_thickness_m)
    z_earth = earth_return.self_impedance(height_m, d / 2, 0.0, soil_resistivity_ohm_m,
                                          frequency_hz, **(soil_layers or {}))
    return LineConstants(np.asarray(z_int + z_earth, dtype=complex),
                         np.asarray(y, dtype=complex))


def _collinear_bundle_gmr_m(wire_count, wire_radius_m, wire_spacing_m):
    """Geometric mean radius of n equally spaced collinear wires [m].

    ln GMR = [n·ln r + 2·Σ_{k=1}^{n−1} (n − k)·ln(k·s)] / n².
    """
    n = np.asarray(wire_count, dtype=np.int64)
    if np.any(n < 1):
        raise InputError("wire_count: must be >= 1")
    k = np.arange(1, int(n.max()))
    # Σ_{k<n} (n−k)·ln k for every n, as a table indexed by n.
    table = np.concatenate(([0.0, 0.0], np.cumsum(np.cumsum(np.log(k)))))
    pair_log_k = table[n]
    pair_count = n * (n - 1) / 2  # Σ_{k<n} (n−k)
    log_gmr = (n * np.log(wire_radius_m)
               + 2 * (pair_log_k + pair_count * np.log(wire_spacing_m))) / n**2
    return np.exp(log_gmr)


def fence_line_constants(wire_count, wire_radius_m, post_spacing_m, post_resistance_ohm,
                         post_type, height_m, soil_resistivity_ohm_m, frequency_hz,
                         wire_spacing_m=FENCE_WIRE_SPACING_M,
                         wire_resistivity_ohm_m=STEEL_RESISTIVITY_OHM_M,
                         wire_relative_permeability=WIRE_STEEL_RELATIVE_PERMEABILITY,
                         soil_layers=None):
    """Line constants of a wire fence (wires bonded, treated as one conductor).

    Parameters
    ----------
    wire_count : array_like of int
        Number of longitudinal wires [-].
    wire_radius_m : array_like
        Wire radius [m].
    post_spacing_m : array_like
        Distance between posts [m].
    post_resistance_ohm : array_like
        Resistance to earth of one post [Ω], whatever its material; NaN takes
        the material's typical value, :data:`TYPICAL_POST_RESISTANCE_OHM`; inf
        (wires on insulators) leaves the capacitance alone.
    post_type : array_like of str
        ``"metal"`` or ``"wood"``. Every post leaks: a wet wooden post is no
        insulator (a few kΩ, from memory).
    height_m : array_like
        Height of the fence wires [m].
    soil_resistivity_ohm_m : array_like
        Soil resistivity [Ω·m].
    frequency_hz : float
        Frequency [Hz].
    wire_spacing_m : array_like, optional
        Vertical spacing of the wires for the bundle's geometric mean radius
        [m]; default 0.3 m [practice].
    wire_resistivity_ohm_m, wire_relative_permeability : array_like, optional
        See :func:`wire_internal_impedance`.
    soil_layers : dict, optional
        Two-layer soil for the earth-return impedance (see
        :func:`pipeline_line_constants`).

    Returns
    -------
    LineConstants
        z [Ω/m] and y [S/m].

    Notes
    -----
    z = Z_int/n + Z_earth(h, GMR of the n collinear wires), Z_earth from
    :func:`corridor.physics.earth_return.self_impedance`;
    y = 1/(R_post·spacing) + jωC for posts of any material (the posts
    smeared along the line, fine while the post spacing is ≪ 1/|γ|), with C
    from :func:`wire_capacitance` of one wire at the fence height
    (docs/methods.md §5.7, §10).

    References
    ----------
    .. [1] J. R. Carson, Bell System Technical Journal 5, 1926.
    .. [2] T. Gönen, Electric Power Transmission System Engineering
       (geometric mean radius of a bundle).
    """
    omega = _omega(frequency_hz)
    n = np.asarray(wire_count)
    kind = np.asarray(post_type)
    if not np.all(np.isin(kind, ("metal", "wood"))):
        raise InputError("post_type: must be 'metal' or 'wood'")
    r_w = np.asarray(wire_radius_m, dtype=float)
    z_int = wire_internal_impedance(r_w, frequency_hz, wire_resistivity_ohm_m,
                                    wire_relative_permeability) / n
    gmr_m = _collinear_bundle_gmr_m(n, r_w, np.asarray(wire_spacing_m, dtype=float))
    z = z_int + earth_return.self_impedance(height_m, gmr_m, 0.0, soil_resistivity_ohm_m,
                                            frequency_hz, **(soil_layers or {}))
    spacing = np.asarray(post_spacing_m, dtype=float)
    r_post = np.asarray(post_resistance_ohm, dtype=float)
    typical = np.where(kind == "wood", TYPICAL_POST_RESISTANCE_OHM["wood"],
                       TYPICAL_POST_RESISTANCE_OHM["metal"])
    r_post = np.where(np.isnan(r_post), typical, r_post)  # inf: posts on insulators
    if np.any(r_post <= 0) or np.any(spacing <= 0):
        raise InputError("post_resistance_ohm and post_spacing_m: must be > 0")
    y = 1.0 / (r_post * spacing) + 1j * omega * wire_capacitance(height_m, r_w)
    return LineConstants(np.asarray(z, dtype=complex), np.asarray(y, dtype=complex))


def rail_line_constants(ballast_resistance_ohm_km, rail_resistance_ohm_per_km,
                        soil_resistivity_ohm_m, frequency_hz, soil_layers=None):
    """Line constants of a railway track (both rails in parallel).

    Parameters
    ----------
    ballast_resistance_ohm_km : array_like
        Track-to-earth resistance of one km of track [Ω·km] (2–20 Ω·km for
        ballasted track) [memory].
    rail_resistance_ohm_per_km : array_like
        Resistance of the two rails in parallel [Ω/km]; raises the
        resistive part of the internal impedance where it is larger.
    soil_resistivity_ohm_m : array_like
        Soil resistivity [Ω·m] (two-layer soil: the top layer's).
    frequency_hz : float
        Frequency [Hz].
    soil_layers : dict, optional
        ``bottom_resistivity_ohm_m`` and ``top_thickness_m`` of a two-layer
        soil, passed to :func:`corridor.physics.earth_return.self_impedance`.

    Returns
    -------
    LineConstants
        z [Ω/m] and y [S/m].

    Notes
    -----
    z = Z_int/2 (two rails in parallel, each the equivalent round conductor
    of :func:`corridor.physics.conductors.rail_equivalent`; its resistive
    part at least ``rail_resistance_ohm_per_km``) + Z_earth of the rail pair
    on the surface, whose geometric mean radius is √(r_eq·s) with s the
    distance between rail centres (:data:`RAIL_CENTRE_SPACING_M`);
    y = 1/(R_ballast·1000). At 50 Hz in 100 Ω·m soil this gives about
    0.10 + j0.53 Ω/km, the order measured on single tracks (Hill and
    Carpenter 1993; values from memory).

    References
    ----------
    .. [1] E. D. Sunde, Earth Conduction Effects in Transmission Systems, 1968.
    .. [2] R. J. Hill, D. C. Carpenter, "Rail track distributed transmission
       line impedance and admittance: theoretical modeling and experimental
       results", IEEE Trans. Vehicular Technology 42(2), 225–241, 1993.
    .. [3] J. D. Glover, M. S. Sarma, T. Overbye, Power System Analysis and
       Design, ch. 4 (geometric mean radius of a two-conductor bundle).
    """
    r_b = np.asarray(ballast_resistance_ohm_km, dtype=float)
    if np.any(r_b <= 0):
        raise InputError("ballast_resistance_ohm_km: must be > 0")
    rail = conductors.rail_equivalent(frequency_hz=frequency_hz)
    z_int = rail.internal_impedance_ohm_per_m / 2
    z_int = z_int + np.maximum(np.asarray(rail_resistance_ohm_per_km, dtype=float) / 1000.0
                               - z_int.real, 0.0)
    pair_gmr_m = math.sqrt(rail.equivalent_radius_m * RAIL_CENTRE_SPACING_M)
    z_earth = earth_return.self_impedance(0.0, pair_gmr_m, 0.0, soil_resistivity_ohm_m,
                                          frequency_hz, **(soil_layers or {}))
    z = np.asarray(z_int + z_earth, dtype=complex)
    y = 1.0 / (r_b * 1000.0) + 0j
    z, y = np.broadcast_arrays(z, y)
    return LineConstants(z.copy(), y.copy())


def telecom_line_constants(conductor_radius_m, height_m, soil_resistivity_ohm_m, frequency_hz,
                           conductor_resistance_ohm_per_m=PAIR_RESISTANCE_OHM_PER_M,
                           capacitance_f_per_m=CABLE_CAPACITANCE_F_PER_M, soil_layers=None):
    """Line constants of a telecom pair against earth (longitudinal circuit).

    Parameters
    ----------
    conductor_radius_m : array_like
        Equivalent radius of the cable for its earth-return impedance [m].
    height_m : array_like
        Height of the cable [m]; negative is depth of burial.
    soil_resistivity_ohm_m : array_like
        Soil resistivity [Ω·m].
    frequency_hz : float
        Frequency [Hz].
    conductor_resistance_ohm_per_m : array_like, optional
        Resistance of the pair, both wires in parallel [Ω/m]; default a
        0.6 mm copper pair, 0.030 Ω/m [practice].
    capacitance_f_per_m : array_like, optional
        Capacitance of the pair to sheath/earth [F/m]; default 80 nF/km [memory].
    soil_layers : dict, optional
        Two-layer soil for the earth-return impedance (see
        :func:`pipeline_line_constants`).

    Returns
    -------
    LineConstants
        z [Ω/m] and y [S/m].

    Notes
    -----
    z = R_pair + Z_earth (:func:`corridor.physics.earth_return.self_impedance`),
    y = jωC. The sheath's screening acts on the EMF, not on z and y: the
    caller scales the EMF with the cable's screening factor.
    """
    omega = _omega(frequency_hz)
    z = np.asarray(conductor_resistance_ohm_per_m, dtype=float) + earth_return.self_impedance(
        height_m, conductor_radius_m, 0.0, soil_resistivity_ohm_m, frequency_hz,
        **(soil_layers or {}))
    y = 1j * omega * np.asarray(capacitance_f_per_m, dtype=float)
    z, y = np.broadcast_arrays(np.asarray(z, dtype=complex), np.asarray(y, dtype=complex))
    return LineConstants(z.copy(), y.copy())


#: Sheath groundings that let a sheath current flow along the exposure.
SHEATH_CURRENT_PATH = {"both_ends": True, "one_end": False, "isolated": False}


def _sheath_screening_factor(sheath_resistance_ohm_per_m, sheath_radius_m, height_m,
                             soil_resistivity_ohm_m, frequency_hz, sheath_grounding,
                             exposure_length_m, end_resistance_ohm=0.0, soil_layers=None):
    """Screening factor of a telecom cable's metal sheath (magnitude) [-].

    Parameters
    ----------
    sheath_resistance_ohm_per_m : array_like
        Longitudinal resistance of the sheath (screen, armour) [Ω/m].
    sheath_radius_m : array_like
        Mean radius of the sheath [m].
    height_m : array_like
        Height of the cable [m]; negative is burial depth (taken at the surface).
    soil_resistivity_ohm_m : array_like
        Soil resistivity [Ω·m] (two-layer soil: the top layer's).
    frequency_hz : float
        Frequency [Hz].
    sheath_grounding : array_like of str
        ``"both_ends"``, ``"one_end"`` or ``"isolated"``.
    exposure_length_m : array_like
        Length of the sheath between its grounds [m].
    end_resistance_ohm : array_like, optional
        Resistance to earth of each end ground [Ω] (default 0: ideal grounds).
    soil_layers : dict, optional
        Two-layer soil for the earth-return impedance.

    Returns
    -------
    ndarray
        |k| [-]: 1 where no sheath current can flow (isolated or grounded at
        one end only: an isolated sheath screens nothing).

    Notes
    -----
    A sheath grounded at both ends carries I_s = E·L/(Z_s·L + 2R_e), with
    Z_s = R_s + Z_e its earth-return self impedance and Z_e the external part
    (:func:`corridor.physics.earth_return.self_impedance` at the sheath
    radius). The cores inside share the sheath's external field, so their
    mutual impedance with the sheath is Z_e, and they see
    E·[1 − Z_e·L/(Z_s·L + 2R_e)]:

        k = (R_s·L + 2R_e) / (Z_s·L + 2R_e)     → R_s/Z_s for ideal end grounds.

    This is the screening factor of a metallic sheath treated in ITU-T
    Recommendation K.14, "Provision of a metallic screen in plastic-sheathed
    cables" (which names the sheath resistance, the insulation of the outer
    covering and the cable length as the parameters; the closed form here is
    derived, with the ITU-T form k = R_s/|R_s + jωL_s| from memory as its
    ideal-ground limit). A magnetic (steel-armoured) sheath screens better
    than this non-magnetic form, so the value is conservative for it.

    References
    ----------
    .. [1] ITU-T Recommendation K.14, Provision of a metallic screen in
       plastic-sheathed cables (Blue Book vol. IX, 1988).
    .. [2] ITU-T Directives concerning the protection of telecommunication
       lines against harmful effects from electric power lines, vol. II
       (screening factors; from memory).
    """
    r_s = np.asarray(sheath_resistance_ohm_per_m, dtype=float)
    length = np.asarray(exposure_length_m, dtype=float)
    r_e = np.asarray(end_resistance_ohm, dtype=float)
    grounding = np.asarray(sheath_grounding)
    unknown = ~np.isin(grounding, list(SHEATH_CURRENT_PATH))
    if unknown.any():
        raise InputError(f"sheath grounding: unknown labels {sorted(set(grounding[unknown]))}")
    if np.any(r_s <= 0):
        raise InputError("sheath_resistance_ohm_per_km: must be > 0")
    z_e = earth_return.self_impedance(height_m, sheath_radius_m, 0.0, soil_resistivity_ohm_m,
                                      frequency_hz, **(soil_layers or {}))
    k = np.abs((r_s * length + 2 * r_e) / ((r_s + z_e) * length + 2 * r_e))
    path = np.vectorize(SHEATH_CURRENT_PATH.get, otypes=[bool])(grounding)
    return np.where(path & (length > 0), k, 1.0)
