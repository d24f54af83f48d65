"""Conductive coupling: earth potential around a tower footing; electrode resistance."""

from __future__ import annotations

import numpy as np

__all__ = ["earth_potential_hemisphere", "horizontal_electrode_length_m"]


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


def horizontal_electrode_length_m(resistance_ohm, soil_resistivity_ohm_m, depth_m=0.8,
                                  radius_m=0.005):
    """Length of a buried horizontal wire electrode with a given resistance to earth.

    Parameters
    ----------
    resistance_ohm : array_like
        Wanted resistance to remote earth R [Ω], > 0.
    soil_resistivity_ohm_m : array_like
        Homogeneous soil resistivity ρ [Ω·m].
    depth_m : float, optional
        Burial depth s of the wire [m]; default 0.8 m [practice].
    radius_m : float, optional
        Wire radius a [m]; default 5 mm [practice].

    Returns
    -------
    ndarray
        Length L [m], at least 1 m.

    Notes
    -----
    Dwight's buried horizontal wire, leading terms:
    R = ρ/(πL)·[ln(2L/√(2·a·s)) − 1]. (Dwight writes it for a wire of length
    2L at depth s/2 with the further terms s/2L − s²/16L² + …, which are
    below 1 % of R for L ≳ 20 m at these depths.) Solved for L by the
    fixed-point iteration L ← ρ/(πR)·[ln(2L/√(2as)) − 1] (contracting:
    its slope is 1/(ln(…) − 1) ≈ 0.1), 60 steps from L = 5ρ/(πR).

    References
    ----------
    .. [1] H. B. Dwight, "Calculation of resistances to ground", Electrical
       Engineering (AIEE Transactions) 55, 1319–1328, 1936 (from memory).
    .. [2] IEEE Std 80-2013, Guide for Safety in AC Substation Grounding
       (Dwight's formulas for simple electrodes, from memory).
    """
    r = np.asarray(resistance_ohm, float)
    rho = np.asarray(soil_resistivity_ohm_m, float)
    length = rho / (np.pi * r) * 5.0
    for _ in range(60):
        length = rho / (np.pi * r) * (np.log(2 * length / np.sqrt(2 * radius_m * depth_m)) - 1)
        length = np.maximum(length, 1.0)
    return length
