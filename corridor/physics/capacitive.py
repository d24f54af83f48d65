"""Capacitive (electric-field) coupling of overhead lines to above-ground assets.

Maxwell potential coefficients with images in a perfectly conducting earth
plane. Voltages are complex rms phase-to-earth phasors [V]; charges per unit
length [C/m].
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from corridor.physics.constants import EPS0_F_PER_M

__all__ = [
    "CapacitiveCoupling",
    "capacitive_coupling",
    "phase_to_earth_voltages",
    "potential_coefficients",
]

_K_M_PER_F = 1.0 / (2.0 * np.pi * EPS0_F_PER_M)
_PHASE_ANGLE_RAD = {"A": 0.0, "B": -2.0 * np.pi / 3.0, "C": 2.0 * np.pi / 3.0}


def phase_to_earth_voltages(line_voltage_kv, conductor_phase):
    """Phase-to-earth voltage phasor of every conductor of a three-phase line.

    Parameters
    ----------
    line_voltage_kv : float
        Nominal phase-to-phase (line) voltage [kV].
    conductor_phase : sequence of str, shape (n_c,)
        ``"A"``, ``"B"`` or ``"C"`` per phase conductor, ``""`` for an
        earth wire.

    Returns
    -------
    ndarray of complex, shape (n_c,)
        Voltages [V]; 0 for earth wires.

    Notes
    -----
    V = U/√3·e^{jφ}, φ = 0°, −120°, +120° for A, B, C (positive sequence,
    phase A of every line at 0°: one synchronous network).

    References
    ----------
    .. [1] J. D. Glover, M. S. Sarma, T. Overbye, Power System Analysis and
       Design, ch. 2 (balanced three-phase phasors).
    """
    out = np.zeros(len(conductor_phase), complex)
    for k, phase in enumerate(conductor_phase):
        if phase:
            out[k] = line_voltage_kv * 1000.0 / np.sqrt(3.0) * np.exp(
                1j * _PHASE_ANGLE_RAD[phase])
    return out


def potential_coefficients(x_m, height_m, radius_m):
    """Maxwell potential coefficient matrix of conductors above earth.

    Parameters
    ----------
    x_m, height_m : array_like, shape (n,)
        Horizontal position and height (> 0) of each conductor [m].
    radius_m : array_like, shape (n,) or scalar
        Conductor radius (bundle: equivalent radius) [m].

    Returns
    -------
    ndarray, shape (n, n)
        P [m/F], symmetric.

    Notes
    -----
    P_ii = ln(2h_i/r_i)/(2πε0), P_ij = ln(D_ij/d_ij)/(2πε0), D_ij the distance
    from conductor i to the image of j.

    References
    ----------
    .. [1] J. D. Glover, M. S. Sarma, T. Overbye, Power System Analysis and
       Design, ch. 4 (capacitance, method of images).
    """
    x = np.asarray(x_m, float)
    h = np.asarray(height_m, float)
    r = np.broadcast_to(np.asarray(radius_m, float), x.shape)
    dx = x[:, None] - x[None, :]
    big_d = np.hypot(dx, h[:, None] + h[None, :])
    small_d = np.hypot(dx, h[:, None] - h[None, :])
    np.fill_diagonal(small_d, r)
    return _K_M_PER_F * np.log(big_d / small_d)


class CapacitiveCoupling(NamedTuple):
    """Result of :func:`capacitive_coupling`."""

    #: Voltage of the isolated, uncharged asset, shape (n_pairs,) [V].
    open_circuit_voltage_v: np.ndarray
    #: Current to earth of the grounded asset per metre, shape (n_pairs,) [A/m].
    short_circuit_current_a_per_m: np.ndarray


def capacitive_coupling(
    conductor_x_m,
    conductor_height_m,
    conductor_radius_m,
    conductor_voltage_v,
    asset_offset_m,
    asset_height_m,
    asset_radius_m,
    frequency_hz,
):
    """Open-circuit voltage and short-circuit current of assets near a line.

    Parameters
    ----------
    conductor_x_m, conductor_height_m, conductor_radius_m : array_like, shape (n_c,)
        Line cross-section [m].
    conductor_voltage_v : array_like, shape (n_c,)
        Complex phase-to-earth voltages, 0 for earth wires [V].
    asset_offset_m, asset_height_m : array_like, shape (n_pairs,)
        Asset position [m]; assets with height ≤ 0 (buried, on the ground)
        are screened by the earth and get zero.
    asset_radius_m : array_like, shape (n_pairs,) or scalar
        Asset (wire, rail, pipe) radius [m].
    frequency_hz : float
        Frequency [Hz].

    Returns
    -------
    CapacitiveCoupling
        ``open_circuit_voltage_v`` [V] and ``short_circuit_current_a_per_m``
        [A/m] (multiply by the exposed length for the total current).

    Notes
    -----
    With the asset w added to the system,
    [P_cc P_cw; P_wc P_ww]·[q_c; q_w] = [V_c; V_w].
    Open circuit (q_w = 0): V_oc = P_wc·P_cc⁻¹·V_c.
    Grounded (V_w = 0): by the Schur complement S = P_ww − P_wc P_cc⁻¹ P_cw,
    q_w = −V_oc/S and I_sc = jω·q_w. The line voltages are held, so the
    asset does not disturb q_c in the open-circuit case.

    References
    ----------
    .. [1] Glover, Sarma, Overbye, Power System Analysis and Design, ch. 4.
    .. [2] EPRI, Transmission Line Reference Book 345 kV and Above, ch. on
       electrostatic induction (memory).
    """
    xc = np.asarray(conductor_x_m, float)
    hc = np.asarray(conductor_height_m, float)
    p_cc = potential_coefficients(xc, hc, conductor_radius_m)
    p_inv = np.linalg.inv(p_cc)
    q_c = p_inv @ np.asarray(conductor_voltage_v, complex)
    xa = np.atleast_1d(np.asarray(asset_offset_m, float))
    ha = np.broadcast_to(np.asarray(asset_height_m, float), xa.shape)
    ra = np.broadcast_to(np.asarray(asset_radius_m, float), xa.shape)
    above = ha > 0
    hw = np.where(above, ha, 1.0)
    dx = xa[:, None] - xc[None, :]
    p_wc = _K_M_PER_F * np.log(np.hypot(dx, hw[:, None] + hc) / np.hypot(dx, hw[:, None] - hc))
    p_ww = _K_M_PER_F * np.log(2 * hw / ra)
    v_oc = p_wc @ q_c
    schur = p_ww - np.einsum("pi,ij,pj->p", p_wc, p_inv, p_wc)
    i_sc = 1j * 2 * np.pi * frequency_hz * (-v_oc / schur)
    return CapacitiveCoupling(np.where(above, v_oc, 0), np.where(above, i_sc, 0))
