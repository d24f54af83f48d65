"""Conductive coupling: earth potential rise around a tower footing in a fault."""

from __future__ import annotations

import numpy as np

__all__ = ["earth_potential_hemisphere", "ladder_impedance_ohm", "tower_current_share"]


def earth_potential_hemisphere(current_a, soil_resistivity_ohm_m, distance_m, footing_radius_m):
    """Earth surface potential around a hemispherical electrode.

    Parameters
    ----------
    current_a : array_like
        Current discharged into the soil [A] (complex phasor accepted).
    soil_resistivity_ohm_m : array_like
        Homogeneous soil resistivity ρ [Ω·m].
    distance_m : array_like
        Distance from the electrode centre [m].
    footing_radius_m : array_like
        Equivalent hemisphere radius r0 of the footing [m].

    Returns
    -------
    ndarray
        Potential relative to remote earth [V].

    Notes
    -----
    V(r) = ρI/(2πr) for r ≥ r0 and ρI/(2πr0) (the electrode potential) for
    r < r0. The footing resistance is R = ρ/(2πr0).

    References
    ----------
    .. [1] IEEE Std 80-2013, Guide for Safety in AC Substation Grounding
       (hemisphere electrode, memory for clause).
    .. [2] E. D. Sunde, Earth Conduction Effects in Transmission Systems, 1968.
    """
    r = np.maximum(np.asarray(distance_m, float), np.asarray(footing_radius_m, float))
    return np.asarray(soil_resistivity_ohm_m, float) * np.asarray(current_a) / (2 * np.pi * r)


def ladder_impedance_ohm(span_impedance_ohm, tower_resistance_ohm):
    """Input impedance of an infinite earth-wire/tower ladder.

    Parameters
    ----------
    span_impedance_ohm : array_like
        Earth-wire self impedance of one span, Zs [Ω].
    tower_resistance_ohm : array_like
        Footing resistance of each tower, Rt [Ω].

    Returns
    -------
    ndarray of complex
        Z∞ [Ω].

    Notes
    -----
    Z∞ = Zs/2 + √(Zs·Rt + Zs²/4) (principal root, positive real part).
    Mutual coupling of the earth wire with the faulted phase is neglected.

    References
    ----------
    .. [1] Endrenyi, "Analysis of transmission tower potentials during
       ground faults", IEEE Trans. PAS-86(10), 1967 (memory).
    """
    zs = np.asarray(span_impedance_ohm, complex)
    rt = np.asarray(tower_resistance_ohm, complex)
    return zs / 2 + np.sqrt(zs * rt + zs * zs / 4)


def tower_current_share(span_impedance_ohm, tower_resistance_ohm, sides=2):
    """Fraction of the fault current leaving through the faulted tower's footing.

    Parameters
    ----------
    span_impedance_ohm : array_like
        Earth-wire span impedance Zs [Ω].
    tower_resistance_ohm : array_like
        Footing resistance Rt of every tower (faulted one included) [Ω].
    sides : int
        Number of infinite ladders leaving the faulted tower (2 mid-line,
        1 at a line end).

    Returns
    -------
    ndarray of complex
        I_tower / I_fault [-].

    Notes
    -----
    Current divider between Rt and the ladders in parallel, Z∞/sides:
    share = (Z∞/sides)/(Rt + Z∞/sides). Inductive return through the earth
    wires is neglected, so the share is conservative (high).

    References
    ----------
    .. [1] Endrenyi, IEEE Trans. PAS-86(10), 1967 (memory).
    """
    zinf = ladder_impedance_ohm(span_impedance_ohm, tower_resistance_ohm) / sides
    return zinf / (np.asarray(tower_resistance_ohm, complex) + zinf)
