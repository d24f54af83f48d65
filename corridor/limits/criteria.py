"""Permissible-value formulas of the safety and corrosion criteria.

Pure, vectorised functions: arrays in, arrays out, no configuration. The limit
sets in ``config/limits/`` choose which of these to apply and with which
parameters (see :mod:`corridor.limits.limit_sets`).

Every function broadcasts its arguments with numpy's rules and returns a
float ndarray (a 0-d array for scalar input).
"""

from __future__ import annotations

import numpy as np

#: Shortest and longest shock duration for which the IEEE Std 80 body-current
#: formula is stated to hold [s] (IEEE Std 80-2013, clause 5.3; from memory).
IEEE80_DURATION_RANGE_S = (0.03, 3.0)

#: Body-current constant k of I_B = k/sqrt(t) by body weight [A·s^0.5]
#: (IEEE Std 80-2013, clause 5.3 (50 kg) and 5.4 (70 kg); from memory).
IEEE80_K_BY_BODY_WEIGHT_KG = {50: 0.116, 70: 0.157}

#: Resistance of the human body used by IEEE Std 80 [Ω] (IEEE Std 80-2013, clause 7.1;
#: from memory).
IEEE80_BODY_RESISTANCE_OHM = 1000.0

#: Diameter of a circular coating holiday of 1 cm² area [m] (d = sqrt(4A/π)).
HOLIDAY_1CM2_DIAMETER_M = 0.01128


def ieee80_body_current_a(duration_s, body_weight_kg=50):
    """Tolerable body current of IEEE Std 80 (Dalziel's fibrillation limit).

    Parameters
    ----------
    duration_s : array_like
        Shock (fault clearing) duration [s].
    body_weight_kg : {50, 70}
        Body weight the criterion is stated for [kg]. 50 kg is the
        conservative choice.

    Returns
    -------
    ndarray of float
        Tolerable rms body current [A].

    Raises
    ------
    ValueError
        If ``body_weight_kg`` is neither 50 nor 70.

    Notes
    -----
    I_B = k / sqrt(t_s), k = 0.116 A·s^0.5 for 50 kg and 0.157 for 70 kg.

    The standard states the formula for 0.03 s <= t_s <= 3 s. Outside it:

    * durations below 0.03 s (and zero or negative ones) are raised to
      0.03 s. The formula grows without bound as t -> 0, so this gives a
      *lower* current than the formula would and is conservative;
    * durations above 3 s are **not** clamped down to 3 s, because that would
      hold the current at its 3 s value and so permit more than the formula's
      own trend; the formula is extrapolated instead, which keeps lowering the
      tolerable current and is conservative. Steady-state exposure should be
      judged with a steady-state criterion, not this one;
    * NaN stays NaN.

    References
    ----------
    .. [1] IEEE Std 80-2013, *IEEE Guide for Safety in AC Substation
       Grounding*, clauses 5.3 and 5.4 (from memory).
    .. [2] C. F. Dalziel, "Dangerous electric currents", AIEE Trans. 65, 1946.
    """
    key = _body_weight_key(body_weight_kg)
    t = np.asarray(duration_s, dtype=float)
    t_eff = np.where(t < IEEE80_DURATION_RANGE_S[0], IEEE80_DURATION_RANGE_S[0], t)
    return IEEE80_K_BY_BODY_WEIGHT_KG[key] / np.sqrt(t_eff)


def surface_layer_derating(soil_resistivity_ohm_m, surface_resistivity_ohm_m,
                           surface_thickness_m):
    """Surface-layer derating factor Cs of IEEE Std 80.

    Parameters
    ----------
    soil_resistivity_ohm_m : array_like
        Resistivity of the native soil below the surface layer [Ω·m].
    surface_resistivity_ohm_m : array_like
        Resistivity of the surface layer (e.g. crushed rock) [Ω·m], > 0.
    surface_thickness_m : array_like
        Thickness of the surface layer [m], >= 0.

    Returns
    -------
    ndarray of float
        Derating factor Cs [-]; 1 where the surface layer has the soil's
        resistivity.

    Notes
    -----
    Cs = 1 - 0.09·(1 - ρ/ρs) / (2·hs + 0.09)  (empirical fit, ±5 %).

    References
    ----------
    .. [1] IEEE Std 80-2013, clause 7.4 (from memory, widely reproduced).
    """
    rho = np.asarray(soil_resistivity_ohm_m, dtype=float)
    rho_s = np.asarray(surface_resistivity_ohm_m, dtype=float)
    h_s = np.asarray(surface_thickness_m, dtype=float)
    return 1.0 - 0.09 * (1.0 - rho / rho_s) / (2.0 * h_s + 0.09)


def ieee80_touch_voltage_v(duration_s, body_weight_kg, surface_resistivity_ohm_m, cs):
    """Tolerable touch voltage of IEEE Std 80.

    Parameters
    ----------
    duration_s : array_like
        Shock (fault clearing) duration [s]; treated as in
        :func:`ieee80_body_current_a`.
    body_weight_kg : {50, 70}
        Body weight [kg].
    surface_resistivity_ohm_m : array_like
        Resistivity of the material the person stands on [Ω·m]; the soil's
        resistivity where there is no surface layer.
    cs : array_like
        Surface-layer derating factor [-] (:func:`surface_layer_derating`);
        1 without a surface layer.

    Returns
    -------
    ndarray of float
        Tolerable touch voltage [V rms].

    Notes
    -----
    E_touch = (R_B + 1.5·Cs·ρs)·I_B,  R_B = 1000 Ω, I_B = k/sqrt(t).
    1.5·Cs·ρs is the two feet in parallel, each a disc of resistance
    3·Cs·ρs.

    References
    ----------
    .. [1] IEEE Std 80-2013, clause 8.3 (from memory).
    """
    i_b = ieee80_body_current_a(duration_s, body_weight_kg)
    rho_s = np.asarray(surface_resistivity_ohm_m, dtype=float)
    return (IEEE80_BODY_RESISTANCE_OHM + 1.5 * np.asarray(cs, dtype=float) * rho_s) * i_b


def ieee80_step_voltage_v(duration_s, body_weight_kg, surface_resistivity_ohm_m, cs):
    """Tolerable step voltage of IEEE Std 80.

    Parameters
    ----------
    duration_s : array_like
        Shock (fault clearing) duration [s]; treated as in
        :func:`ieee80_body_current_a`.
    body_weight_kg : {50, 70}
        Body weight [kg].
    surface_resistivity_ohm_m : array_like
        Resistivity of the material the person stands on [Ω·m].
    cs : array_like
        Surface-layer derating factor [-]; 1 without a surface layer.

    Returns
    -------
    ndarray of float
        Tolerable step voltage [V rms].

    Notes
    -----
    E_step = (R_B + 6·Cs·ρs)·I_B,  R_B = 1000 Ω, I_B = k/sqrt(t)
    (the two feet in series).

    References
    ----------
    .. [1] IEEE Std 80-2013, clause 8.3 (from memory).
    """
    i_b = ieee80_body_current_a(duration_s, body_weight_kg)
    rho_s = np.asarray(surface_resistivity_ohm_m, dtype=float)
    return (IEEE80_BODY_RESISTANCE_OHM + 6.0 * np.asarray(cs, dtype=float) * rho_s) * i_b


def interpolate_vs_duration(duration_s, table_duration_s, table_value):
    """Read a published limit-versus-duration table at given durations.

    Parameters
    ----------
    duration_s : array_like
        Durations to read the table at [s].
    table_duration_s : array_like
        The table's durations [s], strictly increasing, > 0.
    table_value : array_like
        The table's values at those durations (e.g. permissible touch
        voltage [V]), > 0, same length.

    Returns
    -------
    ndarray of float
        Interpolated values, in the table's unit.

    Raises
    ------
    ValueError
        If the table is empty, of unequal lengths, not strictly increasing
        or not positive.

    Notes
    -----
    Linear interpolation in (log t, log U), i.e. on [t_i, t_{i+1}]

        U = U_i·(t/t_i)^s_i,  s_i = ln(U_{i+1}/U_i) / ln(t_{i+1}/t_i),

    which returns the table's own points exactly.

    The body-current and touch-voltage curves these tables sample
    (IEC 60479-1, EN 50522 Figure 4, EN 50122-1) are drawn on log-log axes,
    where they are close to straight between points; interpolating linearly
    in log-log reads the drawn curve, while linear interpolation on linear
    axes would bow above it between widely spaced points.

    Outside the table the end values are held:

    * below the shortest duration (including zero or negative durations) the
      first, i.e. highest, value is used. The true curves keep rising as the
      duration falls, so this is conservative;
    * beyond the longest duration the last value is used. The published
      curves flatten towards their long-duration asymptote there, so holding
      the last point is the table's own reading; a set that needs a lower
      long-term value must list it as a point.

    NaN durations give NaN. Between points, the result is monotone whenever
    the table is.

    References
    ----------
    .. [1] IEC 60479-1:2005, *Effects of current on human beings and
       livestock*, Figure 20 (log-log time/current zones; from memory).
    .. [2] EN 50522:2010, Figure 4 and Table B.3 (from memory).
    """
    xp, fp = _check_table(table_duration_s, table_value)
    t = np.asarray(duration_s, dtype=float)
    if xp.size == 1:
        return np.where(np.isnan(t), np.nan, fp[0])
    # U = U_i·(t/t_i)^s_i on [t_i, t_{i+1}], s_i the log-log slope; written this
    # way the table's own points come back exactly (1.0**s == 1.0).
    slope = np.log(fp[1:] / fp[:-1]) / np.log(xp[1:] / xp[:-1])
    inside = (t > xp[0]) & (t < xp[-1])
    t_in = np.where(inside, t, xp[0])
    i = np.clip(np.searchsorted(xp, t_in, side="right") - 1, 0, xp.size - 2)
    u = fp[i] * (t_in / xp[i]) ** slope[i]
    # Zero and negative durations read as the first point; NaN stays NaN.
    u = np.where(t <= xp[0], fp[0], np.where(t >= xp[-1], fp[-1], u))
    return np.where(np.isnan(t), np.nan, u)


def itu_telecom_fault_limit_v(clearing_time_s, high_reliability, *,
                              normal_limit_v=430.0, high_reliability_limit_v=650.0,
                              high_reliability_max_clearing_s=0.2):
    """Permissible induced longitudinal EMF on a telecom line during a fault.

    Parameters
    ----------
    clearing_time_s : array_like
        Fault clearing time of the inducing power line [s].
    high_reliability : array_like of bool
        True where the power line is a high-reliability line in the sense of
        the ITU-T Directives.
    normal_limit_v : float, optional
        Limit for ordinary lines [V rms]. Default 430 V.
    high_reliability_limit_v : float, optional
        Limit for high-reliability lines cleared fast enough [V rms].
        Default 650 V.
    high_reliability_max_clearing_s : float, optional
        Longest clearing time at which the higher limit holds [s] (inclusive).
        Default 0.2 s.

    Returns
    -------
    ndarray of float
        Permissible EMF [V rms]; NaN where the clearing time is NaN.

    Notes
    -----
    U_perm = 650 V if the line is high-reliability and t <= 0.2 s, else 430 V.

    References
    ----------
    .. [1] ITU-T, *Directives concerning the protection of telecommunication
       lines against harmful effects from electric power and electrified
       railway lines*, Vol. VI, Danger (from memory).
    """
    t = np.asarray(clearing_time_s, dtype=float)
    hr = np.asarray(high_reliability, dtype=bool)
    high = hr & (t <= high_reliability_max_clearing_s)
    out = np.where(high, float(high_reliability_limit_v), float(normal_limit_v))
    return np.where(np.isnan(t), np.nan, out)


def ac_current_density_a_per_m2(voltage_v, soil_resistivity_ohm_m,
                                holiday_diameter_m=HOLIDAY_1CM2_DIAMETER_M):
    """AC current density at a circular coating holiday.

    Parameters
    ----------
    voltage_v : array_like
        AC pipe-to-soil voltage [V rms].
    soil_resistivity_ohm_m : array_like
        Soil resistivity at the holiday [Ω·m], > 0.
    holiday_diameter_m : array_like, optional
        Diameter of the holiday [m]. Default 0.01128 m, a 1 cm² holiday.

    Returns
    -------
    ndarray of float
        AC current density [A/m²].

    Notes
    -----
    The spread resistance of a disc of diameter d on the soil surface is
    R = ρ/(2d); dividing I = V/R by the area πd²/4 gives

        J = 8·V / (ρ·π·d).

    References
    ----------
    .. [1] ISO 18086:2019, *Corrosion of metals and alloys — Determination of
       AC corrosion — Protection criteria*, Annex (formula; attribution from
       memory).
    .. [2] CEN/TS 15280:2006 (same formula; from memory).
    """
    v = np.asarray(voltage_v, dtype=float)
    rho = np.asarray(soil_resistivity_ohm_m, dtype=float)
    d = np.asarray(holiday_diameter_m, dtype=float)
    return 8.0 * v / (rho * np.pi * d)


def _body_weight_key(body_weight_kg):
    try:
        key = int(body_weight_kg)
    except (TypeError, ValueError):
        key = None
    if key != body_weight_kg or key not in IEEE80_K_BY_BODY_WEIGHT_KG:
        raise ValueError(
            f"body_weight_kg must be 50 or 70 (IEEE Std 80), got {body_weight_kg!r}")
    return key


def _check_table(table_duration_s, table_value):
    xp = np.asarray(table_duration_s, dtype=float).ravel()
    fp = np.asarray(table_value, dtype=float).ravel()
    if xp.size == 0 or xp.size != fp.size:
        raise ValueError("duration table must be non-empty with equal-length columns, got "
                         f"{xp.size} durations and {fp.size} values")
    if not (np.all(np.isfinite(xp)) and np.all(xp > 0) and np.all(np.diff(xp) > 0)):
        raise ValueError("table durations must be finite, positive and strictly increasing")
    if not (np.all(np.isfinite(fp)) and np.all(fp > 0)):
        raise ValueError("table values must be finite and positive")
    return xp, fp
