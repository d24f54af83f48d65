"""Summaries of an ensemble: per-segment bands, per-asset bands and the deciding input.

Per segment (columns of the segment table, docs/methods.md §16):

``utilization_p05``, ``utilization_p50``, ``utilization_p95``
    5th, 50th and 95th percentile of the members' utilization [-].
``share_exceeding``
    Share of the members with a utilization of 1 or more [-].
``verdict_robust``
    The verdict is the same across the band: the 5th percentile is 1 or more (exceeds
    in the band) or the 95th is below 1 (clear in the band).
``band_verdict``
    ``exceeds``, ``clear`` or ``uncertain`` (the band straddles 1); ``not assessed``
    where no member has a utilization (never read as clear).
``band_driver``
    On an uncertain segment, the input its utilization is most sensitive to by
    Spearman rank correlation (:func:`segment_drivers`); empty elsewhere.

Per asset (:func:`asset_bands`, ``run.extra_tables["bands"]``; joined into the assets
layer by :func:`add_band_columns`): the same of the asset's worst utilization, and the
input its worst utilization is most sensitive to by Spearman rank correlation.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from corridor.uncertainty.settings import Bands

log = logging.getLogger(__name__)

__all__ = ["ASSET_COLUMNS", "BANDS_TABLE", "SEGMENT_COLUMNS", "add_band_columns",
           "asset_bands", "rank_correlation", "segment_bands", "segment_drivers",
           "settle_advice"]

#: Key of the per-asset table in ``run.extra_tables`` (cached and merged with the
#: other per-asset tables: it has an ``asset_id`` column).
BANDS_TABLE = "bands"
#: Percentiles of the band [%].
PERCENTILES = (5.0, 50.0, 95.0)
#: Per-segment columns the ensemble adds.
SEGMENT_COLUMNS = ("utilization_p05", "utilization_p50", "utilization_p95", "share_exceeding",
                   "verdict_robust", "band_verdict", "band_driver")
#: Per-asset columns (the assets layer carries them).
ASSET_COLUMNS = ("worst_utilization_p05", "worst_utilization_p50", "worst_utilization_p95",
                 "share_exceeding", "verdict_robust", "band_verdict", "band_driver",
                 "band_driver_rho", "band_advice")


def _verdicts(p05: np.ndarray, p95: np.ndarray):
    """Robust flag and verdict; a band without values (nothing judged) is "not assessed"."""
    robust = (p05 >= 1.0) | (p95 < 1.0)
    verdict = np.where(p05 >= 1.0, "exceeds", np.where(p95 < 1.0, "clear", "uncertain"))
    verdict = np.where(np.isnan(p05) | np.isnan(p95), "not assessed", verdict)
    return robust, verdict.astype(object)


def segment_bands(util: np.ndarray) -> dict[str, np.ndarray]:
    """Per-segment band columns from the members' utilization, shape (segments, N)."""
    util = np.asarray(util, float)
    if util.shape[0] == 0:
        p = np.zeros((3, 0))
    else:
        p = np.percentile(util, PERCENTILES, axis=1)
    robust, verdict = _verdicts(p[0], p[2])
    return {"utilization_p05": p[0], "utilization_p50": p[1], "utilization_p95": p[2],
            "share_exceeding": (util >= 1.0).mean(axis=1) if util.shape[1] else
            np.zeros(len(util)),
            "verdict_robust": robust, "band_verdict": verdict}


def _ranks(a: np.ndarray, axis: int) -> np.ndarray:
    from scipy.stats import rankdata

    return rankdata(a, axis=axis)  # average ranks for ties, as Spearman's rho takes them


def rank_correlation(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Spearman's rank correlation of every input with every asset.

    Parameters
    ----------
    x : ndarray, shape (N, d)
        The members' inputs.
    y : ndarray, shape (A, N)
        Each asset's worst utilization per member.

    Returns
    -------
    ndarray, shape (A, d)
        rho: the Pearson correlation of the ranks (ties take their average rank), as
        ``scipy.stats.spearmanr`` computes it (Spearman 1904); NaN where an input or
        an asset's utilization is the same in every member.
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    n = x.shape[0]
    if n < 3 or y.shape[0] == 0:
        return np.full((y.shape[0], x.shape[1]), np.nan)
    rx = _ranks(x, 0)
    ry = _ranks(y, 1)
    rx = rx - rx.mean(axis=0)
    ry = ry - ry.mean(axis=1, keepdims=True)
    sx = np.sqrt((rx * rx).sum(axis=0))
    sy = np.sqrt((ry * ry).sum(axis=1))
    cov = ry @ rx
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = cov / np.outer(sy, sx)
    rho[:, sx == 0] = np.nan
    rho[sy == 0, :] = np.nan
    return np.clip(rho, -1.0, 1.0)


#: What would settle an uncertain verdict, by the input that decides it.
_ADVICE = {
    "soil_resistivity_factor": "soil resistivity measurements along the asset",
    "coating_resistance_factor": "a coating-condition survey of the asset",
    "post_resistance_factor": "measured post resistances of the fence",
    "ground_resistance_factor": "measured resistances of the asset's grounds and grounded"
                                " ends",
    "load_current_factor": "the line owner's load records",
    "fault_current_factor": "the line owner's fault study (fault currents along the line)",
}


def settle_advice(driver: str) -> str:
    """What would settle an uncertain verdict decided by input ``driver``."""
    if driver.startswith("soil:"):
        return f"a soil resistivity survey of soil polygon {driver.split(':', 1)[1]}"
    return _ADVICE.get(driver, "")


def _drivers(rho: np.ndarray, sample, bands: Bands) -> tuple[np.ndarray, np.ndarray]:
    """Per row of ``rho`` (rows, d): the varied input of largest |rho| and its rho."""
    rho = rho.copy()
    varied = np.array([not r.fixed for r in bands.ranges], bool)
    rows = rho.shape[0]
    if rho.shape[1] == 0:
        return np.full(rows, "", dtype=object), np.full(rows, np.nan)
    rho[:, ~varied] = np.nan
    score = np.where(np.isfinite(rho), np.abs(rho), -1.0)
    best = np.argmax(score, axis=1)
    has = score[np.arange(rows), best] >= 0
    names = np.asarray(sample.names, dtype=object)
    driver = np.where(has, names[best], "").astype(object)
    return driver, np.where(has, rho[np.arange(rows), best], np.nan).astype(float)


def segment_drivers(util: np.ndarray, verdict: np.ndarray, sample, bands: Bands
                    ) -> np.ndarray:
    """Per segment: the input deciding an uncertain segment's utilization ("" elsewhere)."""
    out = np.full(len(util), "", dtype=object)
    rows = np.flatnonzero(np.asarray(verdict, dtype=object) == "uncertain")
    if len(rows):
        out[rows] = _drivers(rank_correlation(sample.values, util[rows]), sample, bands)[0]
    return out


def asset_bands(asset_id, util: np.ndarray, sample, bands: Bands) -> pd.DataFrame:
    """One row per asset: bands of its worst utilization and the input that decides it.

    Parameters
    ----------
    asset_id : array_like
        Per segment (rows of ``util``).
    util : ndarray, shape (segments, N)
    sample : corridor.uncertainty.ensemble.Sample
    bands : Bands
    """
    codes, ids = pd.factorize(pd.Series(np.asarray(asset_id, dtype=object)), sort=False)
    n_assets = len(ids)
    n = util.shape[1]
    worst = np.full((n_assets, n), -np.inf)
    if len(codes):
        np.maximum.at(worst, codes, util)
    worst[~np.isfinite(worst)] = np.nan
    if n_assets:
        p = np.percentile(worst, PERCENTILES, axis=1)
    else:
        p = np.zeros((3, 0))
    robust, verdict = _verdicts(p[0], p[2])
    driver, driver_rho = _drivers(rank_correlation(sample.values, worst), sample, bands)
    advice = np.array([settle_advice(d) if v == "uncertain" else ""
                       for d, v in zip(driver, verdict, strict=True)], dtype=object)
    return pd.DataFrame({
        "asset_id": np.asarray(ids, dtype=object),
        "worst_utilization_p05": p[0], "worst_utilization_p50": p[1],
        "worst_utilization_p95": p[2],
        "share_exceeding": (worst >= 1.0).mean(axis=1) if n else np.zeros(n_assets),
        "verdict_robust": robust, "band_verdict": verdict,
        "band_driver": driver, "band_driver_rho": driver_rho.astype(float),
        "band_advice": advice,
    })


def add_band_columns(run) -> None:
    """Run-wide: the band columns in the hazards and assets layers, and run.json's record.

    Called by :func:`corridor.compute.finalize` when the per-asset stages left a
    ``bands`` table (a run with an ``[uncertainty]`` section).
    """
    table = run.extra_tables.get(BANDS_TABLE)
    if table is None:
        return
    t = run.segment_table
    if run.assets is not None and len(run.assets):
        by_id = table.set_index(table["asset_id"].astype(str))
        pos = by_id.index.get_indexer(run.assets["asset_id"].astype(str))
        ok = pos >= 0
        for col in ASSET_COLUMNS:
            values = by_id[col].to_numpy()
            fill = np.nan if values.dtype.kind == "f" else (False if values.dtype.kind == "b"
                                                            else "")
            out = np.where(ok, values[np.where(ok, pos, 0)], fill)
            run.assets[col] = out.astype(values.dtype) if values.dtype.kind in "fb" else out
    if run.hazards is not None and "segment_id" in run.hazards and len(t):
        rows = pd.Index(t["segment_id"]).get_indexer(run.hazards["segment_id"])
        for col in SEGMENT_COLUMNS:
            run.hazards[col] = t[col].to_numpy()[rows]
    bands: Bands = run.config.uncertainty
    verdict = t["band_verdict"].to_numpy(dtype=object) if len(t) else np.array([], object)
    util = t["utilization"].to_numpy(float) if "utilization" in t else np.zeros(len(t))
    run.record["uncertainty"] = {
        **(bands.as_dict() if bands is not None else {}),
        "segments_uncertain": int((verdict == "uncertain").sum()),
        "segments_exceeding_in_band": int((verdict == "exceeds").sum()),
        # clear in the deterministic run, yet some members exceed: never read as passing
        "segments_clear_but_band_reaches_limit": int(
            ((util < 1.0) & (t["utilization_p95"].to_numpy(float) >= 1.0)).sum()
            if len(t) else 0),
        "assets_uncertain": int((table["band_verdict"] == "uncertain").sum()),
    }
    run.counts["segments_band_uncertain"] = run.record["uncertainty"]["segments_uncertain"]
