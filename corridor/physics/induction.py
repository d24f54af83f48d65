"""Inductive coupling: line impedance matrices, conductor currents and EMFs.

Cross-section coordinates: ``x`` horizontal across the corridor [m], heights
above ground [m]. Currents are complex rms phasors [A]. EMFs are complex
[V/m] along the line direction; the sign follows E = −Σ Z·I.

These are the functions a production run calls (through
:mod:`corridor.steps.couple`), batched over every asset section near a line:

1. :func:`conductor_currents`: the current of every conductor of a line,
   earth wires included, in normal load and for a unit fault on each phase;
2. :func:`asset_mutual_impedance`: conductor-to-asset mutual impedances;
3. :func:`emf_per_m` and :func:`fault_emf_per_m`: the EMF per metre;
4. :func:`exposure_fault_emf`: per exposure (asset, line), the faulted phase
   giving the largest total EMF and the :func:`screening_factor` of the
   earth wires.

The load side (per-circuit currents, outage scenarios and the worst normal-load
EMF over unknowns) is in :mod:`corridor.physics.normal_load`; its names are
importable from here too.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from corridor.physics import earth_return
from corridor.physics._arrays import complex_bincount
from corridor.physics.normal_load import (
    CircuitCurrents,
    WorstNormalEmf,
    circuit_phase_currents,
    outage_weights,
    worst_normal_emf,
)

__all__ = [
    "CircuitCurrents",
    "ConductorCurrents",
    "ExposureFault",
    "FaultEmf",
    "WorstNormalEmf",
    "asset_mutual_impedance",
    "circuit_phase_currents",
    "conductor_currents",
    "earth_wire_currents",
    "emf_per_m",
    "exposure_fault_emf",
    "fault_emf_per_m",
    "impedance_matrix",
    "outage_weights",
    "screening_factor",
    "worst_normal_emf",
]

def impedance_matrix(
    conductor_x_m,
    conductor_height_m,
    conductor_gmr_m,
    conductor_resistance_ohm_per_m,
    soil_resistivity_ohm_m,
    frequency_hz,
    soil_layers=None,
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
        Soil resistivity [Ω·m] (two-layer soil: the top layer's).
    frequency_hz : float
        Frequency [Hz].
    soil_layers : dict, optional
        ``bottom_resistivity_ohm_m`` and ``top_thickness_m`` of a two-layer
        soil (docs/methods.md §9); None: homogeneous.

    Returns
    -------
    ndarray of complex, shape (n, n)
        Symmetric impedance matrix [Ω/m].

    Notes
    -----
    z_ii = R_i + Z_earth(2h_i, GMR_i); z_ij = Z_earth(h_i, h_j, |x_i − x_j|), with
    the earth-return forms chosen per pair by
    :func:`corridor.physics.earth_return.mutual_impedance` and
    :func:`corridor.physics.earth_return.self_impedance`.

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
    layers = soil_layers or {}
    z_off = earth_return.mutual_impedance(h[iu], h[ju], dx, soil_resistivity_ohm_m, frequency_hz,
                                          **layers)
    z_diag = earth_return.self_impedance(h, gmr, res, soil_resistivity_ohm_m, frequency_hz,
                                         **layers)
    z = np.zeros((n, n), dtype=complex)
    z[iu, ju] = z_off
    z[ju, iu] = z_off
    z[np.arange(n), np.arange(n)] = z_diag
    return z


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


class ConductorCurrents(NamedTuple):
    """Result of :func:`conductor_currents`."""

    #: Normal-load currents, shape (n_soil, n_cases, n_cond) [A].
    normal_a: np.ndarray
    #: Currents for a 1 A fault on each phase (earth wires' share included),
    #: shape (n_soil, n_phase, n_cond) [A per A of fault current].
    fault_per_unit: np.ndarray


def conductor_currents(
    conductor_x_m,
    conductor_height_m,
    conductor_gmr_m,
    conductor_resistance_ohm_per_m,
    phase_index,
    earth_wire_index,
    phase_currents_a,
    soil_resistivity_ohm_m,
    frequency_hz,
    bottom_resistivity_ohm_m=None,
    top_thickness_m=None,
):
    """Currents of every conductor of one line, earth wires included.

    Parameters
    ----------
    conductor_x_m, conductor_height_m, conductor_gmr_m : array_like, shape (n_cond,)
        Line cross-section [m].
    conductor_resistance_ohm_per_m : array_like, shape (n_cond,)
        Conductor AC resistance [Ω/m] (the earth wires' matters).
    phase_index, earth_wire_index : sequence of int
        Conductors carrying phases and earth wires grounded at every tower.
    phase_currents_a : array_like, shape (n_cases, n_phase)
        Normal-load phase currents, one row per case (e.g. per line sharing
        the cross-section), from :func:`circuit_phase_currents` [A].
    soil_resistivity_ohm_m : array_like, shape (n_soil,)
        Soil resistivities to evaluate [Ω·m] (two-layer soils: the top layer's).
    frequency_hz : float
        Frequency [Hz].
    bottom_resistivity_ohm_m, top_thickness_m : array_like, shape (n_soil,), optional
        Two-layer soils: ρ₂ [Ω·m] and the top layer's thickness [m]; NaN or
        None: homogeneous (docs/methods.md §9).

    Returns
    -------
    ConductorCurrents
        Normal-load currents per soil and case; currents per ampere of
        fault current for a fault on each phase, per soil.

    Notes
    -----
    Earth wires grounded at every tower carry I_s = −Z_ss⁻¹ Z_sp I_p
    (:func:`earth_wire_currents`, Z from :func:`impedance_matrix` in each
    soil). In a fault, the faulted phase carries 1 A and the others none
    (the load current is neglected beside the fault current).

    References
    ----------
    .. [1] W. H. Kersting, Distribution System Modeling and Analysis, §4.1.
    .. [2] ITU-T Directives concerning the protection of telecommunication
       lines against harmful effects from electric power lines, vol. II
       (earth-wire currents in a fault, memory).
    """
    x = np.asarray(conductor_x_m, float)
    p = np.asarray(phase_index, int)
    s = np.asarray(earth_wire_index, int)
    ip = np.asarray(phase_currents_a, complex).reshape(-1, p.size)
    rhos = np.atleast_1d(np.asarray(soil_resistivity_ohm_m, float))
    n_c = x.size
    normal = np.zeros((len(rhos), len(ip), n_c), complex)
    fault = np.zeros((len(rhos), p.size, n_c), complex)
    layered = bottom_resistivity_ohm_m is not None
    if layered:
        rho2 = np.broadcast_to(np.asarray(bottom_resistivity_ohm_m, float), rhos.shape)
        t_top = np.broadcast_to(np.asarray(top_thickness_m, float), rhos.shape)
    for ri, rho in enumerate(rhos):
        layers = ({"bottom_resistivity_ohm_m": rho2[ri], "top_thickness_m": t_top[ri]}
                  if layered else None)
        z = impedance_matrix(x, conductor_height_m, conductor_gmr_m,
                             conductor_resistance_ohm_per_m, rho, frequency_hz, layers)
        for c in range(len(ip)):
            normal[ri, c, p] = ip[c]
            if s.size:
                normal[ri, c, s] = earth_wire_currents(z, p, s, ip[c])
        for j in range(p.size):
            fault[ri, j, p[j]] = 1.0
            if s.size:
                fault[ri, j, s] = earth_wire_currents(z, [p[j]], s, np.array([1.0]))
    return ConductorCurrents(normal, fault)


def asset_mutual_impedance(
    conductor_x_m,
    conductor_height_m,
    asset_offset_m,
    asset_height_m,
    soil_resistivity_ohm_m,
    frequency_hz,
    bottom_resistivity_ohm_m=None,
    top_thickness_m=None,
):
    """Mutual impedance between each conductor of a line and each asset section.

    Parameters
    ----------
    conductor_x_m, conductor_height_m : array_like, shape (n_cond,)
        Line cross-section [m].
    asset_offset_m, asset_height_m : array_like, shape (n_pairs,)
        Asset position in the same cross-section frame [m]; height ≤ 0 for
        buried assets (treated as surface).
    soil_resistivity_ohm_m : array_like, shape (n_pairs,) or scalar
        Soil resistivity per pair [Ω·m] (two-layer soil: the top layer's).
    frequency_hz : float
        Frequency [Hz].
    bottom_resistivity_ohm_m, top_thickness_m : array_like, shape (n_pairs,), optional
        Two-layer soil per pair (docs/methods.md §9); None or NaN: homogeneous.

    Returns
    -------
    ndarray of complex, shape (n_pairs, n_cond)
        Z(conductor, asset) [Ω/m].

    Notes
    -----
    Every pair and conductor in one vectorised call of
    :func:`corridor.physics.earth_return.mutual_impedance`.

    References
    ----------
    .. [1] J. R. Carson, Bell System Technical Journal 5, 1926.
    """
    x = np.asarray(conductor_x_m, float)
    h = np.asarray(conductor_height_m, float)
    xa = np.atleast_1d(np.asarray(asset_offset_m, float))
    ha = np.broadcast_to(np.asarray(asset_height_m, float), xa.shape)
    rho = np.broadcast_to(np.asarray(soil_resistivity_ohm_m, float), xa.shape)
    layers = {}
    if bottom_resistivity_ohm_m is not None:
        layers = {
            "bottom_resistivity_ohm_m": np.broadcast_to(
                np.asarray(bottom_resistivity_ohm_m, float), xa.shape)[:, None],
            "top_thickness_m": np.broadcast_to(np.asarray(top_thickness_m, float),
                                               xa.shape)[:, None],
        }
    return earth_return.mutual_impedance(
        h[None, :], ha[:, None], x[None, :] - xa[:, None], rho[:, None], frequency_hz, **layers)


def emf_per_m(z_conductor_asset_ohm_per_m, conductor_currents_a):
    """Longitudinal EMF induced on assets by current-carrying conductors.

    Parameters
    ----------
    z_conductor_asset_ohm_per_m : array_like, shape (n_pairs, n_cond)
        Mutual impedances from :func:`asset_mutual_impedance` [Ω/m].
    conductor_currents_a : array_like, shape (n_pairs, n_cond) or (n_pairs, n_cases, n_cond)
        Current phasors of every conductor, earth wires included [A]; with
        a middle axis, several current cases per pair.

    Returns
    -------
    ndarray of complex, shape (n_pairs,) or (n_pairs, n_cases)
        EMF per unit length along the line direction [V/m].

    Notes
    -----
    E = −Σ_k Z(k, asset)·I_k.

    References
    ----------
    .. [1] J. R. Carson, Bell System Technical Journal 5, 1926.
    .. [2] ITU-T Directives, vol. III (inducing EMF, memory).
    """
    z = np.asarray(z_conductor_asset_ohm_per_m, complex)
    cur = np.asarray(conductor_currents_a, complex)
    if cur.ndim == z.ndim + 1:
        return -np.einsum("nc,npc->np", z, cur)
    return -np.sum(z * cur, axis=1)


class FaultEmf(NamedTuple):
    """Result of :func:`fault_emf_per_m`."""

    #: EMF for a fault on each phase, earth wires acting, shape (n_pairs, n_phase) [V/m].
    emf_v_per_m: np.ndarray
    #: The same without earth wires, shape (n_pairs, n_phase) [V/m].
    unscreened_emf_v_per_m: np.ndarray


def fault_emf_per_m(z_conductor_asset_ohm_per_m, fault_currents_per_unit, phase_index,
                    fault_current_a):
    """EMF on assets during a single phase-to-earth fault, for each faulted phase.

    Parameters
    ----------
    z_conductor_asset_ohm_per_m : array_like, shape (n_pairs, n_cond)
        Mutual impedances from :func:`asset_mutual_impedance` [Ω/m].
    fault_currents_per_unit : array_like, shape (n_pairs, n_phase, n_cond)
        Conductor currents per ampere of fault current for a fault on each
        phase (:attr:`ConductorCurrents.fault_per_unit` in the pair's soil).
    phase_index : sequence of int, length n_phase
        Conductor of each phase.
    fault_current_a : array_like, shape (n_pairs,)
        Earth-fault current in the faulted phase at the pair [A].

    Returns
    -------
    FaultEmf
        EMF per faulted phase with and without the earth wires [V/m].

    Notes
    -----
    E = −(Z_fa + Σ_s Z_sa·i_s)·I_f with i_s the earth-wire currents per
    ampere; unscreened E₀ = −Z_fa·I_f. E/E₀ is the screening factor k of
    the earth wires, 1 − Z_fs Z_ss⁻¹ Z_sa / Z_fa.

    References
    ----------
    .. [1] ITU-T Directives, vols. II–III (screening factor of earth wires,
       memory).
    """
    z = np.asarray(z_conductor_asset_ohm_per_m, complex)
    i_f = np.asarray(fault_current_a)[:, None]
    p = np.asarray(phase_index, int)
    return FaultEmf(emf_per_m(z, fault_currents_per_unit) * i_f, -z[:, p] * i_f)


def screening_factor(emf_v, unscreened_emf_v):
    """Screening (reduction) factor of earth wires: E with them over E without.

    Parameters
    ----------
    emf_v : array_like of complex
        EMF with the earth wires carrying their induced currents [V] or [V/m].
    unscreened_emf_v : array_like of complex
        EMF of the same fault without earth wires, same unit.

    Returns
    -------
    ndarray of complex
        k [-] (|k| = 1: no screening); 1 where the unscreened EMF is 0.

    Notes
    -----
    One earth wire: k = 1 − Z_ms·Z_sf/(Z_ss·Z_mf); several:
    k = 1 − Z_fs Z_ss⁻¹ Z_sm / Z_fm. Both follow from Z_sm I_m + Z_ss I_s = 0
    and E = −(Z_fm I_m + Z_fs I_s) = −Z_fm I_m·k; the ratio of the EMFs is the
    same k without forming the formula.

    References
    ----------
    .. [1] ITU-T Directives concerning the protection of telecommunication
       lines against harmful effects from electric power lines, vol. II
       (screening factor of earth wires, memory).
    """
    e = np.asarray(emf_v, complex)
    e0 = np.asarray(unscreened_emf_v, complex)
    return np.where(np.abs(e0) > 0, e / np.where(e0 == 0, 1, e0), 1.0)


class ExposureFault(NamedTuple):
    """Result of :func:`exposure_fault_emf`."""

    #: Faulted phase (column of the input) of each exposure, shape (n_exposures,).
    worst_phase: np.ndarray
    #: EMF of each section for its exposure's faulted phase, shape (n_sections,) [V].
    section_emf_v: np.ndarray
    #: Screening factor of each exposure for that phase, shape (n_exposures,) [-].
    screening_factor: np.ndarray


def exposure_fault_emf(section_emf_v, section_unscreened_emf_v, exposure_of_section,
                       n_exposures):
    """Faulted phase and screening factor of each exposure (asset, faulted line).

    Parameters
    ----------
    section_emf_v : array_like of complex, shape (n_sections, n_phase)
        EMF of each asset section for a fault on each phase, earth wires
        acting [V] (EMF per metre times the section's length).
    section_unscreened_emf_v : array_like of complex, shape (n_sections, n_phase)
        The same without earth wires [V].
    exposure_of_section : array_like of int, shape (n_sections,)
        Exposure each section belongs to.
    n_exposures : int
        Number of exposures.

    Returns
    -------
    ExposureFault
        The faulted phase of each exposure, the EMF of each section for it,
        and the exposure's screening factor.

    Notes
    -----
    The faulted phase is the one giving the largest |Σ E| over the exposure
    (the fault current flows through the whole exposure in one direction,
    conservative). The screening factor is Σ E / Σ E₀ over the exposure for
    that phase (:func:`screening_factor`).

    References
    ----------
    .. [1] ITU-T Directives, vol. II (resultant EMF of an exposure, memory).
    """
    e = np.asarray(section_emf_v, complex)
    e0 = np.asarray(section_unscreened_emf_v, complex)
    idx = np.asarray(exposure_of_section, np.int64)
    totals = np.zeros((n_exposures, e.shape[1]), complex)
    for j in range(e.shape[1]):
        totals[:, j] = complex_bincount(idx, e[:, j], n_exposures)
    worst = np.argmax(np.abs(totals), axis=1)
    rows = np.arange(len(e))
    bare_total = complex_bincount(idx, e0[rows, worst[idx]], n_exposures)
    k = screening_factor(totals[np.arange(n_exposures), worst], bare_total)
    return ExposureFault(worst, e[rows, worst[idx]], k)
