"""Assessment stage: per-segment quantities against the run's limit set.

Quantities handed to the limit set (names as in ``config/limits/*.toml``):

- ``v_normal_v``, ``v_fault_v``: |V| to remote earth from the response solve;
- ``v_touch_fault_v``: (v_fault_v + earth_potential_fault_v) loaded by a
  1000 Ω body through the asset's source impedance. A person near a faulted
  tower stands on raised earth while the asset is driven by induction;
  adding the magnitudes is the conservative bound (the phase between the two
  is not known at screening level). The loading R_b/|R_b + Z_th| tells a
  floating fence (high source impedance) from a pipeline (a few ohms);
- ``v_coating_stress_v`` (coated kinds, e.g. pipelines): the same
  conservative sum, the voltage across the coating between the pipe and the
  soil around it;
- ``ac_density_a_per_m2`` (coated kinds): J = 8V/(ρπd) at a 1 cm² holiday;
- ``i_normal_body_ma``: steady-state current through a 1000 Ω body touching
  the asset (NACE's 5 mA criterion), |V|/|R_b + Z_th|;
- ``i_capacitive_body_ma``: current through a 1000 Ω body touching the
  capacitively charged asset, |V|/|R_b + Z_th|. For an isolated object
  (Z_th of hundreds of kilohms) it equals the short-circuit current of the
  NESC-style 5 mA rule; for an asset already grounded elsewhere the ground,
  not the person, carries the short-circuit current;
- ``emf_section_normal_v``, ``emf_section_fault_v`` (kinds judged by the
  section EMF, e.g. telecom): the
  longitudinal EMF summed over the cable between its grounded ends, the
  quantity the ITU-T Directives limit;
- ``i_capacitive_short_ma``, ``v_capacitive_open_v``: short-circuit current and
  open-circuit voltage of the capacitively charged asset.

- ``v_step_fault_v``: the step voltage over 1 m beside the asset from the
  footing of a faulted tower (hemisphere, docs/methods.md §4.6); steps
  around the asset's own grounds are not included (their electrode shape is
  not in the layers).

Not computed (a criterion on it declares ``needs`` and is reported as not
assessed): ``ac_dc_density_ratio`` (needs the DC current density at a
holiday).
"""

from __future__ import annotations

import numpy as np

from corridor.limits.ac_corrosion import iso18086_utilization
from corridor.limits.criteria import ac_current_density_a_per_m2
from corridor.limits.evaluate import evaluate
from corridor.limits.limit_sets import COMPUTED_QUANTITIES
from corridor.steps.columns import kinds_with

#: Quantities derived here from the segment table (the rest of
#: :data:`corridor.limits.limit_sets.COMPUTED_QUANTITIES` are its columns as they are).
DERIVED = ("ac_density_a_per_m2", "iso18086_density_ratio", "iso18086_density_ratio_with_dc")
QUANTITIES = tuple(q for q in COMPUTED_QUANTITIES if q not in DERIVED)


def derived_quantities(table) -> dict[str, np.ndarray]:
    """Quantities the limit set judges, from the segment table's columns."""
    kind = table["asset_kind"].to_numpy(dtype=object)
    coated = kinds_with(kind, "coated")
    out = {name: table[name].to_numpy(float) for name in QUANTITIES if name in table}
    j_ac = np.where(
        coated, ac_current_density_a_per_m2(table["v_normal_v"].to_numpy(float),
                                          table["soil_resistivity_ohm_m"].to_numpy(float)),
        np.nan)
    out["ac_density_a_per_m2"] = j_ac
    # ISO 18086 clause 7: J_ac < 30 A/m², or J_dc < 1 A/m², or J_ac/J_dc < 3, joined by "or"
    # (corridor.limits.ac_corrosion). Without J_dc the alternatives cannot be credited: the
    # first quantity falls back to J_ac alone (a J_ac at or above 30 A/m² exceeds), the
    # second stays empty there, so the run lists it as not assessed (docs/methods.md §10).
    j_dc = (table["dc_current_density_a_per_m2"].to_numpy(float)
            if "dc_current_density_a_per_m2" in table else np.full(len(table), np.nan))
    strict = np.where(coated, iso18086_utilization(j_ac, j_dc), np.nan)
    out["iso18086_density_ratio_with_dc"] = strict
    out["iso18086_density_ratio"] = np.where(np.isnan(strict) & coated, j_ac / 30.0, strict)
    return out


def assess(limit_set, table, categories=None) -> dict:
    """Evaluate every criterion on every segment of ``table``."""
    q = derived_quantities(table)
    result = evaluate(
        limit_set, table["asset_kind"].to_numpy(dtype=object).astype(str), q,
        table["clearing_time_s"].to_numpy(float),
        table["soil_resistivity_ohm_m"].to_numpy(float),
        table["high_reliability"].to_numpy(bool), categories=categories)
    result["quantities"] = q
    return result
