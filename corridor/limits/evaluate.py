"""Judging per-segment quantities against a loaded limit set.

:func:`evaluate` applies every criterion of a :class:`~corridor.limits.limit_sets.LimitSet`
at once, vectorised over segments; :func:`not_assessed` lists the criteria a run could
not judge, with the reason (they are never passed).
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from corridor.limits.limit_sets import HAZARD_CLASSES, NOT_ASSESSED, LimitSet
from corridor.limits.methods import Context

__all__ = ["evaluate", "not_assessed"]

logger = logging.getLogger(__name__)


def evaluate(limit_set: LimitSet, asset_kind, quantities: Mapping[str, Any], clearing_time_s,
             soil_resistivity_ohm_m, high_reliability, categories: Mapping | None = None
             ) -> dict[str, Any]:
    """Judge per-segment quantities against every criterion of a limit set.

    Parameters
    ----------
    limit_set : LimitSet
        From :func:`load_limit_set`.
    asset_kind : array_like of str, shape (n,)
        Kind of the asset each segment belongs to (pipeline, fence, rail,
        telecom).
    quantities : mapping of str to array_like, each shape (n,) or scalar
        Per-segment quantities by canonical name and unit, e.g.
        ``v_normal_v`` [V], ``v_touch_fault_v`` [V], ``emf_fault_v`` [V],
        ``ac_density_a_per_m2`` [A/m²], ``i_capacitive_short_ma`` [mA].
        Magnitudes are taken (complex phasors allowed). NaN means "not
        computed here". A missing name leaves its criteria unassessed.
    clearing_time_s : array_like, shape (n,) or scalar
        Fault clearing time of the inducing line [s].
    soil_resistivity_ohm_m : array_like, shape (n,) or scalar
        Soil resistivity at the segment [Ω·m].
    high_reliability : array_like of bool, shape (n,) or scalar
        High-reliability inducing line (ITU-T Directives sense).
    categories : mapping of str to array_like of str, optional
        Per-segment labels used by ``constant_by_category`` criteria, e.g.
        ``{"coating_type": [...]}``; a missing mapping or label takes the
        criterion's strictest value.

    Returns
    -------
    dict
        ``ratios``: {criterion name: ndarray (n,) of quantity/permitted, NaN
        where the criterion does not apply to the asset kind or the quantity
        is missing or NaN, or the permitted value cannot be computed (e.g. NaN
        clearing time)};
        ``permitted``: {criterion name: ndarray (n,) of permitted values in
        the quantity's unit, NaN where the criterion does not apply};
        ``utilization``: ndarray (n,), the largest ratio, NaN where no criterion
        judged the segment; ``governing``: ndarray (n,) of str (object dtype),
        ``"<name>:<case>"`` of the criterion giving the utilization, ``""`` where none
        judged it; ``hazard_class``: ndarray (n,) of str (object dtype), ``"clear"``
        (u < review threshold), ``"review"`` (threshold <= u < 1), ``"exceeds"``
        (u >= 1), or ``"not assessed"`` where no criterion judged the segment (no
        criterion applies to its kind, or every applicable one lacked its quantity or
        permitted value): a segment nothing checked is never classed clear.

    Notes
    -----
    ratio = |quantity| / permitted. Criteria that a standard offers as
    alternatives (e.g. ISO 18086's J_ac limit or J_ac/J_dc ratio) are each
    judged on their own and the largest ratio governs, which is the
    conservative reading for a screen.
    """
    kind = np.asarray(asset_kind).ravel()
    if kind.dtype.kind != "U":
        kind = kind.astype(str)
    n = kind.shape[0]
    ctx = Context(
        clearing_time_s=_per_segment(clearing_time_s, n, float),
        soil_resistivity_ohm_m=_per_segment(soil_resistivity_ohm_m, n, float),
        high_reliability=_per_segment(high_reliability, n, bool),
        categories=dict(categories or {}),
        n=n)
    kind_mask: dict[str, np.ndarray] = {}

    ratios: dict[str, np.ndarray] = {}
    permitted_out: dict[str, np.ndarray] = {}
    # Running maximum over criteria; index len(criteria) means "none applies".
    best = np.full(n, -np.inf)
    best_idx = np.full(n, len(limit_set.criteria), dtype=np.intp)
    for j, c in enumerate(limit_set.criteria):
        applies = np.zeros(n, dtype=bool)
        for k in c.applies_to:
            if k not in kind_mask:
                kind_mask[k] = kind == k
            applies |= kind_mask[k]
        permitted = c.permitted(ctx)
        permitted_out[c.name] = np.where(applies, permitted, np.nan)
        ratio = np.full(n, np.nan)
        q = quantities.get(c.quantity)
        if q is not None:
            q_abs = np.abs(_per_segment(q, n, None))
            ok = applies & ~np.isnan(q_abs) & np.isfinite(permitted) & (permitted > 0)
            np.divide(q_abs, permitted, out=ratio, where=ok)
            better = ratio > best  # False for NaN, without a warning
            best[better] = ratio[better]
            best_idx[better] = j
        ratios[c.name] = ratio

    assessed = best_idx < len(limit_set.criteria)
    utilization = np.where(assessed, best, np.nan)
    # Object arrays of str: indexing them is ~10x faster than building
    # fixed-width unicode arrays, and they go straight into a table column.
    labels = np.array([c.label for c in limit_set.criteria] + [""], dtype=object)
    governing = labels[best_idx]
    level = np.where(assessed, (utilization >= limit_set.review_threshold).astype(np.intp)
                     + (utilization >= 1.0).astype(np.intp), HAZARD_CLASSES.index(NOT_ASSESSED))
    hazard = np.array(HAZARD_CLASSES, dtype=object)[level]
    return {"ratios": ratios, "permitted": permitted_out, "utilization": utilization,
            "governing": governing, "hazard_class": hazard}


def _per_segment(x, n, dtype):
    a = np.asarray(x) if dtype is None else np.asarray(x, dtype=dtype)
    if a.ndim == 0:
        return np.full(n, a[()], dtype=a.dtype)
    a = a.ravel()
    if a.shape[0] != n:
        raise ValueError(f"expected {n} values (one per segment), got {a.shape[0]}")
    return a


def not_assessed(limit_set: LimitSet, asset_kind, ratios: Mapping[str, Any]) -> list[dict]:
    """Criteria of a limit set that apply to some segment but judged none.

    Parameters
    ----------
    limit_set : LimitSet
        The run's limit set.
    asset_kind : array_like of str, shape (n,)
        Kind of the asset of every segment of the run.
    ratios : mapping of str to array_like, each shape (n,)
        ``ratios`` of :func:`evaluate` by criterion name (or the run's
        ``ratio_<name>`` columns); a missing name counts as all NaN.

    Returns
    -------
    list of dict
        One dict per criterion that applies to at least one segment and has
        no finite ratio on any of them, in file order: ``criterion`` (name),
        ``label`` (``"<name>:<case>"``), ``quantity``, ``segments`` (how many
        segments it should have judged) and ``reason`` (why, naming the
        missing inputs). Such a criterion was not checked: it must never be
        read as passing.
    """
    # the kinds as integer codes: one hash pass, not a string comparison per criterion
    codes, uniques = pd.factorize(pd.Series(np.asarray(asset_kind, dtype=object).ravel()
                                            if not isinstance(asset_kind, pd.Series)
                                            else asset_kind.reset_index(drop=True)))
    names = [str(u) for u in uniques]
    out = []
    for c in limit_set.criteria:
        wanted = [i for i, name in enumerate(names) if name in set(c.applies_to)]
        applies = np.isin(codes, wanted)
        n = int(applies.sum())
        if n == 0:
            continue
        r = ratios.get(c.name)
        if r is not None:
            r = np.asarray(r, dtype=float).ravel()
            if np.isfinite(r[applies]).any():
                continue
        kinds = ", ".join(sorted({names[i] for i in wanted}))
        needs = ", ".join(c.needs)
        if not c.computed:
            reason = (f"no stage computes {c.quantity}: it needs {needs}, which the input"
                      " layers do not provide")
        else:
            reason = (f"{c.quantity} is empty on every {kinds} segment (a missing input or"
                      " a NaN clearing time or soil resistivity)"
                      + (f"; it needs {needs}" if needs else ""))
        out.append({"criterion": c.name, "label": c.label, "quantity": c.quantity,
                    "segments": n, "reason": reason})
    return out


def unjudged_segments(limit_set: LimitSet, asset_kind, asset_id, utilization) -> dict | None:
    """The segments that no criterion of the limit set judged, as one record; None if none.

    Parameters
    ----------
    limit_set : LimitSet
    asset_kind, asset_id : array_like of str, shape (n,)
        Kind and id of the asset of every segment.
    utilization : array_like, shape (n,)
        The segments' utilization (NaN: no criterion judged it; :func:`evaluate`).

    Returns
    -------
    dict or None
        ``segments`` (count), ``kinds`` and ``assets`` (sorted; at most 50 ids, with
        ``assets_total``), ``kinds_without_criteria`` (kinds no criterion of the set
        applies to) and ``reason``. These segments were not checked: they are
        classed ``not assessed``, never clear.
    """
    util = np.asarray(utilization, dtype=float).ravel()
    miss = np.isnan(util)
    if not miss.any():
        return None
    kind = np.asarray(asset_kind).astype(str).ravel()[miss]
    ids = sorted({str(a) for a in np.asarray(asset_id, dtype=object).ravel()[miss]})
    kinds = sorted(set(kind))
    covered = {k for c in limit_set.criteria for k in c.applies_to}
    bare = [k for k in kinds if k not in covered]
    parts = []
    if bare:
        parts.append(f"limit set {limit_set.name} has no criterion for {', '.join(bare)}")
    if len(bare) < len(kinds):
        parts.append("every criterion that applies lacked its quantity or permitted value"
                     " (a missing input, or a NaN clearing time or soil resistivity)")
    return {"segments": int(miss.sum()), "kinds": kinds, "assets": ids[:50],
            "assets_total": len(ids), "kinds_without_criteria": bare,
            "reason": "; ".join(parts) + ": these segments were NOT checked and are not"
                      " clear"}
