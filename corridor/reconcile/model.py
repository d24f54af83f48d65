"""Calibration factors in a run, and the model's voltage at a reading's place.

A calibration scales, per asset, two inputs the screen is least sure of
(docs/methods.md §17):

- the *coating factor* multiplies the asset's resistance to earth: the
  specific coating resistance of a pipeline, the post resistance of a fence,
  the ballast resistance of a rail (a telecom cable has none: soil only);
- the *soil factor* multiplies the soil resistivity under the asset's segments
  (earth return, mutual coupling, leakage of posts and holidays alike).

:class:`CalibratedStage` applies them just before the coupling stage, so a
calibrated run, the fit and a plain run share one sequence of stages.
"""

from __future__ import annotations

import copy
import dataclasses
import logging
from collections.abc import Callable, Mapping

import numpy as np
import pandas as pd

log = logging.getLogger(__name__)

#: The attribute the coating factor multiplies, per asset kind (resistance to earth).
LEAKAGE_ATTRIBUTE = {"pipeline": "coating_resistance_ohm_m2", "fence": "post_resistance_ohm",
                     "rail": "ballast_resistance_ohm_km"}
#: Segment-table soil columns the soil factor scales.
_SOIL_COLUMNS = ("soil_resistivity_ohm_m", "top_resistivity_ohm_m", "bottom_resistivity_ohm_m")
#: Geometry soil arrays the soil factor scales.
_SOIL_ARRAYS = ("soil_resistivity_ohm_m", "soil_bottom_resistivity_ohm_m",
                "soil_local_resistivity_ohm_m")


def has_leakage_attribute(assets: pd.DataFrame, i: int) -> bool:
    """Whether asset row ``i`` has a finite resistance to earth the coating factor can scale."""
    attr = LEAKAGE_ATTRIBUTE.get(str(assets["asset_kind"].iloc[i]))
    if attr is None or attr not in assets:
        return False
    value = pd.to_numeric(pd.Series([assets[attr].iloc[i]]), errors="coerce").iloc[0]
    return bool(np.isfinite(value) and value > 0)


def apply_factors(run, factors: Mapping[str, Mapping[str, float]]) -> None:
    """Scale the run's asset attributes and soil by per-asset factors, in place of the run.

    ``run.inputs`` and ``run.geometry`` are replaced by scaled copies (the inputs
    other runs share are left alone); the segment table's soil columns follow.
    """
    inputs, geo = run.inputs, run.geometry
    ids = inputs.assets["asset_id"].astype(str).to_numpy()
    hit = [i for i, a in enumerate(ids) if a in factors]
    if not hit:
        return
    assets = inputs.assets.copy()
    seg_factor = np.ones(len(ids))
    for i in hit:
        f = factors[ids[i]]
        coat = float(f.get("coating_factor", 1.0))
        attr = LEAKAGE_ATTRIBUTE.get(str(assets["asset_kind"].iloc[i]))
        if coat != 1.0 and attr is not None and attr in assets:
            col = assets.columns.get_loc(attr)
            assets.iloc[i, col] = float(assets.iloc[i, col]) * coat
        seg_factor[i] = float(f.get("soil_factor", 1.0))
    run.inputs = copy.copy(inputs)
    run.inputs.assets = assets
    per_seg = seg_factor[geo.segments.feature]
    changes = {name: np.asarray(getattr(geo, name)) * per_seg for name in _SOIL_ARRAYS
               if getattr(geo, name, None) is not None}
    run.geometry = dataclasses.replace(geo, **changes)
    t = run.segment_table
    if t is not None:
        t = t.copy()
        for col in _SOIL_COLUMNS:
            if col in t:
                t[col] = t[col].to_numpy(float) * per_seg
        run.segment_table = t


class CalibratedStage:
    """A stage that applies calibration factors, then runs the wrapped stage.

    Parameters
    ----------
    fn : callable
        The stage (the coupling stage: the first that reads the soil and assets).
    factors : mapping
        asset_id -> ``{"coating_factor": float, "soil_factor": float}``.
    """

    def __init__(self, fn: Callable, factors: Mapping[str, Mapping[str, float]]):
        self.fn = fn
        self.factors = {str(k): dict(v) for k, v in factors.items()}

    def __call__(self, run) -> None:
        apply_factors(run, self.factors)
        self.fn(run)


def calibrated_stages(cfg, stages: dict | None) -> dict | None:
    """The per-asset stages with the config's calibration applied (unchanged without one)."""
    cal = getattr(cfg, "calibration", None)
    if not cal or not stages or "couple" not in stages:
        return stages
    factors = cal.get("factors", {})
    log.info("calibration %s: factors for %d asset(s) applied", cal.get("path"), len(factors))
    out = dict(stages)
    out["couple"] = CalibratedStage(stages["couple"], factors)
    return out


def model_stages() -> dict:
    """The stages the readings are compared with: coupling and response."""
    from corridor.steps import asset_stages

    st = asset_stages()
    return {k: st[k] for k in ("couple", "respond")}


def asset_voltages(cfg, inputs, asset_index: int, factors: Mapping[str, float],
                   stages: dict | None = None) -> np.ndarray:
    """Normal-load voltage of every segment of one asset under the given factors [V].

    Parameters
    ----------
    cfg : corridor.config.Config
    inputs : corridor.io.layers.Inputs
        As read, without calibration.
    asset_index : int
        Row of the asset in ``inputs.assets``.
    factors : mapping
        ``coating_factor`` and ``soil_factor`` of the asset.
    stages : dict, optional
        The coupling and response stages (default :func:`model_stages`).

    Returns
    -------
    ndarray
        ``v_normal_v`` per segment, in segment order.
    """
    from corridor.compute import compute, subset_inputs

    stages = model_stages() if stages is None else stages
    keep = np.arange(len(inputs.assets)) == asset_index
    sub = subset_inputs(inputs, keep)
    aid = str(sub.assets["asset_id"].iloc[0])
    st = dict(stages)
    st["couple"] = CalibratedStage(stages["couple"], {aid: dict(factors)})
    run = compute(cfg, sub, st, logging.DEBUG)
    t = run.segment_table
    assert t is not None  # compute() always makes the segment table
    return t.sort_values("segment_index")["v_normal_v"].to_numpy(float)
