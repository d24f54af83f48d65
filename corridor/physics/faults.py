"""Single line-to-earth faults on a line fed from both terminals.

A line runs from terminal A (its first vertex) to terminal B (its last). Each
terminal is a source behind sequence impedances (Z1, Z2 = Z1, Z0); the line
between them has the sequence impedances z1, z0 per metre that follow from
its arrangement (phases and earth wires, :mod:`corridor.physics.induction`).
For a bolted fault from one phase to earth at a distance x from A, the three
sequence networks are connected in series (P. M. Anderson, *Analysis of
Faulted Power Systems*, Iowa State University Press, 1973, ch. 3, the
single line-to-ground fault; J. D. Glover, M. S. Sarma, T. J. Overbye, *Power
System Analysis and Design*, §9.2 for the formulas):

    I0 = I1 = I2 = E / (Z1_th + Z2_th + Z0_th),     I_f = 3·I0

and each sequence network seen from the fault is two branches in parallel,
Zk_A + x·zk towards A and Zk_B + (L − x)·zk towards B. The share of each
sequence current fed from A is the current divider of its branch.

The user gives the single line-to-earth fault current for a fault at each
terminal (``fault_current_start_ka``, ``fault_current_end_ka``), with an X/R
ratio and a Z0/Z1 ratio per terminal; the terminal source impedances follow
from those two currents (:func:`source_admittances`). See docs/methods.md
§8.

A production run calls these through :mod:`corridor.steps.faultscan`.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = [
    "DEFAULT_SOURCE_X_OVER_R",
    "DEFAULT_SOURCE_Z0_OVER_Z1",
    "FaultCurrents",
    "SourceAdmittances",
    "kron_reduce",
    "sequence_impedances",
    "slg_fault_currents",
    "source_admittances",
]

#: X/R ratio of a terminal's source impedance when none is given. Transmission
#: sources commonly have X/R of 10-30; 10 is the lower, common screening value
#: (common practice; from memory). A lower X/R changes the fault-current split
#: little, because the line itself has X/R of 5-15 (from memory).
DEFAULT_SOURCE_X_OVER_R = 10.0
#: Z0/Z1 ratio of a terminal's source impedance when none is given: 1.0, the
#: usual assumption for a meshed transmission network seen from a substation
#: bus whose earth-fault and three-phase currents are similar (common
#: practice; from memory; solidly earthed networks range about 0.5-3).
DEFAULT_SOURCE_Z0_OVER_Z1 = 1.0

#: Operator a = e^{j120°} of symmetrical components.
_A = np.exp(2j * np.pi / 3)
#: Search range of the magnitude of a source's positive-sequence admittance [S]:
#: from 1e-9 S (a source of 1 GΩ: absent) to 1e4 S (0.1 mΩ: an infinite bus).
_LOG_Y_MIN, _LOG_Y_MAX = np.log(1e-9), np.log(1e4)
_BISECTION_STEPS = 64
_NEWTON_STEPS = 40


def kron_reduce(z_matrix, phase_index, earth_wire_index):
    """Phase impedance matrix with the earth wires eliminated.

    Parameters
    ----------
    z_matrix : array_like, shape (n, n)
        Primitive impedance matrix of all conductors of a line [Ω/m]
        (:func:`corridor.physics.induction.impedance_matrix`).
    phase_index, earth_wire_index : sequence of int
        Rows of the phase conductors and of the earth wires (earthed at
        every tower).

    Returns
    -------
    ndarray of complex, shape (n_p, n_p)
        Z_red = Z_pp − Z_ps·Z_ss⁻¹·Z_sp [Ω/m].

    References
    ----------
    .. [1] W. H. Kersting, Distribution System Modeling and Analysis, ch. 4
       (Kron reduction); docs/methods.md §2.2.
    """
    z = np.asarray(z_matrix, complex)
    p = np.asarray(phase_index, int)
    s = np.asarray(earth_wire_index, int)
    z_pp = z[np.ix_(p, p)]
    if s.size == 0:
        return z_pp
    return z_pp - z[np.ix_(p, s)] @ np.linalg.solve(z[np.ix_(s, s)], z[np.ix_(s, p)])


def sequence_impedances(z_phase):
    """Positive- and zero-sequence impedance of a three-phase circuit.

    Parameters
    ----------
    z_phase : array_like, shape (..., 3, 3)
        Phase impedance matrix of one circuit, earth wires eliminated [Ω/m].

    Returns
    -------
    z1, z0 : ndarray of complex, shape (...)
        z1 = z_s − z_m and z0 = z_s + 2·z_m with z_s the mean self and z_m
        the mean mutual impedance [Ω/m]: the diagonal of A⁻¹·Z·A (the
        sequence impedances of the transposed line).

    References
    ----------
    .. [1] W. H. Kersting, Distribution System Modeling and Analysis, ch. 4
       (sequence impedances, z012 = A⁻¹ z_abc A).
    .. [2] J. D. Glover, M. S. Sarma, T. J. Overbye, Power System Analysis
       and Design, ch. 8 (symmetrical components).
    """
    z = np.asarray(z_phase, complex)
    diag = np.trace(z, axis1=-2, axis2=-1) / 3.0
    mutual = (z.sum(axis=(-2, -1)) - 3.0 * diag) / 6.0
    return diag - mutual, diag + 2.0 * mutual


class SourceAdmittances(NamedTuple):
    """Result of :func:`source_admittances`: sequence admittances of the terminals [S]."""

    #: Positive- (= negative-) sequence source admittance of terminal A, B [S].
    y1_start_s: np.ndarray
    y1_end_s: np.ndarray
    #: Zero-sequence source admittance of terminal A, B [S].
    y0_start_s: np.ndarray
    y0_end_s: np.ndarray
    #: False where the given currents cannot both hold: that terminal's source
    #: is then taken as absent (the fault current there is the one fed through
    #: the line, above the given value).
    consistent: np.ndarray


class FaultCurrents(NamedTuple):
    """Result of :func:`slg_fault_currents` (complex phasors [A])."""

    #: Total fault current 3·I0.
    fault_a: np.ndarray
    #: Current in the faulted phase fed from terminal A (flowing from A to the
    #: fault) and from terminal B (flowing from B to the fault): I0·(2·D1 + D0).
    phase_start_a: np.ndarray
    phase_end_a: np.ndarray
    #: Earth-return (residual) current of each side, 3·I0·D0; the two add up to
    #: the fault current.
    residual_start_a: np.ndarray
    residual_end_a: np.ndarray


def _branch_admittance(y_source, z_line):
    """Admittance of a source admittance in series with a line impedance [S]."""
    return y_source / (1.0 + y_source * z_line)


def slg_fault_currents(y1_start_s, y0_start_s, y1_end_s, y0_end_s, z1_from_start_ohm,
                       z0_from_start_ohm, z1_to_end_ohm, z0_to_end_ohm, phase_voltage_v,
                       y2_start_s=None, y2_end_s=None):
    """Currents of a bolted single line-to-earth fault on a line fed from both ends.

    Parameters
    ----------
    y1_start_s, y0_start_s, y1_end_s, y0_end_s : array_like of complex
        Positive- and zero-sequence admittance of the source behind terminal
        A (the line's start) and B (its end) [S]; 0 for no source.
    z1_from_start_ohm, z0_from_start_ohm : array_like of complex
        Positive- and zero-sequence impedance of the line from terminal A to the
        fault, x·z1 and x·z0 on a uniform line [Ω].
    z1_to_end_ohm, z0_to_end_ohm : array_like of complex
        The same from the fault to terminal B, (L − x)·z1 and (L − x)·z0 [Ω].
    phase_voltage_v : array_like
        Pre-fault phase-to-earth voltage E at the fault [V].
    y2_start_s, y2_end_s : array_like of complex, optional
        Negative-sequence source admittances [S]; default the positive-sequence
        ones (Z2 = Z1).

    Returns
    -------
    FaultCurrents
        Fault current, faulted-phase and residual currents from each side [A];
        all inputs broadcast together.

    Notes
    -----
    Sequence network k seen from the fault: branch admittances
    y_kA = Y_kA/(1 + Y_kA·Z_k(A→x)) and y_kB = Y_kB/(1 + Y_kB·Z_k(x→B)) in
    parallel, Zk_th = 1/(y_kA + y_kB); the share from A is
    D_kA = y_kA/(y_kA + y_kB). Series connection of the three networks:
    I0 = E/(Z1_th + Z2_th + Z0_th), I_f = 3·I0. Faulted phase from A:
    I0·(D1A + D2A + D0A); each healthy phase from A: I0·(D0A + a²·D1A + a·D2A)
    (= I0·(D0A − D1A) when D2 = D1); residual from A: 3·I0·D0A.

    References
    ----------
    .. [1] P. M. Anderson, Analysis of Faulted Power Systems, Iowa State
       University Press, 1973, ch. 3 (single line-to-ground fault, sequence
       networks in series).
    .. [2] J. D. Glover, M. S. Sarma, T. J. Overbye, Power System Analysis and
       Design, §9.2.
    """
    y1a = np.asarray(y1_start_s, complex)
    y1b = np.asarray(y1_end_s, complex)
    y2a = y1a if y2_start_s is None else np.asarray(y2_start_s, complex)
    y2b = y1b if y2_end_s is None else np.asarray(y2_end_s, complex)
    z1a = np.asarray(z1_from_start_ohm, complex)
    z1b = np.asarray(z1_to_end_ohm, complex)
    b1a, b1b = _branch_admittance(y1a, z1a), _branch_admittance(y1b, z1b)
    b2a, b2b = _branch_admittance(y2a, z1a), _branch_admittance(y2b, z1b)
    b0a = _branch_admittance(np.asarray(y0_start_s, complex), np.asarray(z0_from_start_ohm,
                                                                         complex))
    b0b = _branch_admittance(np.asarray(y0_end_s, complex), np.asarray(z0_to_end_ohm, complex))
    s1, s2, s0 = b1a + b1b, b2a + b2b, b0a + b0b
    i0 = np.asarray(phase_voltage_v, float) / (1.0 / s1 + 1.0 / s2 + 1.0 / s0)
    d1a, d2a, d0a = b1a / s1, b2a / s2, b0a / s0
    d1b, d2b, d0b = b1b / s1, b2b / s2, b0b / s0
    return FaultCurrents(3.0 * i0, i0 * (d1a + d2a + d0a), i0 * (d1b + d2b + d0b),
                          3.0 * i0 * d0a, 3.0 * i0 * d0b)


def _admittance(log_magnitude, angle_rad):
    """Y = |Y|·e^{−jθ} from ln|Y| (−inf: no source, Y = 0) and the impedance angle θ."""
    log_magnitude = np.asarray(log_magnitude, float)
    finite = np.isfinite(log_magnitude)
    return np.where(finite, np.exp(np.where(finite, log_magnitude, 0.0)), 0.0) * np.exp(
        -1j * np.asarray(angle_rad, float))


def _terminal_fault_current(log_y_here, log_y_there, angle_here, angle_there, ratio_here,
                            ratio_there, z1_line, z0_line, voltage):
    """|I_f| for a fault at the 'here' terminal (both sources given by log|Y1|)."""
    y1h = _admittance(log_y_here, angle_here)
    y1t = _admittance(log_y_there, angle_there)
    s1 = y1h + _branch_admittance(y1t, z1_line)
    s0 = y1h / ratio_here + _branch_admittance(y1t / ratio_there, z0_line)
    return np.abs(3.0 * voltage / (2.0 / s1 + 1.0 / s0))


def _fit_terminal(target, log_y_there, angle_here, angle_there, ratio_here, ratio_there,
                  z1_line, z0_line, voltage):
    """log|Y1| of the 'here' source giving ``target`` for a fault at 'here' (bisection)."""
    lo = np.full(np.shape(target), _LOG_Y_MIN)
    hi = np.full(np.shape(target), _LOG_Y_MAX)
    for _ in range(_BISECTION_STEPS):
        mid = 0.5 * (lo + hi)
        high = _terminal_fault_current(mid, log_y_there, angle_here, angle_there, ratio_here,
                                       ratio_there, z1_line, z0_line, voltage) > target
        hi = np.where(high, mid, hi)
        lo = np.where(high, lo, mid)
    return 0.5 * (lo + hi)


def source_admittances(fault_current_start_a, fault_current_end_a, phase_voltage_v,
                        z1_line_ohm, z0_line_ohm, x_over_r_start=DEFAULT_SOURCE_X_OVER_R,
                        x_over_r_end=DEFAULT_SOURCE_X_OVER_R,
                        z0_over_z1_start=DEFAULT_SOURCE_Z0_OVER_Z1,
                        z0_over_z1_end=DEFAULT_SOURCE_Z0_OVER_Z1):
    """Terminal source admittances that reproduce the given terminal fault currents.

    Parameters
    ----------
    fault_current_start_a, fault_current_end_a : array_like
        rms single line-to-earth fault current for a bolted fault at terminal A
        (the line's start) and at terminal B (its end) [A], > 0.
    phase_voltage_v : array_like
        Pre-fault phase-to-earth voltage [V] (nominal phase-to-phase voltage
        over √3).
    z1_line_ohm, z0_line_ohm : array_like of complex
        Positive- and zero-sequence impedance of the whole line, z·L [Ω].
    x_over_r_start, x_over_r_end : array_like
        X/R ratio of each source impedance [-].
    z0_over_z1_start, z0_over_z1_end : array_like
        Ratio Z0/Z1 of each source impedance (real: Z0 and Z1 share the angle
        given by X/R) [-].

    Returns
    -------
    SourceAdmittances
        Y1 (= Y2) and Y0 of each terminal's source [S], and a flag per line.

    Notes
    -----
    Unknowns: |Z1_A| and |Z1_B|. For a fault at A,
    I_f(0) = 3E/(2·Z1_th + Z0_th) with Zk_th = Zk_A ∥ (Zk_B + Zk_line), and
    likewise at B. |I_f(0)| grows with |Y1_A| at fixed B and falls slightly
    as B's source weakens. The pair is found by Newton's method on ln|Y1_A|,
    ln|Y1_B| from the fits of each source alone, to |ln(I/I_given)| < 1e-12;
    where that fails, by nested bisection on ln|Y1| (64 steps each). If even an absent
    source at one terminal (its current then comes only through the line)
    gives more than the given current there, the two values are
    inconsistent: that source is set to zero and the other one fitted alone;
    the flag is False for the line.

    References
    ----------
    .. [1] P. M. Anderson, Analysis of Faulted Power Systems, 1973, ch. 3.
    .. [2] J. D. Glover, M. S. Sarma, T. J. Overbye, Power System Analysis and
       Design, §9.2.
    """
    i_a = np.asarray(fault_current_start_a, float)
    i_b = np.asarray(fault_current_end_a, float)
    shape = np.broadcast_shapes(i_a.shape, i_b.shape, np.shape(phase_voltage_v),
                                np.shape(z1_line_ohm), np.shape(z0_line_ohm))
    i_a, i_b = np.broadcast_to(i_a, shape), np.broadcast_to(i_b, shape)
    e = np.broadcast_to(np.asarray(phase_voltage_v, float), shape)
    z1 = np.broadcast_to(np.asarray(z1_line_ohm, complex), shape)
    z0 = np.broadcast_to(np.asarray(z0_line_ohm, complex), shape)
    ang_a = np.broadcast_to(np.arctan(np.asarray(x_over_r_start, float)), shape)
    ang_b = np.broadcast_to(np.arctan(np.asarray(x_over_r_end, float)), shape)
    k_a = np.broadcast_to(np.asarray(z0_over_z1_start, float), shape)
    k_b = np.broadcast_to(np.asarray(z0_over_z1_end, float), shape)
    absent = np.full(shape, -np.inf)

    def fit_a(log_yb):
        return _fit_terminal(i_a, log_yb, ang_a, ang_b, k_a, k_b, z1, z0, e)

    def current_b(log_ya, log_yb):
        return _terminal_fault_current(log_yb, log_ya, ang_b, ang_a, k_b, k_a, z1, z0, e)

    def current_a(log_ya, log_yb):
        return _terminal_fault_current(log_ya, log_yb, ang_a, ang_b, k_a, k_b, z1, z0, e)

    # each source alone (the other absent): bounds, starting point and consistency check
    a_alone = fit_a(absent)
    b_alone = _fit_terminal(i_b, absent, ang_b, ang_a, k_b, k_a, z1, z0, e)
    b_absent = current_b(a_alone, absent) > i_b
    a_absent = current_a(absent, b_alone) > i_a
    # both sources: Newton's method on ln|Y1| of the two, from the single-source fits
    log_ya, log_yb = a_alone.copy(), b_alone.copy()
    for _ in range(_NEWTON_STEPS):
        r_a = np.log(current_a(log_ya, log_yb) / i_a)
        r_b = np.log(current_b(log_ya, log_yb) / i_b)
        if np.all(np.abs(r_a) + np.abs(r_b) < 1e-14):
            break
        h = 1e-7
        daa = (np.log(current_a(log_ya + h, log_yb) / i_a) - r_a) / h
        dab = (np.log(current_a(log_ya, log_yb + h) / i_a) - r_a) / h
        dba = (np.log(current_b(log_ya + h, log_yb) / i_b) - r_b) / h
        dbb = (np.log(current_b(log_ya, log_yb + h) / i_b) - r_b) / h
        det = daa * dbb - dab * dba
        ok = np.abs(det) > 1e-300
        det = np.where(ok, det, 1.0)
        step_a = np.clip(np.where(ok, (dbb * r_a - dab * r_b) / det, 0.0), -2.0, 2.0)
        step_b = np.clip(np.where(ok, (daa * r_b - dba * r_a) / det, 0.0), -2.0, 2.0)
        log_ya = np.clip(log_ya - step_a, _LOG_Y_MIN, _LOG_Y_MAX)
        log_yb = np.clip(log_yb - step_b, _LOG_Y_MIN, _LOG_Y_MAX)
    miss = ((np.abs(np.log(current_a(log_ya, log_yb) / i_a)) > 1e-12)
            | (np.abs(np.log(current_b(log_ya, log_yb) / i_b)) > 1e-12)) & ~(a_absent | b_absent)
    if miss.any():  # slow but sure: bisection on B, A refitted inside (I_B rises with |Y_B|)
        lo = np.full(shape, _LOG_Y_MIN)
        hi = np.full(shape, _LOG_Y_MAX)
        for _ in range(_BISECTION_STEPS):
            mid = 0.5 * (lo + hi)
            high = current_b(fit_a(mid), mid) > i_b
            hi = np.where(high, mid, hi)
            lo = np.where(high, lo, mid)
        mid = 0.5 * (lo + hi)
        log_yb = np.where(miss, mid, log_yb)
        log_ya = np.where(miss, fit_a(mid), log_ya)
    log_ya = np.where(b_absent, a_alone, np.where(a_absent, -np.inf, log_ya))
    log_yb = np.where(b_absent, -np.inf, np.where(a_absent, b_alone, log_yb))
    y1a = _admittance(log_ya, ang_a)
    y1b = _admittance(log_yb, ang_b)
    return SourceAdmittances(y1a, y1b, y1a / k_a, y1b / k_b, ~(a_absent | b_absent))
