"""Output tables built from the assessed segments: hazards and assets layers."""

from __future__ import annotations

import logging

import geopandas as gpd
import numpy as np
import pandas as pd

from corridor.limits.limit_sets import NOT_ASSESSED

log = logging.getLogger(__name__)

#: Columns of the ``hazards`` layer (the segments at or above the review threshold).
HAZARD_COLUMNS = (
    "rank", "segment_id", "asset_id", "asset_kind", "chainage_m", "length_m", "hazard_class",
    "utilization", "governing", "line_id", "fault_line_id", "separation_m", "v_normal_v",
    "v_fault_v", "v_touch_fault_v", "v_coating_stress_v", "ac_density_a_per_m2",
    "v_capacitive_open_v", "i_capacitive_short_ma", "i_capacitive_body_ma", "i_normal_body_ma",
    "earth_potential_fault_v", "emf_section_fault_v", "clearing_time_s",
    # with a load series (corridor.series): hours above a steady-state limit
    "hours_above_limit_h", "fraction_above_limit", "iso18086_mean_ratio",
)


def hazard_rows(t: pd.DataFrame, review_threshold: float = 0.5) -> np.ndarray:
    """Positions of the segments at or above the review threshold, worst first (by ``rank``).

    A segment whose utilization is missing (not assessed) is not among them: the
    hazards layer lists what was judged at or above the threshold; criteria not
    assessed are reported on their own (:func:`not_assessed_criteria`).
    """
    util = t["utilization"].to_numpy(float)
    sel = np.flatnonzero(util >= review_threshold)
    return sel[np.argsort(t["rank"].to_numpy()[sel], kind="stable")]


def hazards_layer(t: gpd.GeoDataFrame, review_threshold: float = 0.5) -> gpd.GeoDataFrame:
    """Segments at or above the review threshold, worst first, with the deciding columns."""
    sel = hazard_rows(t, review_threshold)
    cols = [c for c in HAZARD_COLUMNS if c in t.columns]
    out = t[cols + [t.geometry.name]].iloc[sel].reset_index(drop=True)
    return gpd.GeoDataFrame(out, geometry=t.geometry.name, crs=t.crs)


def _asset_index(t, assets) -> np.ndarray:
    """Position of each segment's asset among ``assets`` (-1: none), looked up once per
    run of equal consecutive ids (a segment table holds each asset's rows together)."""
    from corridor.ordering import run_starts

    pos = pd.Index(assets["asset_id"].astype(str))
    ids = t["asset_id"]
    starts = run_starts(ids)
    if len(starts) == 0:
        return np.zeros(0, np.int64)
    heads = pos.get_indexer(ids.iloc[starts])
    return np.repeat(heads, np.diff(np.r_[starts, len(ids)])).astype(np.int64)


def worst_rows(a_idx: np.ndarray, util: np.ndarray, chainage: np.ndarray,
               n: int) -> np.ndarray:
    """Row of each asset's worst segment: highest utilization (a missing one lowest),
    then lowest chainage, then first; -1 for an asset without segments.

    When each asset's rows are one run (as in a segment table), from a maximum per
    run and a sort of the rows that reach it; otherwise from a sort of every row.
    """
    worst = np.full(n, -1, np.int64)
    if len(a_idx) == 0:
        return worst
    starts = np.flatnonzero(np.r_[True, a_idx[1:] != a_idx[:-1]])
    heads = a_idx[starts]
    if (heads >= 0).all() and len(np.unique(heads)) == len(heads):
        key = np.where(np.isnan(util), -np.inf, util)
        top = np.maximum.reduceat(key, starts)
        run = np.repeat(np.arange(len(starts)), np.diff(np.r_[starts, len(a_idx)]))
        cand = np.flatnonzero(key == top[run])
        # (a missing utilization after a real -inf, as a sort on -utilization puts it)
        order = cand[np.lexsort((chainage[cand], np.isnan(util[cand]), run[cand]))]
        first = np.r_[True, run[order][1:] != run[order][:-1]]
        worst[heads[run[order][first]]] = order[first]
        return worst
    order = np.lexsort((chainage, -util, a_idx))
    first = np.r_[True, a_idx[order][1:] != a_idx[order][:-1]]
    worst[a_idx[order][first]] = order[first]
    return worst


def responsible_lines(t, a_idx: np.ndarray, n_assets: int) -> list[str]:
    """';'-joined ids of the lines that put utilization > 0 on each asset."""
    util = t["utilization"].to_numpy(float)
    # distinct (asset, line) pairs on integer codes; the strings only per pair
    codes, names = pd.factorize(pd.concat([t["line_id"], t["fault_line_id"]],
                                          ignore_index=True))
    names = np.asarray(names, dtype=object)
    m = max(len(names), 1)
    a2 = np.concatenate([a_idx, a_idx])
    keep = (codes >= 0) & np.concatenate([util > 0, util > 0])
    keep[keep] = names[codes[keep]] != ""
    key = np.unique(a2[keep].astype(np.int64) * m + codes[keep])
    a, line = key // m, names[key % m]
    out = [""] * n_assets
    if len(key) == 0:
        return out
    starts = np.flatnonzero(np.r_[True, a[1:] != a[:-1]])
    for lo, hi in zip(starts, np.r_[starts[1:], len(a)], strict=True):
        out[a[lo]] = ";".join(sorted(line[lo:hi]))
    return out


def assets_layer(run) -> gpd.GeoDataFrame:
    """One row per asset: worst utilization, length over the limit, governing, lines."""
    t = run.segment_table
    assets = run.inputs.assets
    n = len(assets)
    a_idx = _asset_index(t, assets)
    util = t["utilization"].to_numpy(float)
    length = t["length_m"].to_numpy(float)
    total = np.bincount(a_idx, weights=length, minlength=n)
    over = np.bincount(a_idx, weights=np.where(util >= 1.0, length, 0.0), minlength=n)
    # worst segment per asset: highest utilization, then lowest chainage (deterministic)
    worst = worst_rows(a_idx, util, t["chainage_m"].to_numpy(float), n)
    has = worst >= 0
    w = np.where(has, worst, 0)

    def pick(col, fill):
        v = t[col].take(w).to_numpy()  # only the worst rows (string columns convert slowly)
        return np.where(has, v, fill)

    out = pd.DataFrame({
        "asset_id": assets["asset_id"].to_numpy(dtype=object),
        "asset_kind": assets["asset_kind"].to_numpy(dtype=object),
        "source_layer": assets["source_layer"].to_numpy(dtype=object),
        "length_m": total,
        "length_over_limit_m": over,
        "worst_utilization": pick("utilization", np.nan).astype(float),
        "governing": pick("governing", "").astype(object),
        "hazard_class": pick("hazard_class", "").astype(object),
        "worst_chainage_m": pick("chainage_m", np.nan).astype(float),
        "worst_v_normal_v": pick("v_normal_v", np.nan).astype(float),
        "worst_v_fault_v": pick("v_fault_v", np.nan).astype(float),
        "worst_i_capacitive_short_ma": pick("i_capacitive_short_ma", np.nan).astype(float),
        "line_ids": responsible_lines(t, a_idx, n),
    })
    # an asset with a segment that no criterion judged is "not assessed" unless another
    # of its segments exceeds a limit: never clear, never review, on what was not checked
    judged_not = a_idx[np.isnan(util) & (a_idx >= 0)]
    partly_unjudged = np.bincount(judged_not, minlength=n) > 0
    cls = out["hazard_class"].to_numpy(dtype=object)
    out["hazard_class"] = np.where(partly_unjudged & (cls != "exceeds"), NOT_ASSESSED, cls)
    from corridor.series.stage import asset_series_columns

    asset_series_columns(out, t)  # with a load series only
    out = gpd.GeoDataFrame(out, geometry=assets.geometry.to_numpy(), crs=assets.crs)
    order = np.lexsort((out["asset_id"].to_numpy(dtype=str),
                        -out["worst_utilization"].to_numpy(float)))
    out = out.iloc[order].reset_index(drop=True)
    out.insert(0, "asset_rank", np.arange(1, len(out) + 1))
    return out


def not_assessed_criteria(run) -> list[dict]:
    """Criteria of the run's limit set that judged none of the segments they apply to.

    Read from the finished segment table (its ``ratio_<criterion>`` columns), so a
    run merged from partitions or the cache gives the same list as a full run.
    See :func:`corridor.limits.evaluate.not_assessed` for the rows.
    """
    from corridor.limits.evaluate import not_assessed

    ls = run.limit_set
    t = run.segment_table
    if ls is None or not hasattr(ls, "criteria") or t is None or "asset_kind" not in t:
        return []
    ratios = {c.name: t[f"ratio_{c.name}"].to_numpy(float) for c in ls.criteria
              if f"ratio_{c.name}" in t.columns}
    return not_assessed(ls, t["asset_kind"], ratios)


def unjudged_segments(run) -> dict | None:
    """The segments no criterion of the run's limit set judged, as one record (or None).

    See :func:`corridor.limits.evaluate.unjudged_segments`.
    """
    from corridor.limits.evaluate import unjudged_segments as unjudged

    ls, t = run.limit_set, run.segment_table
    if (ls is None or not hasattr(ls, "criteria") or t is None
            or not {"asset_kind", "asset_id", "utilization"} <= set(t.columns)):
        return None
    util = t["utilization"].to_numpy(float)
    if not np.isnan(util).any():  # the usual case: no text columns converted
        return None
    return unjudged(ls, t["asset_kind"].to_numpy(dtype=object),
                    t["asset_id"].to_numpy(dtype=object), util)


def stage_tables(run) -> None:
    """Run-wide tables: ``hazards`` and ``assets`` layers; criteria not assessed.

    The criteria the run could not assess go to
    ``run.record["not_assessed"]`` (merged into run.json) and are
    logged at WARNING: they must never be read as passing.
    """
    threshold = getattr(run.limit_set, "review_threshold", 0.5)
    run.hazards = hazards_layer(run.segment_table, threshold)
    run.assets = assets_layer(run)
    missing = not_assessed_criteria(run)
    run.record["not_assessed"] = missing
    unjudged = unjudged_segments(run)
    run.record["segments_not_assessed"] = unjudged
    run.counts["segments_not_assessed"] = 0 if unjudged is None else unjudged["segments"]
    if unjudged is not None:
        more = unjudged["assets_total"] - len(unjudged["assets"])
        log.warning("%d segment(s) NOT ASSESSED (no criterion judged them; class 'not"
                    " assessed', never clear) on asset(s) %s%s: %s", unjudged["segments"],
                    ", ".join(unjudged["assets"]), f" and {more} more" if more > 0 else "",
                    unjudged["reason"])
    # the normal-load worst case over unknown directions and angles (docs/methods.md §8)
    from corridor.steps.couple import normal_load_assumption

    run.record["normal_load_assumption"] = normal_load_assumption(run.config, run.inputs.lines)
    run.counts["criteria_not_assessed"] = len(missing)
    for row in missing:
        log.warning("criterion %s NOT ASSESSED on %d segments: %s", row["label"],
                    row["segments"], row["reason"])
