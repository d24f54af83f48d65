"""Predicted against measured: ratio, log-residual, per-asset bias, anomalies.

For each placed reading the model's normal-load voltage of its segment
(``v_normal_v``) is scaled to the line current at the time of the reading
(:func:`current_scale`), then

    ratio = measured / predicted,   log_residual = ln(measured / predicted)

and per asset: bias (mean log-residual), spread (standard deviation) and the
number of readings (docs/methods.md §17).
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd
import shapely

from corridor.reconcile.readings import parse_currents

log = logging.getLogger(__name__)

#: Grounding items that break the asset in series (the insulating joints).
BREAK_ITEMS = ("insulating_joint", "gap")


def current_scale(currents_text: str, line_id: str, lines_in_reach: int,
                  load_a: dict[str, float], measured_at: str = "") -> tuple[float, str]:
    """Factor from the run's line load to the line current at the time of a reading.

    The normal-load voltage is linear in the line current (docs/methods.md §11), so the
    segment's voltage is scaled by the governing line's current at the time over its load
    attribute. Exact when one line is in reach; with several, only the governing line's
    share is rescaled and the comparison is approximate.

    This is the one place the current at a reading's time is found: a load time series
    (per line, by time) plugs in here, between the reading's own currents and the load
    attributes, keyed by ``measured_at``.

    Parameters
    ----------
    currents_text : str
        The reading's ``line_currents_a`` (``'LINE=amps;...'``), may be empty.
    line_id : str
        The segment's governing (nearest) line.
    lines_in_reach : int
        Lines within reach of the segment.
    load_a : dict
        The run's ``load_current_a`` per line id [A].
    measured_at : str
        Time of the reading (for a load time series).

    Returns
    -------
    tuple of (float, str)
        The scale factor and the basis of the comparison, in words.
    """
    given = parse_currents(currents_text) if currents_text else {}
    base = load_a.get(line_id, float("nan"))
    if line_id and line_id in given and np.isfinite(base) and base > 0:
        basis = "line current of the reading"
        if lines_in_reach > 1:
            basis += f" (approximate: {lines_in_reach} lines in reach, only {line_id} rescaled)"
        return given[line_id] / base, basis
    # (a load time series, keyed by measured_at, is looked up here when available)
    return 1.0, "load attributes of the lines (approximate: no line current of the time)"


def break_chainages(inputs, segments: pd.DataFrame) -> dict[str, np.ndarray]:
    """Chainage of every insulating joint or gap, per asset [m]."""
    g = getattr(inputs, "grounds", None)
    out: dict[str, list[float]] = {}
    if g is None or not len(g) or "item" not in g:
        return {}
    seg_ids = segments["asset_id"].astype(str).to_numpy()
    for aid, item, geom in zip(g["asset_id"].astype(str), g["item"], g.geometry, strict=True):
        if item not in BREAK_ITEMS or geom is None:
            continue
        mine = np.flatnonzero(seg_ids == aid)
        if not len(mine):
            continue
        d = shapely.distance(segments.geometry.to_numpy()[mine], geom)
        s = mine[int(np.argmin(d))]
        along = float(shapely.line_locate_point(segments.geometry.iloc[s], geom))
        out.setdefault(aid, []).append(float(segments["chainage_m"].iloc[s]) + along)
    return {k: np.array(v) for k, v in out.items()}


def likely_cause(log_residual: float, chainage_m: float, breaks_m: np.ndarray | None,
                 near_m: float, factor_at_bound: bool) -> str:
    """The likely causes of an anomaly, in plain words.

    Parameters
    ----------
    log_residual : float
        ln(measured/predicted) after calibration.
    chainage_m : float
        Where the reading was taken.
    breaks_m : ndarray or None
        Chainages of the asset's insulating joints.
    near_m : float
        Distance from a joint within which a reading is "beside" it.
    factor_at_bound : bool
        A fitted factor of the asset sits at its bound.
    """
    causes = []
    beside = breaks_m is not None and len(breaks_m) and np.isfinite(chainage_m) and float(
        np.min(np.abs(breaks_m - chainage_m))) <= near_m
    if log_residual < 0:
        if beside:
            causes.append("a shorted (bridged) insulating joint: the measured voltage lacks"
                          " the rise the joint should cause")
        causes.append("an unknown bond or ground near the reading (a bonded structure, a"
                      " grounding cell, a decoupler that has failed short)")
    else:
        if beside:
            causes.append("the insulating joint may sit elsewhere than recorded")
        causes.append("a ground or bond on record that is not there or is disconnected"
                      " (an open decoupler, a removed bond)")
    causes.append("a wrong asset attribute (coating, posts, ballast, position)"
                  + (" - a fitted factor sits at its bound" if factor_at_bound else ""))
    return "; ".join(causes)


def compare(placed: pd.DataFrame, segments: pd.DataFrame, lines: pd.DataFrame) -> pd.DataFrame:
    """Predicted voltage, ratio and log-residual of every placed reading.

    Parameters
    ----------
    placed : DataFrame
        :func:`corridor.reconcile.readings.place`.
    segments : DataFrame
        The run's segment table (``v_normal_v``, ``line_id``, ``lines_in_reach``,
        ``ac_density_a_per_m2`` where computed).
    lines : DataFrame
        The run's power lines (``line_id``, ``load_current_a``).

    Returns
    -------
    DataFrame
        ``placed`` with ``predicted_v``, ``ratio``, ``log_residual``, ``current_basis``,
        ``predicted_ac_density_a_per_m2`` and ``density_ratio`` (NaN where not compared).
    """
    out = placed.copy()
    n = len(out)
    load = pd.to_numeric(lines["load_current_a"], errors="coerce")
    load_a = dict(zip(lines["line_id"].astype(str), load.to_numpy(float), strict=True))
    key = {(str(a), int(i)): k for k, (a, i) in enumerate(
        zip(segments["asset_id"], segments["segment_index"], strict=True))}
    v_seg = segments["v_normal_v"].to_numpy(float)
    dens = (segments["ac_density_a_per_m2"].to_numpy(float) if "ac_density_a_per_m2" in segments
            else np.full(len(segments), np.nan))
    pred = np.full(n, np.nan)
    pred_d = np.full(n, np.nan)
    basis = [""] * n
    scales = np.full(n, np.nan)
    for k in range(n):
        if out["status"].iloc[k] != "placed":
            continue
        s = key[(str(out["asset_id"].iloc[k]), int(out["segment_index"].iloc[k]))]
        scale, basis[k] = current_scale(str(out["line_currents_a"].iloc[k] or ""),
                                        str(segments["line_id"].iloc[s]),
                                        int(segments["lines_in_reach"].iloc[s]), load_a,
                                        str(out["measured_at"].iloc[k] or ""))
        scales[k] = scale
        pred[k] = v_seg[s] * scale
        pred_d[k] = dens[s] * scale
    meas = out["measured_v"].to_numpy(float)
    ok = np.isfinite(pred) & (pred > 0) & (meas > 0)
    out["predicted_v"] = pred
    out["ratio"] = np.where(ok, meas / np.where(ok, pred, 1.0), np.nan)
    out["log_residual"] = np.where(ok, np.log(np.where(ok, meas / np.where(ok, pred, 1.0),
                                                       1.0)), np.nan)
    out["current_basis"] = basis
    out["current_scale"] = scales
    out["predicted_ac_density_a_per_m2"] = pred_d
    md = out["measured_ac_density_a_per_m2"].to_numpy(float)
    okd = np.isfinite(md) & np.isfinite(pred_d) & (pred_d > 0)
    out["density_ratio"] = np.where(okd, md / np.where(okd, pred_d, 1.0), np.nan)
    bad = (out["status"] == "placed") & ~ok
    if bad.any():
        out.loc[bad, "status"] = "not compared"
        out.loc[bad, "reason"] = "the model predicts no voltage at this segment"
    approx = sum(1 for b in basis if b.startswith("load attributes"))
    if approx:
        log.warning("readings: %d reading(s) compared at the lines' load attributes, not at"
                    " the line currents of their time: the comparison is approximate", approx)
    return out


def flag_anomalies(frame: pd.DataFrame, threshold: float, breaks: dict[str, np.ndarray],
                   near_m: float, at_bound: set[str] | None = None) -> pd.DataFrame:
    """``anomaly`` (|log_residual| > threshold) and ``likely_cause`` of each reading."""
    out = frame.copy()
    r = out["log_residual"].to_numpy(float)
    flag = np.isfinite(r) & (np.abs(r) > threshold)
    out["anomaly"] = flag
    causes = [""] * len(out)
    for k in np.flatnonzero(flag):
        aid = str(out["asset_id"].iloc[k])
        causes[k] = likely_cause(float(r[k]), float(out["chainage_m"].iloc[k]),
                                 breaks.get(aid), near_m, aid in (at_bound or set()))
    out["likely_cause"] = causes
    return out


def asset_summary(frame: pd.DataFrame, column: str = "log_residual") -> pd.DataFrame:
    """Per asset: readings compared, bias (mean log-residual), spread (std), anomalies."""
    ok = frame[np.isfinite(frame[column].to_numpy(float))]
    rows = []
    for aid, g in ok.groupby(ok["asset_id"].astype(str), sort=True):
        r = g[column].to_numpy(float)
        rows.append({"asset_id": aid, "readings": len(r), "bias_log": float(r.mean()),
                     "spread_log": float(r.std(ddof=1)) if len(r) > 1 else float("nan"),
                     "bias_ratio": float(np.exp(r.mean())),
                     "anomalies": int(g["anomaly"].sum()) if "anomaly" in g else 0})
    return pd.DataFrame(rows, columns=["asset_id", "readings", "bias_log", "spread_log",
                                       "bias_ratio", "anomalies"])
