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

Not computed (a criterion on them declares ``needs`` and is reported as not
assessed): ``v_step_fault_v`` (needs the ground electrodes' geometry) and
``ac_dc_density_ratio`` (needs the DC current density at a holiday).
"""

from __future__ import annotations

import numpy as np

from corridor.limits.criteria import ac_current_density_a_per_m2
from corridor.limits.limit_sets import COMPUTED_QUANTITIES, evaluate
from corridor.steps.columns import kinds_with

#: Segment-table columns handed to the limit set as they are (the rest of
#: :data:`corridor.limits.limit_sets.COMPUTED_QUANTITIES` is derived here).
QUANTITIES = tuple(q for q in COMPUTED_QUANTITIES if q != "ac_density_a_per_m2")


def derived_quantities(table) -> dict[str, np.ndarray]:
    """Quantities the limit set judges, from the segment table's columns."""
    kind = table["asset_kind"].to_numpy(dtype=object)
    coated = kinds_with(kind, "coated")
    out = {name: table[name].to_numpy(float) for name in QUANTITIES if name in table}
    out["ac_density_a_per_m2"] = np.where(
        coated, ac_current_density_a_per_m2(table["v_normal_v"].to_numpy(float),
                                          table["soil_resistivity_ohm_m"].to_numpy(float)),
        np.nan)
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
