"""Conductive coupling: earth potential around a tower footing; electrode resistance."""

from __future__ import annotations

import numpy as np

__all__ = ["earth_potential_hemisphere", "footing_resistance_ohm", "horizontal_electrode_length_m",
           "ladder_impedance_ohm", "step_voltage_hemisphere", "tower_current_share",
           "zone_of_influence_m"]


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


def footing_resistance_ohm(soil_resistivity_ohm_m, footing_radius_m):
    """Resistance to remote earth of a footing taken as a hemisphere.

    Parameters
    ----------
    soil_resistivity_ohm_m : array_like
        Homogeneous soil resistivity ρ [Ω·m].
    footing_radius_m : array_like
        Equivalent hemisphere radius r0 [m].

    Returns
    -------
    ndarray
        R = ρ/(2π·r0) [Ω].

    References
    ----------
    .. [1] IEEE Std 80-2013 (hemisphere electrode, memory for clause);
       docs/methods.md §4.1.
    """
    return np.asarray(soil_resistivity_ohm_m, float) / (
        2 * np.pi * np.asarray(footing_radius_m, float))


def ladder_impedance_ohm(span_impedance_ohm, footing_resistance_ohm):
    """Input impedance of an endless ladder of earth-wire spans and tower footings.

    Parameters
    ----------
    span_impedance_ohm : array_like of complex
        Self impedance of the earth wire(s) over one span, earth return
        included [Ω].
    footing_resistance_ohm : array_like
        Footing resistance of each tower R_t [Ω].

    Returns
    -------
    ndarray of complex
        Z∞ = Z_s/2 + √(Z_s·R_t + Z_s²/4) [Ω] (principal root).

    Notes
    -----
    Z∞ solves Z∞ = Z_s + R_t·Z∞/(R_t + Z∞): one more span and tower in
    front of the endless ladder leaves its input impedance unchanged
    (docs/methods.md §4.3).

    References
    ----------
    .. [1] J. Endrenyi, "Analysis of transmission tower potentials during
       ground faults", IEEE Trans. Power Apparatus and Systems PAS-86(10),
       1967 (from memory).
    """
    zs = np.asarray(span_impedance_ohm, complex)
    rt = np.asarray(footing_resistance_ohm, float)
    return zs / 2 + np.sqrt(zs * rt + zs * zs / 4)


def tower_current_share(span_impedance_ohm, footing_resistance_ohm, ladders=2):
    """Share of an earth-fault current that the faulted tower's footing discharges.

    Parameters
    ----------
    span_impedance_ohm : array_like of complex
        Earth-wire self impedance over one span [Ω]; NaN or inf where the line
        has no earth wire.
    footing_resistance_ohm : array_like
        Footing resistance R_t [Ω].
    ladders : array_like of int, optional
        Earth-wire ladders leaving the faulted tower: 2 along the line, 1 at
        the line's last tower.

    Returns
    -------
    ndarray of float
        |(Z∞/n) / (R_t + Z∞/n)| [-]; 1 where there is no earth wire.

    Notes
    -----
    The faulted tower's footing and the n ladders (each of input impedance
    Z∞, :func:`ladder_impedance_ohm`) share the fault current as a current
    divider. The earth wires' inductive coupling with the faulted phase,
    which draws part of the current back along the earth wires, is
    neglected: the share is overstated, which is conservative for the earth
    potential (docs/methods.md §4.3).

    References
    ----------
    .. [1] J. Endrenyi, IEEE Trans. PAS-86(10), 1967 (from memory).
    .. [2] IEEE Std 80-2013, annex on the current division between earth
       wires and the grid (split factors, from memory).
    """
    zs = np.asarray(span_impedance_ohm, complex)
    rt = np.asarray(footing_resistance_ohm, float)
    none = ~np.isfinite(zs)
    z_inf = ladder_impedance_ohm(np.where(none, 1.0, zs), rt) / np.asarray(ladders, float)
    return np.where(none, 1.0, np.abs(z_inf / (rt + z_inf)))


def zone_of_influence_m(current_a, soil_resistivity_ohm_m, threshold_v):
    """Distance from a footing within which its earth potential exceeds a threshold.

    Parameters
    ----------
    current_a : array_like
        Current the footing discharges [A] (magnitude used).
    soil_resistivity_ohm_m : array_like
        Soil resistivity ρ [Ω·m].
    threshold_v : array_like
        Earth potential below which the footing is no longer considered [V].

    Returns
    -------
    ndarray
        r = ρ·|I|/(2π·V) [m]: the hemisphere potential (§4.1) equals V there.

    References
    ----------
    .. [1] IEEE Std 80-2013 (hemisphere electrode, memory for clause);
       docs/methods.md §4.1.
    """
    return (np.asarray(soil_resistivity_ohm_m, float) * np.abs(np.asarray(current_a))
            / (2 * np.pi * np.asarray(threshold_v, float)))


def step_voltage_hemisphere(current_a, soil_resistivity_ohm_m, distance_m, footing_radius_m,
                             step_m=1.0):
    """Step voltage on the earth surface beside a hemispherical footing.

    Parameters
    ----------
    current_a : array_like
        Current discharged [A] (magnitude used).
    soil_resistivity_ohm_m : array_like
        Soil resistivity ρ [Ω·m].
    distance_m : array_like
        Distance of the nearer foot from the footing's centre r [m].
    footing_radius_m : array_like
        Hemisphere radius r0 [m]; the potential is flat inside it.
    step_m : float, optional
        Step length, 1 m by convention (IEEE Std 80).

    Returns
    -------
    ndarray
        V(r) − V(r + step) = ρ|I|/(2π)·(1/r − 1/(r + step)) for r ≥ r0 [V],
        with r and r + step raised to r0.

    References
    ----------
    .. [1] IEEE Std 80-2013 (step voltage, 1 m; hemisphere electrode; memory
       for clauses).
    .. [2] E. D. Sunde, Earth Conduction Effects in Transmission Systems, 1968.
    """
    r0 = np.asarray(footing_radius_m, float)
    r = np.asarray(distance_m, float)
    k = np.asarray(soil_resistivity_ohm_m, float) * np.abs(np.asarray(current_a)) / (2 * np.pi)
    return k * (1.0 / np.maximum(r, r0) - 1.0 / np.maximum(r + step_m, r0))
