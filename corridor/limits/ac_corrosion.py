"""ISO 18086 combination of the AC-corrosion criteria of a cathodically protected pipe.

ISO 18086:2019, clause 7 (acceptable interference levels; clause number and
values from memory, check the edition in use): after the AC voltage is brought
to its target (15 V), the AC corrosion risk is acceptable when, over a
representative period (for example 24 h), **any one** of these holds:

a) J_ac < 30 A/m²;
b) J_ac ≥ 30 A/m² but J_dc < 1 A/m²;
c) J_ac / J_dc < 3.

(CEN/TS 15280:2006 gave 5 for the ratio; from memory.) J_ac is the AC and J_dc
the DC (cathodic-protection) current density at a holiday or coupon. The
alternatives are joined by "or", so the combined utilization is the smallest
of the alternatives' ratios. An alternative whose input is missing cannot pass
the pipe; where it is the only way the pipe could still pass, the combined
criterion is *not assessed* (NaN), never passed (docs/methods.md §6.2, §6.8).
"""

from __future__ import annotations

import numpy as np

__all__ = ["iso18086_utilization"]


def iso18086_utilization(ac_density_a_per_m2, dc_density_a_per_m2, *,
                         ac_limit_a_per_m2=30.0, dc_limit_a_per_m2=1.0, ratio_limit=3.0):
    """Combined ISO 18086 utilization of the current-density criteria.

    Parameters
    ----------
    ac_density_a_per_m2 : array_like
        AC current density at a 1 cm² holiday [A/m²]; NaN where unknown.
    dc_density_a_per_m2 : array_like
        DC (cathodic-protection) current density at the holiday [A/m²], from
        coupons or a survey; NaN where the operator has no value.
    ac_limit_a_per_m2, dc_limit_a_per_m2, ratio_limit : float
        Limits of the three alternatives (defaults ISO 18086:2019 clause 7,
        from memory).

    Returns
    -------
    ndarray
        min(J_ac/30, J_dc/1, (J_ac/J_dc)/3) over the alternatives that can be
        evaluated; < 1 passes. NaN (not assessed) where J_ac is unknown, or
        where J_ac alone does not pass and J_dc is unknown.

    Notes
    -----
    Alternative b) is written as J_dc/1 A/m²: it decides only where a) fails,
    and then min(...) < 1 exactly when J_dc < 1. A J_dc of 0 (no cathodic
    current reaches the holiday) leaves only a): b) passes trivially in the
    formula but the ratio c) is infinite, so J_dc = 0 is treated as unknown.
    """
    j_ac = np.abs(np.asarray(ac_density_a_per_m2, dtype=float))
    j_dc = np.abs(np.asarray(dc_density_a_per_m2, dtype=float))
    j_ac, j_dc = np.broadcast_arrays(j_ac, j_dc)
    u_ac = j_ac / ac_limit_a_per_m2
    known_dc = np.isfinite(j_dc) & (j_dc > 0)
    safe_dc = np.where(known_dc, j_dc, 1.0)
    u_dc = np.where(known_dc, j_dc / dc_limit_a_per_m2, np.nan)
    u_ratio = np.where(known_dc, j_ac / safe_dc / ratio_limit, np.nan)
    combined = np.fmin(u_ac, np.fmin(u_dc, u_ratio))
    # without J_dc, J_ac alone can pass the pipe but cannot fail it
    undecided = ~known_dc & (u_ac >= 1.0)
    return np.where(np.isfinite(j_ac) & ~undecided, combined, np.nan)
