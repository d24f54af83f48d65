"""Line constants (z, y) and default terminations of each asset kind.

Each model turns an asset's attributes into the series impedance z [Ω/m] and
shunt admittance y [S/m] of its earth-return circuit, ready for
:mod:`corridor.network.response`. All functions broadcast over numpy arrays
(one value per asset or per segment).

The earth-return self impedance belongs to the physics layer: every model
takes it as ``earth_return_self_ohm_per_m`` and only falls back on the
low-frequency Carson form (:func:`earth_return_self_impedance_low_frequency`)
when it is not given. That fallback is good for a self impedance, because the
conductor radius is small against the equivalent earth-return depth.

Provenance of defaults: ``[memory]`` recalled, check before relying on it;
``[practice]`` common practice, no single source (METHODS.md).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy import special

from corridor.errors import InputError
from corridor.network.response import matched_termination_admittance
from corridor.physics.constants import EPS0_F_PER_M, MU0_H_PER_M

__all__ = [
    "DEFAULT_TERMINATIONS",
    "LINE_CONSTANT_MODELS",
    "LineConstants",
    "coating_capacitance",
    "default_terminations",
    "earth_return_self_impedance_low_frequency",
    "fence_line_constants",
    "pipe_internal_impedance",
    "pipeline_line_constants",
    "rail_line_constants",
    "screened_emf",
    "sheath_screening_factor",
    "telecom_line_constants",
    "termination_admittance",
    "wire_internal_impedance",
]

#: Resistivity of pipe and fence steel [Ω·m] (METHODS.md §1) [memory].
STEEL_RESISTIVITY_OHM_M = 1.7e-7
#: Relative permeability of pipe steel [-] (METHODS.md §1) [memory].
PIPE_STEEL_RELATIVE_PERMEABILITY = 300.0
#: Relative permeability of galvanised fence wire [-]; order of magnitude [memory].
WIRE_STEEL_RELATIVE_PERMEABILITY = 100.0
#: Thickness of a three-layer PE coating [m] (2.5–3.7 mm) [practice].
PE_COATING_THICKNESS_M = 3.0e-3
#: Relative permittivity of polyethylene [-] (2.25–2.35) [memory].
PE_RELATIVE_PERMITTIVITY = 2.3
#: Capacitance to earth of an above-ground wire ≈ 2πε0/ln(2h/r) ≈ 7–12 pF/m [memory].
WIRE_CAPACITANCE_F_PER_M = 10e-12
#: Track (both rails in parallel, earth return included) at 50 Hz,
#: about 0.15 + j0.6 Ω/km [memory].
TRACK_IMPEDANCE_OHM_PER_KM = 0.15 + 0.6j
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
def earth_return_self_impedance_low_frequency(radius_m, soil_resistivity_ohm_m, frequency_hz):
    """Self impedance of an earth-return conductor, low-frequency Carson form.

    Parameters
    ----------
    radius_m : array_like
        Conductor radius, or geometric mean radius of a bundle [m].
    soil_resistivity_ohm_m : array_like
        Homogeneous soil resistivity [Ω·m].
    frequency_hz : array_like
        Frequency [Hz].

    Returns
    -------
    ndarray of complex
        Self impedance per unit length, without the conductor's internal
        impedance [Ω/m].

    Notes
    -----
    Z = ωμ0/8 + j(ωμ0/2π)·ln(De/r),  De = 658.9·√(ρ/f) m.
    Valid while the radius (and height or depth) is small against De; this
    holds for every asset conductor at power frequency.

    References
    ----------
    .. [1] J. R. Carson, "Wave propagation in overhead wires with ground
       return", Bell System Technical Journal 5, 1926.
    .. [2] T. Gönen, Electric Power Transmission System Engineering
       (low-frequency form; METHODS.md §1).
    """
    omega = _omega(frequency_hz)
    r = np.asarray(radius_m, dtype=float)
    rho = np.asarray(soil_resistivity_ohm_m, dtype=float)
    if np.any(r <= 0) or np.any(rho <= 0):
        raise InputError("radius_m and soil_resistivity_ohm_m: must be > 0")
    de_m = 658.9 * np.sqrt(rho / np.asarray(frequency_hz, dtype=float))
    return omega * MU0_H_PER_M / 8.0 + 1j * omega * MU0_H_PER_M / (2 * np.pi) * np.log(de_m / r)


def pipe_internal_impedance(diameter_m, frequency_hz,
                            steel_resistivity_ohm_m=STEEL_RESISTIVITY_OHM_M,
                            steel_relative_permeability=PIPE_STEEL_RELATIVE_PERMEABILITY,
                            wall_thickness_m=None):
    """Internal impedance of a steel pipe [Ω/m].

    The physics core owns the formula
    (:func:`corridor.physics.conductors.pipe_internal_impedance`): thin-skin
    Z_int = (1 + j)/(πD)·√(ωμ0μr·ρ_steel/2) without a wall thickness, the
    finite-wall form with one.
    """
    from corridor.physics.conductors import pipe_internal_impedance as physics_pipe

    return physics_pipe(diameter_m, steel_resistivity_ohm_m, steel_relative_permeability,
                        frequency_hz, wall_thickness_m)


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


def _earth_self(earth_return_self_ohm_per_m, radius_m, soil_resistivity_ohm_m, frequency_hz):
    if earth_return_self_ohm_per_m is not None:
        return np.asarray(earth_return_self_ohm_per_m, dtype=complex)
    if soil_resistivity_ohm_m is None:
        raise InputError("give earth_return_self_ohm_per_m or soil_resistivity_ohm_m")
    return earth_return_self_impedance_low_frequency(radius_m, soil_resistivity_ohm_m,
                                                     frequency_hz)


# --------------------------------------------------------------------------
# Per-kind models
# --------------------------------------------------------------------------
def pipeline_line_constants(diameter_m, coating_resistance_ohm_m2, frequency_hz,
                            soil_resistivity_ohm_m=None, earth_return_self_ohm_per_m=None,
                            steel_resistivity_ohm_m=STEEL_RESISTIVITY_OHM_M,
                            steel_relative_permeability=PIPE_STEEL_RELATIVE_PERMEABILITY,
                            coating_thickness_m=PE_COATING_THICKNESS_M,
                            coating_relative_permittivity=PE_RELATIVE_PERMITTIVITY,
                            wall_thickness_m=None):
    """Line constants of a coated buried steel pipeline.

    Parameters
    ----------
    diameter_m : array_like
        Outer diameter D [m].
    coating_resistance_ohm_m2 : array_like
        Specific coating resistance r_coat [Ω·m²] (1e4–1e6 for 3LPE/FBE,
        1e2–1e4 for bitumen/coal tar, METHODS.md §5) [memory].
    frequency_hz : array_like
        Frequency [Hz].
    soil_resistivity_ohm_m : array_like, optional
        Soil resistivity [Ω·m], used only by the low-frequency fallback.
    earth_return_self_ohm_per_m : array_like of complex, optional
        Earth-return self impedance of the pipe without its internal
        impedance [Ω/m], from the physics layer (preferred).
    steel_resistivity_ohm_m, steel_relative_permeability : array_like, optional
        See :func:`pipe_internal_impedance`.
    coating_thickness_m, coating_relative_permittivity : array_like, optional
        See :func:`coating_capacitance`; pass ``coating_thickness_m=None`` to
        leave the coating capacitance out.
    wall_thickness_m : array_like, optional
        Wall thickness [m]; given, the internal impedance uses the
        finite-wall form of the physics core.

    Returns
    -------
    LineConstants
        z [Ω/m] and y [S/m].

    Notes
    -----
    y = πD/r_coat + jωC_coat,   z = Z_int + Z_earth.
    C_coat (≈ 12 nF/m for D = 0.5 m, 3 mm PE) adds ωC ≈ 4e-6 S/m: small
    beside πD/r_coat for ordinary coatings, but dominant for
    r_coat ≳ 4e5 Ω·m², so it is kept by default.

    References
    ----------
    .. [1] METHODS.md §1, §5 (pipe internal impedance; coating leakage).
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
    z = pipe_internal_impedance(d, frequency_hz, steel_resistivity_ohm_m,
                                steel_relative_permeability, wall_thickness_m)
    z = z + _earth_self(earth_return_self_ohm_per_m, d / 2, soil_resistivity_ohm_m, frequency_hz)
    return LineConstants(np.asarray(z, dtype=complex), np.asarray(y, dtype=complex))


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
                         post_type, frequency_hz, soil_resistivity_ohm_m=None,
                         earth_return_self_ohm_per_m=None, wire_spacing_m=0.3,
                         wire_resistivity_ohm_m=STEEL_RESISTIVITY_OHM_M,
                         wire_relative_permeability=WIRE_STEEL_RELATIVE_PERMEABILITY,
                         capacitance_f_per_m=WIRE_CAPACITANCE_F_PER_M):
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
        Resistance to earth of one metal post [Ω].
    post_type : array_like of str
        ``"metal"`` (every post grounds the wires) or ``"wood"`` (no leakage
        except at grounds the caller places as node shunts).
    frequency_hz : array_like
        Frequency [Hz].
    soil_resistivity_ohm_m : array_like, optional
        Soil resistivity [Ω·m], used only by the low-frequency fallback.
    earth_return_self_ohm_per_m : array_like of complex, optional
        Earth-return self impedance of the wire bundle, without internal
        impedance [Ω/m], from the physics layer (preferred).
    wire_spacing_m : array_like, optional
        Vertical spacing of the wires for the fallback's bundle radius [m];
        default 0.3 m [practice].
    wire_resistivity_ohm_m, wire_relative_permeability : array_like, optional
        See :func:`wire_internal_impedance`.
    capacitance_f_per_m : array_like, optional
        Capacitance of the fence to earth [F/m]; default 10 pF/m [memory].

    Returns
    -------
    LineConstants
        z [Ω/m] and y [S/m].

    Notes
    -----
    z = Z_int/n + Z_earth(GMR of the bundle);
    metal posts: y = 1/(R_post·spacing) + jωC (the posts smeared along the
    line, fine while the post spacing is ≪ 1/|γ|); wooden posts: y = jωC.
    """
    omega = _omega(frequency_hz)
    n = np.asarray(wire_count)
    kind = np.asarray(post_type)
    if not np.all(np.isin(kind, ("metal", "wood"))):
        raise InputError("post_type: must be 'metal' or 'wood'")
    z_int = wire_internal_impedance(wire_radius_m, frequency_hz, wire_resistivity_ohm_m,
                                    wire_relative_permeability) / n
    if earth_return_self_ohm_per_m is None:
        gmr_m = _collinear_bundle_gmr_m(n, np.asarray(wire_radius_m, dtype=float),
                                        np.asarray(wire_spacing_m, dtype=float))
    else:
        gmr_m = None
    z = z_int + _earth_self(earth_return_self_ohm_per_m, gmr_m, soil_resistivity_ohm_m,
                            frequency_hz)
    spacing = np.asarray(post_spacing_m, dtype=float)
    r_post = np.asarray(post_resistance_ohm, dtype=float)
    metal = kind == "metal"
    g_posts = np.where(metal, 1.0 / np.where(metal, r_post * spacing, 1.0), 0.0)
    y = g_posts + 1j * omega * np.asarray(capacitance_f_per_m)
    return LineConstants(np.asarray(z, dtype=complex), np.asarray(y, dtype=complex))


def rail_line_constants(ballast_resistance_ohm_km=BALLAST_RESISTANCE_OHM_KM,
                        track_impedance_ohm_per_km=TRACK_IMPEDANCE_OHM_PER_KM):
    """Line constants of a railway track (both rails in parallel).

    Parameters
    ----------
    ballast_resistance_ohm_km : array_like, optional
        Track-to-earth resistance of one km of track [Ω·km]; default 5 Ω·km
        (range 2–20 Ω·km for ballasted track) [memory].
    track_impedance_ohm_per_km : array_like of complex, optional
        Series impedance of the track–earth loop [Ω/km]; default
        0.15 + j0.6 Ω/km at 50 Hz [memory]. The rails' AC resistance and
        internal reactance are set by skin effect in the steel, so this is
        taken as a whole rather than built from the DC rail resistance.

    Returns
    -------
    LineConstants
        z [Ω/m] and y [S/m].

    Notes
    -----
    z = Z_track/1000,   y = 1/(R_ballast·1000).
    """
    r_b = np.asarray(ballast_resistance_ohm_km, dtype=float)
    if np.any(r_b <= 0):
        raise InputError("ballast_resistance_ohm_km: must be > 0")
    z = np.asarray(track_impedance_ohm_per_km, dtype=complex) / 1000.0
    y = 1.0 / (r_b * 1000.0) + 0j
    z, y = np.broadcast_arrays(z, y)
    return LineConstants(z.copy(), y.copy())


def telecom_line_constants(conductor_radius_m, frequency_hz, soil_resistivity_ohm_m=None,
                           earth_return_self_ohm_per_m=None,
                           conductor_resistance_ohm_per_m=PAIR_RESISTANCE_OHM_PER_M,
                           capacitance_f_per_m=CABLE_CAPACITANCE_F_PER_M):
    """Line constants of a telecom pair against earth (longitudinal circuit).

    Parameters
    ----------
    conductor_radius_m : array_like
        Equivalent radius of the cable for its earth-return impedance [m].
    frequency_hz : array_like
        Frequency [Hz].
    soil_resistivity_ohm_m : array_like, optional
        Soil resistivity [Ω·m], used only by the low-frequency fallback.
    earth_return_self_ohm_per_m : array_like of complex, optional
        Earth-return self impedance [Ω/m], from the physics layer (preferred).
    conductor_resistance_ohm_per_m : array_like, optional
        Resistance of the pair, both wires in parallel [Ω/m]; default a
        0.6 mm copper pair, 0.030 Ω/m [practice].
    capacitance_f_per_m : array_like, optional
        Capacitance of the pair to sheath/earth [F/m]; default 80 nF/km [memory].

    Returns
    -------
    LineConstants
        z [Ω/m] and y [S/m].

    Notes
    -----
    z = R_pair + Z_earth,  y = jωC. The sheath's screening acts on the EMF,
    not on z and y: scale the EMF with :func:`screened_emf`.
    """
    omega = _omega(frequency_hz)
    z = np.asarray(conductor_resistance_ohm_per_m, dtype=float) + _earth_self(
        earth_return_self_ohm_per_m, conductor_radius_m, soil_resistivity_ohm_m, frequency_hz)
    y = 1j * omega * np.asarray(capacitance_f_per_m, dtype=float)
    z, y = np.broadcast_arrays(np.asarray(z, dtype=complex), np.asarray(y, dtype=complex))
    return LineConstants(z.copy(), y.copy())


def screened_emf(emf_v, screening_factor):
    """EMF on conductors inside a screening sheath.

    Parameters
    ----------
    emf_v : array_like of complex
        EMF the unscreened conductor would see [V] (or [V/m]).
    screening_factor : array_like
        Screening (reduction) factor k of the sheath, 0 < k ≤ 1 [-].

    Returns
    -------
    ndarray of complex
        k·E, in the unit of ``emf_v``.

    References
    ----------
    .. [1] ITU-T Directives concerning the protection of telecommunication
       lines against harmful effects from electric power and electrified
       railway lines (screening factors) [memory].
    """
    k = np.asarray(screening_factor)
    if np.any(np.abs(k) > 1) or np.any(np.abs(k) <= 0):
        raise InputError("screening_factor: must be in (0, 1]")
    return np.asarray(emf_v, dtype=complex) * k


def sheath_screening_factor(sheath_resistance_ohm_per_m, sheath_self_ohm_per_m):
    """Screening factor of a sheath grounded at both ends of a long exposure.

    Parameters
    ----------
    sheath_resistance_ohm_per_m : array_like
        Longitudinal resistance of the sheath (and armour) [Ω/m].
    sheath_self_ohm_per_m : array_like of complex
        Earth-return self impedance of the sheath, resistance included [Ω/m].

    Returns
    -------
    ndarray of complex
        k = R_s/Z_s [-].

    Notes
    -----
    The sheath current I_s = −E/Z_s induces −Z_m·I_s on the conductors, and
    Z_m ≈ Z_s − R_s, so E_core = E·(1 − Z_m/Z_s) = E·R_s/Z_s. Ignores the
    ends' grounding resistances (long exposures) [memory].
    """
    return (np.asarray(sheath_resistance_ohm_per_m, dtype=complex)
            / np.asarray(sheath_self_ohm_per_m, dtype=complex))


# --------------------------------------------------------------------------
# Terminations
# --------------------------------------------------------------------------
def _open(z, y, r):
    return np.zeros(np.broadcast(z, y, r).shape, dtype=complex)


def _grounded(z, y, r):
    r = np.asarray(r, dtype=float)
    if np.any(r <= 0):
        raise InputError("termination_resistance_ohm: must be > 0 for a grounded end")
    return np.broadcast_to(1.0 / r + 0j, np.broadcast(z, y, r).shape).copy()


def _continuing(z, y, r):
    return np.broadcast_to(matched_termination_admittance(z, y),
                           np.broadcast(z, y, r).shape).copy()


#: How each termination label turns into an admittance to earth [S].
TERMINATION_MODELS = {"open": _open, "grounded": _grounded, "continuing": _continuing}


def termination_admittance(termination, z_ohm_per_m, y_s_per_m, resistance_ohm=np.inf):
    """Admittance to earth of chain ends from their termination labels.

    Parameters
    ----------
    termination : array_like of str
        ``"open"``, ``"grounded"`` or ``"continuing"`` per chain end.
    z_ohm_per_m, y_s_per_m : array_like of complex
        Line constants of the end segment [Ω/m], [S/m].
    resistance_ohm : array_like, optional
        Resistance to earth of grounded ends [Ω].

    Returns
    -------
    ndarray of complex
        0 (open), 1/R (grounded) or 1/Zc (continuing: the line runs on without
        source beyond the data) [S].
    """
    labels = np.asarray(termination)
    shape = np.broadcast(labels, z_ohm_per_m, y_s_per_m, resistance_ohm).shape
    unknown = ~np.isin(labels, list(TERMINATION_MODELS))
    if unknown.any():
        raise InputError(f"termination: unknown labels {sorted(set(labels[unknown].tolist()))}")
    out = np.zeros(shape, dtype=complex)
    labels = np.broadcast_to(labels, shape)
    z = np.broadcast_to(np.asarray(z_ohm_per_m, dtype=complex), shape)
    y = np.broadcast_to(np.asarray(y_s_per_m, dtype=complex), shape)
    r = np.broadcast_to(np.asarray(resistance_ohm, dtype=float), shape)
    for label, model in TERMINATION_MODELS.items():
        hit = labels == label
        if hit.any():
            out[hit] = model(z[hit], y[hit], r[hit])
    return out


#: Default (start, end) termination of each kind [practice]: pipelines and
#: rails run on beyond the data; fences stop; telecom by its grounding.
DEFAULT_TERMINATIONS = {
    "pipeline": ("continuing", "continuing"),
    "fence": ("open", "open"),
    "rail": ("continuing", "continuing"),
}

#: Terminations of a telecom pair by where it is grounded.
TELECOM_GROUNDING_TERMINATIONS = {
    "one_end": ("grounded", "open"),
    "both_ends": ("grounded", "grounded"),
    "isolated": ("open", "open"),
}


def default_terminations(kind, cable_grounding="both_ends"):
    """Default (start, end) termination labels of an asset kind.

    Parameters
    ----------
    kind : str
        ``"pipeline"``, ``"fence"``, ``"rail"`` or ``"telecom"``.
    cable_grounding : str, optional
        Telecom only: ``"one_end"``, ``"both_ends"`` or ``"isolated"``.

    Returns
    -------
    tuple of str
        Labels for :func:`termination_admittance`.
    """
    if kind == "telecom":
        if cable_grounding not in TELECOM_GROUNDING_TERMINATIONS:
            raise InputError(f"cable_grounding: unknown value {cable_grounding!r}")
        return TELECOM_GROUNDING_TERMINATIONS[cable_grounding]
    if kind not in DEFAULT_TERMINATIONS:
        raise InputError(f"kind: unknown asset kind {kind!r}")
    return DEFAULT_TERMINATIONS[kind]


#: Line-constant model of each asset kind.
LINE_CONSTANT_MODELS = {
    "pipeline": pipeline_line_constants,
    "fence": fence_line_constants,
    "rail": rail_line_constants,
    "telecom": telecom_line_constants,
}
