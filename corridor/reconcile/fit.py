"""Calibration: per-asset coating and soil factors fitted to the readings.

For each asset with compared readings the factors θ = (ln c_coat, ln c_soil)
minimise the robust (Huber) sum of the log-residuals
r_k(θ) = ln V_meas,k − ln V_k(θ), within bounds, with
:func:`scipy.optimize.least_squares` (docs/methods.md §17):

1. Identifiability: the sensitivity of ln V to each factor at θ = 0 (finite
   difference of the production model). One reading place, or two columns that
   move the readings alike, fits one factor: the one the readings feel most.
2. A Huber fit; readings beyond the anomaly threshold after it are set aside and
   the factors fitted again without them, so an anomaly is flagged, not absorbed.
3. Uncertainty of ln c from the Jacobian at the solution: cov = s²(JᵀJ)⁻¹ with s²
   the larger of the scatter the kept readings show and the scatter assumed
   (``reading_sigma_log``).
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd
from scipy.optimize import least_squares

from corridor.reconcile.model import asset_voltages, has_leakage_attribute

log = logging.getLogger(__name__)

#: Step of the sensitivity check (in ln of the factor).
_PROBE_LOG = 0.1
#: |cos| between the two sensitivity columns beyond which they cannot be told apart.
_ALIKE_COS = 0.98
#: Sensitivity (d ln V / d ln c, largest over the readings) below which a factor is not felt.
_FELT = 0.02
FACTORS = ("coating", "soil")


def _key(name: str) -> str:
    return f"{name}_factor"


class _Model:
    """ln V at an asset's readings as a function of the free factors (ln)."""

    def __init__(self, cfg, inputs, asset_index, seg_index, scale, stages):
        self.cfg, self.inputs, self.i, self.stages = cfg, inputs, asset_index, stages
        self.seg, self.scale = seg_index, scale
        self.evaluations = 0

    def log_v(self, coating_log: float, soil_log: float) -> np.ndarray:
        self.evaluations += 1
        v = asset_voltages(self.cfg, self.inputs, self.i,
                           {"coating_factor": float(np.exp(coating_log)),
                            "soil_factor": float(np.exp(soil_log))}, self.stages)
        return np.log(np.maximum(v[self.seg] * self.scale, 1e-300))


def fit_asset(cfg, inputs, asset_index: int, readings: pd.DataFrame, settings: dict,
              stages: dict | None = None) -> tuple[dict, pd.DataFrame]:
    """Fit one asset's factors to its compared readings.

    Parameters
    ----------
    cfg : corridor.config.Config
    inputs : corridor.io.layers.Inputs
        As read (no calibration applied).
    asset_index : int
        Row of the asset in ``inputs.assets``.
    readings : DataFrame
        The asset's compared readings (:func:`corridor.reconcile.compare.compare`):
        ``segment_index``, ``current_scale``, ``measured_v``, ``log_residual``.
    settings : dict
        ``[readings]``: factor ranges, ``reading_sigma_log``, ``anomaly_log_residual``.
    stages : dict, optional
        Coupling and response stages (default the production ones).

    Returns
    -------
    tuple of (dict, DataFrame)
        The asset's calibration entry (factors, ``sigma_log`` of each, what was fitted
        and why) and the readings with ``log_residual_after`` and ``kept_in_fit``.
    """
    seg = readings["segment_index"].to_numpy(np.int64)
    scale = readings["current_scale"].to_numpy(float)
    meas = np.log(readings["measured_v"].to_numpy(float))
    model = _Model(cfg, inputs, asset_index, seg, scale, stages)
    m = len(seg)
    sigma = float(settings["reading_sigma_log"])
    thr = float(settings["anomaly_log_residual"])
    ranges = {"coating": settings["coating_factor_range"], "soil": settings["soil_factor_range"]}
    assets = inputs.assets
    candidates = [f for f in FACTORS if f != "coating" or has_leakage_attribute(assets,
                                                                               asset_index)]
    base = model.log_v(0.0, 0.0)
    sens = {f: (model.log_v(*((_PROBE_LOG, 0.0) if f == "coating" else (0.0, _PROBE_LOG)))
                - base) / _PROBE_LOG for f in candidates}
    felt = [f for f in candidates if np.max(np.abs(sens[f])) >= _FELT]
    notes = []
    for f in candidates:
        if f not in felt:
            notes.append(f"the readings do not feel the {f} factor (|d ln V/d ln c| <"
                         f" {_FELT}); held at 1")
    if "coating" not in candidates:
        notes.append("no resistance to earth to scale (coating, posts or ballast): soil only")
    places = len(np.unique(seg))
    free = list(felt)
    if len(free) == 2:
        a, b = sens["coating"], sens["soil"]
        cos = abs(float(a @ b)) / max(float(np.linalg.norm(a) * np.linalg.norm(b)), 1e-300)
        if places < 2 or cos > _ALIKE_COS:
            chosen = max(free, key=lambda f: float(np.linalg.norm(sens[f])))
            other = "soil" if chosen == "coating" else "coating"
            why = ("one reading place" if places < 2 else
                   f"readings that move alike with both factors (|cos| = {cos:.3f})")
            notes.append(f"{why}: fitted the {chosen} factor only, the one the readings feel"
                         f" most; the {other} factor held at 1 (two factors need readings at"
                         " two or more places that tell them apart)")
            free = [chosen]
    entry: dict = {"asset_id": str(assets["asset_id"].iloc[asset_index]),
                   "asset_kind": str(assets["asset_kind"].iloc[asset_index]),
                   "readings": m, "reading_places": places, "fitted": free,
                   "coating_factor": 1.0, "soil_factor": 1.0,
                   "coating_factor_sigma_log": None, "soil_factor_sigma_log": None,
                   "at_bound": [], "set_aside": 0}
    out = readings.copy()
    out["log_residual_after"] = meas - base
    out["kept_in_fit"] = True
    if not free:
        notes.append("nothing fitted")
        entry["note"] = "; ".join(notes)
        return _finish(entry, out)
    lo = np.log([ranges[f][0] for f in free])
    hi = np.log([ranges[f][1] for f in free])

    def full(x):
        d = dict(zip(free, x, strict=True))
        return d.get("coating", 0.0), d.get("soil", 0.0)

    def solve(rows):
        def fun(x):
            return (meas - model.log_v(*full(x)))[rows]
        return least_squares(fun, np.zeros(len(free)), bounds=(lo, hi), loss="huber",
                             f_scale=sigma, diff_step=np.full(len(free), 1e-4), max_nfev=60)

    keep = np.ones(m, bool)
    res = solve(keep)
    after = meas - model.log_v(*full(res.x))
    outliers = np.abs(after) > thr
    if outliers.any() and (~outliers).sum() >= len(free):
        keep = ~outliers
        res = solve(keep)
        after = meas - model.log_v(*full(res.x))
        notes.append(f"{int(outliers.sum())} reading(s) beyond the anomaly threshold after a"
                     " first fit set aside and the factors fitted again without them")
    elif outliers.any():
        notes.append("too few readings left without the anomalies to fit again: the factors"
                     " may have absorbed part of them")
    kept_r = after[keep]
    dof = int(keep.sum()) - len(free)
    s2 = max(float(kept_r @ kept_r) / dof if dof > 0 else 0.0, sigma ** 2)
    jac = np.atleast_2d(res.jac)
    try:
        cov = s2 * np.linalg.inv(jac.T @ jac)
        sig = np.sqrt(np.maximum(np.diag(cov), 0.0))
    except np.linalg.LinAlgError:
        sig = np.full(len(free), np.inf)
    for f, x, s, a, b in zip(free, res.x, sig, lo, hi, strict=True):
        entry[_key(f)] = float(np.exp(x))
        entry[f"{_key(f)}_sigma_log"] = float(s)
        entry[f"{_key(f)}_range_1sigma"] = [float(np.exp(x - s)), float(np.exp(x + s))]
        if min(x - a, b - x) < 1e-6:
            entry["at_bound"].append(f)
            notes.append(f"the {f} factor sits at its bound {float(np.exp(x)):g}: the model"
                         " cannot reach the readings by this factor alone")
    entry["set_aside"] = int((~keep).sum())
    entry["model_evaluations"] = model.evaluations
    out["log_residual_after"] = after
    out["kept_in_fit"] = keep
    entry["note"] = "; ".join(notes)
    return _finish(entry, out)


def _finish(entry: dict, out: pd.DataFrame) -> tuple[dict, pd.DataFrame]:
    r = out["log_residual"].to_numpy(float)
    a = out["log_residual_after"].to_numpy(float)
    entry["bias_log_before"] = float(r.mean())
    entry["bias_log_after"] = float(a[out["kept_in_fit"].to_numpy(bool)].mean())
    entry["spread_log_after"] = float(a.std(ddof=1)) if len(a) > 1 else None
    return entry, out
