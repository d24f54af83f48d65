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
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from corridor.physics import earth_return

__all__ = [
    "ConductorCurrents",
    "ExposureFault",
    "FaultEmf",
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

_PHASE_ANGLE_RAD = {"A": 0.0, "B": -2.0 * np.pi / 3.0, "C": 2.0 * np.pi / 3.0}


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


def _complex_bincount(index, values, n):
    return (np.bincount(index, weights=values.real, minlength=n)
            + 1j * np.bincount(index, weights=values.imag, minlength=n))


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
        totals[:, j] = _complex_bincount(idx, e[:, j], n_exposures)
    worst = np.argmax(np.abs(totals), axis=1)
    rows = np.arange(len(e))
    bare_total = _complex_bincount(idx, e0[rows, worst[idx]], n_exposures)
    k = screening_factor(totals[np.arange(n_exposures), worst], bare_total)
    return ExposureFault(worst, e[rows, worst[idx]], k)


# -- Normal load: per-circuit currents, outage scenarios, worst case over unknowns ------


class CircuitCurrents(NamedTuple):
    """Result of :func:`circuit_phase_currents`: one row per circuit."""

    #: Positive-sequence load currents of each circuit alone, shape
    #: (n_circuits, 3·n_circuits) [A]; the other circuits' conductors carry 0.
    balanced_a: np.ndarray
    #: Residual (earth-return) current of each circuit alone, I_r/3 on each of
    #: its conductors, same shape [A].
    residual_a: np.ndarray


def circuit_phase_currents(load_current_a_per_circuit, phasing, residual_current_pct=0.0,
                            flow_direction=1.0, phase_offset_deg=0.0):
    """Phase currents of each circuit of a line on its own, balanced and residual parts.

    Parameters
    ----------
    load_current_a_per_circuit : array_like, shape (n_circuits,)
        rms load current of each circuit [A].
    phasing : sequence of str
        Per circuit, the phases of its three conductors in conductor order
        (``"ABC"``, ``"CBA"``, ...).
    residual_current_pct : array_like
        Residual current in percent of each circuit's load [%], scalar or per circuit.
    flow_direction : array_like
        +1 where the circuit's power flows in the line's digitised direction,
        −1 against it; scalar or per circuit.
    phase_offset_deg : array_like
        Phase-angle offset of the circuit's phase A against the common
        reference [deg] (for example 30° across a transformer); scalar or per
        circuit.

    Returns
    -------
    CircuitCurrents
        Balanced and residual conductor currents of each circuit alone [A].

    Notes
    -----
    I_k = s·I_L·e^{j(φ_k + δ)} (balanced, φ = 0°, −120°, +120° for A, B, C)
    and s·(I_r/3)·e^{jδ} (residual, I_r = pct/100·I_L), with s the flow
    direction and δ the offset (docs/methods.md §2.3). The EMF is linear in
    these currents, so any loading of the line (an outage, another split of
    the load) is a weighted sum of the rows.

    References
    ----------
    .. [1] ITU-T Directives concerning the protection of telecommunication
       lines against harmful effects from electric power lines, vol. II
       (residual current of unbalanced load; from memory).
    """
    load = np.atleast_1d(np.asarray(load_current_a_per_circuit, float))
    if isinstance(phasing, str):
        phasing = [phasing]
    n = load.size
    if len(phasing) != n:
        raise ValueError("one phasing string per circuit is required")
    pct = np.broadcast_to(np.asarray(residual_current_pct, float), load.shape)
    sign = np.broadcast_to(np.asarray(flow_direction, float), load.shape)
    shift = np.exp(1j * np.deg2rad(np.broadcast_to(np.asarray(phase_offset_deg, float),
                                                   load.shape)))
    balanced = np.zeros((n, 3 * n), complex)
    residual = np.zeros((n, 3 * n), complex)
    for c, code in enumerate(phasing):
        code = code.upper()
        if sorted(code) != ["A", "B", "C"]:
            raise ValueError(f"phasing {code!r} must be a permutation of 'ABC'")
        factor = sign[c] * shift[c]
        for i, ph in enumerate(code):
            balanced[c, 3 * c + i] = factor * load[c] * np.exp(1j * _PHASE_ANGLE_RAD[ph])
            residual[c, 3 * c + i] = factor * pct[c] / 100.0 * load[c] / 3.0
    return CircuitCurrents(balanced, residual)


def outage_weights(load_current_a_per_circuit):
    """Loading scenarios of a line: as given, and each circuit out of service in turn.

    Parameters
    ----------
    load_current_a_per_circuit : array_like, shape (n_circuits,)
        rms load current of each circuit [A].

    Returns
    -------
    ndarray, shape (n_scenarios, n_circuits)
        Weight of each circuit's current in each scenario [-]. Row 0 is the
        loading as given (all ones). For a line of two or more circuits, row
        1 + c has circuit c out of service and the others carrying the line's
        total load, shared in proportion to their own loads.

    Notes
    -----
    With one circuit out, the line's total current I_tot = Σ I_c flows in the
    others: weight I_tot/(I_tot − I_c) on each remaining circuit. A single
    circuit line has only row 0.
    """
    load = np.atleast_1d(np.asarray(load_current_a_per_circuit, float))
    n = load.size
    rows = [np.ones(n)]
    total = load.sum()
    if n > 1:
        for c in range(n):
            rest = total - load[c]
            w = np.full(n, total / rest if rest > 0 else 0.0)
            w[c] = 0.0
            rows.append(w)
    return np.array(rows)


class WorstNormalEmf(NamedTuple):
    """Result of :func:`worst_normal_emf`."""

    #: Worst-case |EMF| of each segment over the unknowns [V].
    emf_v: np.ndarray
    #: Entry (row of the input) whose outage scenario governs each segment,
    #: −1 where the loading as given governs.
    governing_entry: np.ndarray
    #: Scenario column of that entry (0: as given).
    governing_scenario: np.ndarray


def worst_normal_emf(segment, line, group, emf_v, residual_emf_v, n_segments):
    """Worst-case normal-load EMF per segment over unknown directions, angles and outages.

    Parameters
    ----------
    segment, line : array_like of int, shape (n_entries,)
        Segment and line of each entry; entries of the same (segment, line)
        are summed first (for example the sections of a segment).
    group : array_like of int, shape (n_entries,)
        Phase group of the entry's line. Lines of one group have known
        relative flow directions and phase angles: their EMFs add as phasors.
        Different groups have unknown relative direction and angle.
    emf_v : array_like of complex, shape (n_entries,) or (n_entries, n_scenarios)
        EMF of the balanced load currents (earth-wire currents included) [V];
        column 0 is the loading as given, further columns the line's outage
        scenarios (repeat column 0 where a line has fewer scenarios).
    residual_emf_v : array_like of complex, same shape as ``emf_v``
        EMF of the line's residual current (earth-wire share included) [V];
        its angle is unknown.
    n_segments : int
        Number of segments.

    Returns
    -------
    WorstNormalEmf
        Worst |EMF| per segment and the scenario that governs it.

    Notes
    -----
    For phasors with unknown relative angles, max over the angles of
    |Σ_g e^{jψ_g}·G_g| = Σ_g |G_g| (all aligned; the triangle inequality is
    then an equality). An unknown flow direction is the special case ψ = π.
    The residual currents' angles are unknown too, so they add Σ_k |R_k|:

        |E|_worst = Σ_groups |Σ_{k∈g} E_k| + Σ_lines |R_k|        (docs/methods.md §8)

    Outages (N−1: one circuit of one line at a time): replacing line k's
    (E_k, R_k) by its scenario c changes the total by
    Δ = |G_g − E_k + E_k^c| − |G_g| + |R_k^c| − |R_k|; the worst scenario is
    the largest Δ > 0 of the segment. No enumeration over angles is needed.
    """
    seg = np.asarray(segment, np.int64)
    lin = np.asarray(line, np.int64)
    grp = np.asarray(group, np.int64)
    e = np.asarray(emf_v, complex)
    r = np.asarray(residual_emf_v, complex)
    if e.ndim == 1:
        e = e[:, None]
        r = r[:, None]
    n_scen = e.shape[1]
    out = np.zeros(n_segments)
    gov_entry = np.full(n_segments, -1, np.int64)
    gov_scen = np.zeros(n_segments, np.int64)
    if len(seg) == 0:
        return WorstNormalEmf(out, gov_entry, gov_scen)
    # one entry per (segment, line)
    n_line = int(lin.max()) + 1
    key = seg * n_line + lin
    uniq, first, inv = np.unique(key, return_index=True, return_inverse=True)
    inv = inv.ravel()
    n_u = len(uniq)
    eu = np.zeros((n_u, n_scen), complex)
    ru = np.zeros((n_u, n_scen), complex)
    for s in range(n_scen):
        eu[:, s] = _complex_bincount(inv, e[:, s], n_u)
        ru[:, s] = _complex_bincount(inv, r[:, s], n_u)
    useg = uniq // n_line
    ugrp = grp[first]
    # group phasor sums per (segment, group), as given
    n_grp = int(ugrp.max()) + 1
    g_uniq, g_inv = np.unique(useg * n_grp + ugrp, return_inverse=True)
    g_inv = g_inv.ravel()
    n_g = len(g_uniq)
    g_sum = _complex_bincount(g_inv, eu[:, 0], n_g)
    out = (np.bincount(g_uniq // n_grp, weights=np.abs(g_sum), minlength=n_segments)
           + np.bincount(useg, weights=np.abs(ru[:, 0]), minlength=n_segments))
    if n_scen > 1:
        gs = g_sum[g_inv][:, None]
        delta = (np.abs(gs - eu[:, :1] + eu) - np.abs(gs)
                 + np.abs(ru) - np.abs(ru[:, :1]))
        delta[:, 0] = 0.0
        best_col = np.argmax(delta, axis=1)
        best = delta[np.arange(n_u), best_col]
        seg_best = np.zeros(n_segments)
        np.maximum.at(seg_best, useg, best)
        out = out + seg_best
        # the entry that attains it (any one where ties)
        hit = (best > 0) & (best >= seg_best[useg])
        rows = np.flatnonzero(hit)
        gov_entry[useg[rows]] = first[rows]
        gov_scen[useg[rows]] = best_col[rows]
    return WorstNormalEmf(out, gov_entry, gov_scen)
