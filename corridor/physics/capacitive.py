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
    *,
    asset_wire_count=1,
    asset_wire_spacing_m=0.3,
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
        are screened by the earth and get zero. For a bundle, the height of
        its middle.
    asset_radius_m : array_like, shape (n_pairs,) or scalar
        Asset (wire, rail, pipe) radius [m].
    frequency_hz : float
        Frequency [Hz].
    asset_wire_count : array_like of int, shape (n_pairs,) or scalar, optional
        Number of bonded wires of the asset (a fence's wires), one above the
        other; default 1.
    asset_wire_spacing_m : array_like, shape (n_pairs,) or scalar, optional
        Vertical spacing of those wires [m]; default 0.3 m (common practice).

    Returns
    -------
    CapacitiveCoupling
        ``open_circuit_voltage_v`` [V] and ``short_circuit_current_a_per_m``
        [A/m] (multiply by the exposed length for the total current).

    Notes
    -----
    With the asset's wires w added to the system,
    [P_cc P_cw; P_wc P_ww]·[q_c; q_w] = [V_c; V_w·1].
    Eliminating q_c with the line voltages held:
    S·q_w = V_w·1 − v,  v = P_wc·P_cc⁻¹·V_c,  S = P_ww − P_wc·P_cc⁻¹·P_cw.
    Grounded bundle (V_w = 0): q_w = −S⁻¹v, I_sc = jω·1ᵀq_w.
    Floating bundle (1ᵀq_w = 0): V_oc = 1ᵀS⁻¹v / 1ᵀS⁻¹1.
    One wire reduces to V_oc = v, q = −v/S (docs/methods.md §3.2). The n wires
    sit at h + (k − (n−1)/2)·s, raised together where the lowest would come
    closer to the ground than 5 cm. Bonded wires pick up more current than
    one, but less than n times as much: they screen one another
    (docs/methods.md §10).

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
    n_w = np.broadcast_to(np.asarray(asset_wire_count, np.int64), xa.shape)
    spacing = np.broadcast_to(np.asarray(asset_wire_spacing_m, float), xa.shape)
    if np.any(n_w < 1):
        raise ValueError("asset_wire_count: must be >= 1")
    above = ha > 0
    v_oc = np.zeros(xa.shape, complex)
    i_sc = np.zeros(xa.shape, complex)
    omega = 2 * np.pi * frequency_hz
    for n in np.unique(n_w[above]):
        sel = np.flatnonzero(above & (n_w == n))
        k = np.arange(n) - 0.5 * (n - 1)
        hw = ha[sel, None] + k[None, :] * spacing[sel, None]  # (p, n)
        lowest = np.maximum(0.05, 2 * ra[sel])[:, None]
        hw = hw + np.maximum(lowest - hw[:, :1], 0.0)
        r = ra[sel, None, None]
        dx = xa[sel, None, None] - xc[None, None, :]
        p_wc = _K_M_PER_F * np.log(np.hypot(dx, hw[:, :, None] + hc)
                                   / np.hypot(dx, hw[:, :, None] - hc))  # (p, n, n_c)
        dh_sum = hw[:, :, None] + hw[:, None, :]
        dh_diff = np.abs(hw[:, :, None] - hw[:, None, :])
        eye = np.eye(n, dtype=bool)[None]
        p_ww = _K_M_PER_F * np.log(dh_sum / np.where(eye, r, np.where(eye, 1.0, dh_diff)))
        v = p_wc @ q_c  # (p, n)
        schur = p_ww - np.einsum("pic,cd,pjd->pij", p_wc, p_inv, p_wc)
        s_inv = np.linalg.inv(schur)  # real, symmetric positive definite, n ≤ a few
        s_inv_v = np.einsum("pij,pj->p", s_inv, v)
        s_inv_1 = s_inv.sum(axis=(1, 2))
        v_oc[sel] = s_inv_v / s_inv_1
        i_sc[sel] = 1j * omega * (-s_inv_v)
    return CapacitiveCoupling(v_oc, i_sc)
