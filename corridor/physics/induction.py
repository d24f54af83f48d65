"""Inductive coupling: line impedance matrices, earth-wire currents and EMFs.

Cross-section coordinates: ``x`` horizontal across the corridor [m], heights
above ground [m]. Currents are complex rms phasors [A]. EMFs are complex
[V/m] along the line direction; the sign follows E = −Σ Z·I.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from corridor.physics import earth_return

__all__ = [
    "FaultEmf",
    "earth_wire_currents",
    "emf_per_m",
    "fault_emf_per_m",
    "impedance_matrix",
    "kron_reduce",
    "normal_phase_currents",
    "screening_factor",
]

#: Mutual-impedance methods for :func:`impedance_matrix`.
MATRIX_METHODS = {
    "production": earth_return.mutual_impedance,
    "carson": earth_return.carson_mutual_impedance,
    "low_frequency": None,  # handled in impedance_matrix (uses d only)
}

_PHASE_ANGLE_RAD = {"A": 0.0, "B": -2.0 * np.pi / 3.0, "C": 2.0 * np.pi / 3.0}


def impedance_matrix(
    conductor_x_m,
    conductor_height_m,
    conductor_gmr_m,
    conductor_resistance_ohm_per_m,
    soil_resistivity_ohm_m,
    frequency_hz,
    method="production",
):
    """Primitive series impedance matrix of n earth-return conductors.

    Parameters
    ----------
    conductor_x_m, conductor_height_m : array_like, shape (n,)
        Horizontal position and height of each conductor [m].
    conductor_gmr_m : array_like, shape (n,)
        Geometric mean radius (holds the internal reactance) [m].
    conductor_resistance_ohm_per_m : array_like, shape (n,)
        AC resistance (complex internal impedance also accepted) [Ω/m].
    soil_resistivity_ohm_m : float
        Soil resistivity [Ω·m].
    frequency_hz : float
        Frequency [Hz].
    method : {"production", "carson", "low_frequency"}
        Earth-return formula: the dispatcher, the full Carson integral, or
        the low-frequency ("modified Carson") form everywhere.

    Returns
    -------
    ndarray of complex, shape (n, n)
        Symmetric impedance matrix [Ω/m].

    Notes
    -----
    z_ii = R_i + Z_earth(2h_i, GMR_i); z_ij = Z_earth(h_i, h_j, |x_i − x_j|).

    References
    ----------
    .. [1] J. R. Carson, Bell System Technical Journal 5, 1926.
    .. [2] W. H. Kersting, Distribution System Modeling and Analysis, ch. 4.
    """
    x = np.asarray(conductor_x_m, float)
    h = np.asarray(conductor_height_m, float)
    gmr = np.broadcast_to(np.asarray(conductor_gmr_m, float), x.shape)
    res = np.broadcast_to(np.asarray(conductor_resistance_ohm_per_m, complex), x.shape)
    n = x.size
    iu, ju = np.triu_indices(n, 1)
    dx = np.abs(x[iu] - x[ju])
    if method == "low_frequency":
        d = np.hypot(dx, h[iu] - h[ju])
        z_off = earth_return.low_frequency_mutual_impedance(
            d, soil_resistivity_ohm_m, frequency_hz
        )
        z_diag = res + earth_return.low_frequency_mutual_impedance(
            gmr, soil_resistivity_ohm_m, frequency_hz
        )
    elif method in MATRIX_METHODS:
        fn = MATRIX_METHODS[method]
        z_off = fn(h[iu], h[ju], dx, soil_resistivity_ohm_m, frequency_hz)
        if method == "carson":
            jc = earth_return.carson_correction_dimensionless(
                2 * h * earth_return._wavenumber_per_m(soil_resistivity_ohm_m, frequency_hz),
                np.zeros(n),
            )
            w = 2 * np.pi * frequency_hz
            z_diag = res + 1j * w * earth_return.MU0_H_PER_M / (2 * np.pi) * (
                np.log(2 * h / gmr) + 2 * jc
            )
        else:
            z_diag = earth_return.self_impedance(h, gmr, res, soil_resistivity_ohm_m, frequency_hz)
    else:
        raise ValueError(f"unknown method {method!r}; choose from {sorted(MATRIX_METHODS)}")
    z = np.zeros((n, n), dtype=complex)
    z[iu, ju] = z_off
    z[ju, iu] = z_off
    z[np.arange(n), np.arange(n)] = z_diag
    return z


def kron_reduce(z_matrix, keep_index, eliminate_index):
    """Kron reduction: eliminate conductors with zero voltage along them.

    Parameters
    ----------
    z_matrix : array_like, shape (n, n)
        Primitive impedance matrix [Ω/m].
    keep_index, eliminate_index : sequence of int
        Conductors kept (phases) and eliminated (earthed wires).

    Returns
    -------
    ndarray of complex
        Z_pp − Z_ps Z_ss⁻¹ Z_sp [Ω/m].

    References
    ----------
    .. [1] W. H. Kersting, Distribution System Modeling and Analysis, eq. 4.13.
    """
    z = np.asarray(z_matrix, complex)
    p = np.asarray(keep_index, int)
    s = np.asarray(eliminate_index, int)
    zps = z[np.ix_(p, s)]
    return z[np.ix_(p, p)] - zps @ np.linalg.solve(z[np.ix_(s, s)], z[np.ix_(s, p)])


def earth_wire_currents(z_matrix, phase_index, earth_wire_index, phase_currents_a):
    """Currents induced in earth wires grounded at every tower.

    Parameters
    ----------
    z_matrix : array_like, shape (n, n)
        Impedance matrix of all conductors [Ω/m].
    phase_index, earth_wire_index : sequence of int
        Rows of the phase conductors and of the earth wires.
    phase_currents_a : array_like, shape (n_p,) or (n_p, m)
        Phase current phasors [A].

    Returns
    -------
    ndarray of complex, shape (n_s,) or (n_s, m)
        Earth-wire current phasors [A].

    Notes
    -----
    Zero longitudinal voltage on the earthed wires (tower spacing ≪
    wavelength and coupling length): Z_sp I_p + Z_ss I_s = 0, so
    I_s = −Z_ss⁻¹ Z_sp I_p.

    References
    ----------
    .. [1] W. H. Kersting, Distribution System Modeling and Analysis, §4.1
       (Kron reduction, grounded neutral).
    """
    z = np.asarray(z_matrix, complex)
    p = np.asarray(phase_index, int)
    s = np.asarray(earth_wire_index, int)
    ip = np.asarray(phase_currents_a, complex)
    if s.size == 0:
        return np.zeros((0,) + ip.shape[1:], dtype=complex)
    return -np.linalg.solve(z[np.ix_(s, s)], z[np.ix_(s, p)] @ ip)


def normal_phase_currents(load_current_a_per_circuit, phasing, residual_current_pct=0.0):
    """Phase current phasors of one or more three-phase circuits in normal load.

    Parameters
    ----------
    load_current_a_per_circuit : array_like, shape (n_circuits,)
        rms load current of each circuit [A].
    phasing : sequence of str
        Per circuit, the phase carried by its three conductors in conductor
        order, e.g. ``"ABC"``, ``"CBA"``, ``"BCA"``.
    residual_current_pct : array_like
        Residual (earth-return) current in percent of the load current,
        scalar or per circuit [%].

    Returns
    -------
    ndarray of complex, shape (3·n_circuits,)
        Conductor current phasors in conductor order [A].

    Notes
    -----
    Phase A at 0°, B at −120°, C at +120° (positive sequence). The residual
    current I_r = pct/100·I_load is the *total* current returning through
    the earth (I_r = 3I0); each conductor carries I_r/3 in phase with A.

    References
    ----------
    .. [1] ITU-T Directives concerning the protection of telecommunication
       lines against harmful effects from electric power lines, vol. II
       (residual current of unbalanced load, memory).
    """
    load = np.atleast_1d(np.asarray(load_current_a_per_circuit, float))
    if isinstance(phasing, str):
        phasing = [phasing]
    if len(phasing) != load.size:
        raise ValueError("one phasing string per circuit is required")
    pct = np.broadcast_to(np.asarray(residual_current_pct, float), load.shape)
    out = np.empty(3 * load.size, dtype=complex)
    for c, code in enumerate(phasing):
        code = code.upper()
        if sorted(code) != ["A", "B", "C"]:
            raise ValueError(f"phasing {code!r} must be a permutation of 'ABC'")
        residual = pct[c] / 100.0 * load[c] / 3.0
        for i, ph in enumerate(code):
            out[3 * c + i] = load[c] * np.exp(1j * _PHASE_ANGLE_RAD[ph]) + residual
    return out


def emf_per_m(
    conductor_x_m,
    conductor_height_m,
    conductor_currents_a,
    asset_offset_m,
    asset_height_m,
    soil_resistivity_ohm_m,
    frequency_hz,
):
    """Longitudinal EMF induced on assets by current-carrying conductors.

    Parameters
    ----------
    conductor_x_m, conductor_height_m : array_like, shape (n_cond,) or (n_pairs, n_cond)
        Conductor positions [m]: one cross-section for every pair, or one
        row per pair. Rows may be padded with NaN positions (or zero
        currents); padded entries contribute nothing.
    conductor_currents_a : array_like, shape (n_cond,) or (n_pairs, n_cond)
        Current phasors, earth-wire currents included [A].
    asset_offset_m, asset_height_m : array_like, shape (n_pairs,)
        Asset position in the same cross-section frame [m]; height ≤ 0 for
        buried assets (treated as surface).
    soil_resistivity_ohm_m : array_like, shape (n_pairs,) or scalar
        Soil resistivity per pair [Ω·m].
    frequency_hz : float
        Frequency [Hz].

    Returns
    -------
    ndarray of complex, shape (n_pairs,)
        EMF per unit length [V/m].

    Notes
    -----
    E = −Σ_k Z(k, asset)·I_k with Z from
    :func:`corridor.physics.earth_return.mutual_impedance`; all pairs and
    conductors are evaluated in one vectorised call.

    References
    ----------
    .. [1] J. R. Carson, Bell System Technical Journal 5, 1926.
    .. [2] ITU-T Directives, vol. III (inducing EMF, memory).
    """
    xa = np.atleast_1d(np.asarray(asset_offset_m, float))
    ha = np.broadcast_to(np.asarray(asset_height_m, float), xa.shape)
    rho = np.broadcast_to(np.asarray(soil_resistivity_ohm_m, float), xa.shape)
    xc = np.asarray(conductor_x_m, float)
    n_cond = xc.shape[-1]
    shape = (xa.size, n_cond)
    xc = np.broadcast_to(xc, shape)
    hc = np.broadcast_to(np.asarray(conductor_height_m, float), shape)
    ic = np.broadcast_to(np.asarray(conductor_currents_a, complex), shape)
    valid = np.isfinite(xc) & np.isfinite(hc) & (ic != 0)
    z = np.zeros(shape, dtype=complex)
    rows, cols = np.nonzero(valid)
    z[rows, cols] = earth_return.mutual_impedance(
        hc[rows, cols],
        ha[rows],
        xc[rows, cols] - xa[rows],
        rho[rows],
        frequency_hz,
    )
    return -np.sum(z * np.where(valid, ic, 0), axis=1)


def screening_factor(
    z_mutual_phase_asset, z_mutual_phase_earthwire, z_mutual_earthwire_asset, z_self_earthwire
):
    """Screening (reduction) factor of earth wires grounded at every tower.

    Parameters
    ----------
    z_mutual_phase_asset : array_like, shape (...)
        Z_mf, faulted phase to asset [Ω/m].
    z_mutual_phase_earthwire : array_like, shape (...) or (..., n_s)
        Z_ms, faulted phase to each earth wire [Ω/m].
    z_mutual_earthwire_asset : array_like, shape (...) or (..., n_s)
        Z_sf, each earth wire to asset [Ω/m].
    z_self_earthwire : array_like, shape (...) or (..., n_s, n_s)
        Z_ss, earth-wire self impedance (matrix for several wires) [Ω/m].

    Returns
    -------
    ndarray of complex, shape (...)
        Screening factor k [-] (|k| = 1: no screening).

    Notes
    -----
    One earth wire: k = 1 − Z_ms·Z_sf/(Z_ss·Z_mf). Several earth wires
    (used when ``z_self_earthwire`` has one more dimension than
    ``z_mutual_phase_earthwire``): k = 1 − Z_fs Z_ss⁻¹ Z_sm / Z_fm. From Z_sm I_m + Z_ss I_s = 0 and
    E = −(Z_fm I_m + Z_fs I_s) = −Z_fm I_m·k.

    References
    ----------
    .. [1] ITU-T Directives concerning the protection of telecommunication
       lines against harmful effects from electric power lines, vol. II
       (screening factor of earth wires, memory).
    """
    zmf = np.asarray(z_mutual_phase_asset, complex)
    zms = np.asarray(z_mutual_phase_earthwire, complex)
    zsf = np.asarray(z_mutual_earthwire_asset, complex)
    zss = np.asarray(z_self_earthwire, complex)
    if zss.ndim >= 2 and zss.ndim == zms.ndim + 1:
        sol = np.linalg.solve(zss, zsf[..., None])[..., 0]
        return 1.0 - np.sum(zms * sol, axis=-1) / zmf
    return 1.0 - zms * zsf / (zss * zmf)


class FaultEmf(NamedTuple):
    """Result of :func:`fault_emf_per_m`."""

    #: EMF for a fault on each phase, shape (n_pairs, n_phase) [V/m].
    emf_v_per_m: np.ndarray
    #: EMF of the worst phase, shape (n_pairs,) [V/m].
    worst_emf_v_per_m: np.ndarray
    #: Index (into phase_index) of the worst phase, shape (n_pairs,).
    worst_phase: np.ndarray
    #: Screening factor per phase, shape (n_pairs, n_phase) [-].
    screening_factor: np.ndarray


def fault_emf_per_m(
    conductor_x_m,
    conductor_height_m,
    conductor_gmr_m,
    conductor_resistance_ohm_per_m,
    phase_index,
    earth_wire_index,
    fault_current_a,
    asset_offset_m,
    asset_height_m,
    soil_resistivity_ohm_m,
    frequency_hz,
):
    """EMF on assets during a single phase-to-earth fault, worst phase.

    Parameters
    ----------
    conductor_x_m, conductor_height_m, conductor_gmr_m : array_like, shape (n_cond,)
        Line cross-section (shared by all pairs) [m].
    conductor_resistance_ohm_per_m : array_like, shape (n_cond,)
        Conductor resistance (earth wires matter) [Ω/m].
    phase_index, earth_wire_index : sequence of int
        Phase conductors (candidate faulted phases) and earth wires.
    fault_current_a : array_like, shape (n_pairs,) or scalar
        Earth-fault current in the faulted phase at this section [A].
    asset_offset_m, asset_height_m : array_like, shape (n_pairs,)
        Asset positions [m].
    soil_resistivity_ohm_m : array_like, shape (n_pairs,) or scalar
        Soil resistivity per pair [Ω·m].
    frequency_hz : float
        Frequency [Hz].

    Returns
    -------
    FaultEmf
        Per-phase EMF, worst EMF and phase, screening factors.

    Notes
    -----
    E = −Z_mf·I_f·k, k from :func:`screening_factor` (earth wires grounded
    at every tower; the load current is neglected beside the fault current).

    References
    ----------
    .. [1] ITU-T Directives, vols. II–III (memory).
    """
    xc = np.asarray(conductor_x_m, float)
    hc = np.asarray(conductor_height_m, float)
    gmr = np.broadcast_to(np.asarray(conductor_gmr_m, float), xc.shape)
    res = np.broadcast_to(np.asarray(conductor_resistance_ohm_per_m, complex), xc.shape)
    p = np.asarray(phase_index, int)
    s = np.asarray(earth_wire_index, int)
    xa = np.atleast_1d(np.asarray(asset_offset_m, float))
    ha = np.broadcast_to(np.asarray(asset_height_m, float), xa.shape)
    rho = np.broadcast_to(np.asarray(soil_resistivity_ohm_m, float), xa.shape)
    i_f = np.broadcast_to(np.asarray(fault_current_a, complex), xa.shape)
    zmf = earth_return.mutual_impedance(
        hc[p][None, :], ha[:, None], xc[p][None, :] - xa[:, None], rho[:, None], frequency_hz
    )
    if s.size == 0:
        k = np.ones_like(zmf)
    else:
        zsf = earth_return.mutual_impedance(
            hc[s][None, :], ha[:, None], xc[s][None, :] - xa[:, None], rho[:, None], frequency_hz
        )  # (n_pairs, n_s)
        zms = earth_return.mutual_impedance(
            hc[p][None, :, None],
            hc[s][None, None, :],
            xc[p][None, :, None] - xc[s][None, None, :],
            rho[:, None, None],
            frequency_hz,
        )  # (n_pairs, n_p, n_s)
        ss_i, ss_j = np.meshgrid(s, s, indexing="ij")
        zss = earth_return.mutual_impedance(
            hc[ss_i][None], hc[ss_j][None], (xc[ss_i] - xc[ss_j])[None], rho[:, None, None],
            frequency_hz,
        )  # (n_pairs, n_s, n_s); diagonal replaced by self impedances
        z_self = earth_return.self_impedance(
            hc[s][None, :], gmr[s][None, :], res[s][None, :], rho[:, None], frequency_hz
        )
        diag = np.arange(s.size)
        zss[:, diag, diag] = z_self
        k = screening_factor(
            zmf, zms, np.broadcast_to(zsf[:, None, :], zms.shape), zss[:, None, :, :]
        )
    emf = -zmf * i_f[:, None] * k
    worst = np.argmax(np.abs(emf), axis=1)
    return FaultEmf(emf, emf[np.arange(xa.size), worst], worst, k)
