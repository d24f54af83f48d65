"""The deciding quantity of a result: the value compared with the limit, the limit, their ratio.

The report only presents the run: every value here is read from the run's
tables (the segment table's judged quantities and ``ratio_<criterion>``
columns, the permitted values of ``run.limits_table``); nothing is assessed
again. Names come from the limit set (:meth:`Criterion.plain_name`) and the
column glossary (:func:`corridor.io.styles.describe_column`), so the report
never shows an internal id such as ``touch_fault:fault``.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from corridor.io.styles import describe_column
from corridor.limits.limit_sets import QUANTITY_TITLES
from corridor.report.html import esc, fmt_num, unit_of

log = logging.getLogger(__name__)

#: Columns of :func:`deciding_rows`.
DECIDING_COLUMNS = ("criterion", "quantity", "value", "limit", "unit", "ratio")


def criterion_of(run, label):
    """The limit-set criterion of a ``governing`` label (``"<name>:<case>"``), or None."""
    name = str(label).split(":", 1)[0]
    for c in getattr(getattr(run, "limit_set", None), "criteria", ()):
        if c.name == name:
            return c
    return None


def plain_criterion(run, label, clearing_time_s: float | None = None) -> str:
    """Plain-language name of the criterion behind a ``governing`` label.

    Parameters
    ----------
    run : corridor.pipeline.Run
        The run (its limit set names the criteria).
    label : str
        ``"<name>:<case>"`` as in the ``governing`` column; empty where no
        criterion applies.
    clearing_time_s : float, optional
        Clearing time the permitted value was read at [s], for the criteria
        that depend on it.

    Returns
    -------
    str
        The criterion's plain name; "no criterion applies" for an empty label.
    """
    if not str(label) or str(label) in ("nan", "None"):
        return "no criterion applies"
    c = criterion_of(run, label)
    if c is None:
        return str(label).split(":", 1)[0].replace("_", " ")
    return c.plain_name(clearing_time_s if c.uses_clearing_time else None)


def quantity_title(quantity: str) -> str:
    """Plain title of a judged quantity (the limit sets' titles, else the column glossary)."""
    if quantity in QUANTITY_TITLES:
        return QUANTITY_TITLES[quantity]
    d = describe_column(quantity)
    return d[0] if d is not None else quantity.replace("_", " ")


def quantity_unit(quantity: str) -> str:
    """Unit of a judged quantity, ``""`` for a ratio."""
    return unit_of(quantity)


def fmt_value(value, unit: str) -> str:
    """A value with its unit, volts of 1000 or more in kV, e.g. ``"10.2 kV"``."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return esc(value)
    if not np.isfinite(v):
        return "–"
    if unit == "V" and abs(v) >= 1000.0:
        return f"{v / 1000.0:.3g} kV"
    text = f"{v:.3g}"
    return f"{text} {esc(unit)}" if unit else text


def _limits_rows(run) -> np.ndarray | None:
    """Row of ``run.limits_table`` of every segment-table row (-1 where none), or None.

    Computed once per pair of tables and kept on the run (with the tables it was
    computed from, so a replaced table is never matched by a stale mapping).
    """
    limits = getattr(run, "limits_table", None)
    t = run.segment_table
    if limits is None or t is None:
        return None
    cached = getattr(run, "_report_limits_rows", None)
    if cached is not None and cached[0] is limits and cached[1] is t:
        return cached[2]
    a_t = t["asset_id"].to_numpy(dtype=object)
    s_t = t["segment_index"].to_numpy(np.int64)
    if (len(limits) == len(t)
            and np.array_equal(limits["segment_index"].to_numpy(np.int64), s_t)
            and np.array_equal(limits["asset_id"].to_numpy(dtype=object), a_t)):
        rows = np.arange(len(t))  # the usual case: the same rows in the same order
    else:
        where = pd.MultiIndex.from_arrays([limits["asset_id"].astype(str),
                                           limits["segment_index"].to_numpy(np.int64)])
        rows = where.get_indexer(pd.MultiIndex.from_arrays([pd.Index(a_t).astype(str), s_t]))
    try:
        run._report_limits_rows = (limits, t, rows)
    except AttributeError:  # a run that takes no new attributes: compute again next time
        pass
    return rows


def permitted_at(run, crit, pos) -> np.ndarray:
    """Permitted value of ``crit`` at segment-table rows ``pos``, from ``run.limits_table``.

    Parameters
    ----------
    run : corridor.pipeline.Run
        The run.
    crit : corridor.limits.limit_sets.Criterion
        The criterion.
    pos : array_like of int
        Positions in ``run.segment_table``.

    Returns
    -------
    ndarray of float
        NaN where the run has no such table, column or segment.
    """
    pos = np.asarray(pos, dtype=np.intp)
    limits = getattr(run, "limits_table", None)
    col = f"permitted_{crit.name}"
    rows = _limits_rows(run)
    if limits is None or col not in limits or rows is None or len(pos) == 0:
        return np.full(len(pos), np.nan)
    r = rows[pos]
    values = limits[col].to_numpy(float)
    return np.where(r >= 0, values[np.maximum(r, 0)], np.nan)


def _permitted_by_key(run, crit, rows: pd.DataFrame) -> np.ndarray:
    t = run.segment_table
    key = pd.MultiIndex.from_arrays([t["asset_id"].astype(str),
                                     t["segment_index"].to_numpy(np.int64)])
    pos = key.get_indexer(pd.MultiIndex.from_arrays([rows["asset_id"].astype(str),
                                                     rows["segment_index"].to_numpy(np.int64)]))
    out = permitted_at(run, crit, np.maximum(pos, 0))
    return np.where(pos >= 0, out, np.nan)


def deciding_rows(run, pos, table=None, labels=None) -> pd.DataFrame:
    """The deciding quantity of segment rows: criterion, value, limit, ratio.

    Parameters
    ----------
    run : corridor.pipeline.Run
        A run through the assess stage.
    pos : array_like of int
        Row positions in ``table``.
    table : DataFrame, optional
        The segment table (default ``run.segment_table``).
    labels : array_like of str, optional
        The criterion (``governing`` label) to read per row; default each
        row's own ``governing``.

    Returns
    -------
    DataFrame
        One row per position, columns :data:`DECIDING_COLUMNS`: the
        criterion's plain name (at the segment's clearing time), the judged
        quantity's plain title, its value (|quantity| as judged), the
        permitted value, their unit and the ratio (the segment's utilization).
        Where no criterion applies the values are NaN.
    """
    t = run.segment_table if table is None else table
    pos = np.asarray(pos, dtype=np.intp)
    sub = t.iloc[pos]
    if labels is not None:
        gov = np.asarray(labels, dtype=object).astype(str)
    elif "governing" in sub:
        gov = sub["governing"].astype(str).to_numpy()
    else:
        gov = np.full(len(pos), "", dtype=object)
    clearing = (sub["clearing_time_s"].to_numpy(float) if "clearing_time_s" in sub
                else np.full(len(pos), np.nan))
    out = pd.DataFrame({"criterion": [""] * len(pos), "quantity": [""] * len(pos),
                        "value": np.full(len(pos), np.nan), "limit": np.full(len(pos), np.nan),
                        "unit": [""] * len(pos), "ratio": np.full(len(pos), np.nan)})
    for label in pd.unique(gov):
        rows = np.flatnonzero(gov == label)
        c = criterion_of(run, label)
        out.loc[rows, "criterion"] = [plain_criterion(run, label, ct) for ct in clearing[rows]]
        if c is None:
            continue
        s = sub.iloc[rows]
        ratio = (s[f"ratio_{c.name}"].to_numpy(float) if f"ratio_{c.name}" in s
                 else s["utilization"].to_numpy(float))
        if table is None:
            limit = permitted_at(run, c, pos[rows])
        else:  # another table: by asset and segment index
            limit = _permitted_by_key(run, c, s)
        if c.quantity in s:
            value = np.abs(s[c.quantity].to_numpy(float))
        else:  # a quantity derived in the assess step: the ratio times the permitted value
            value = ratio * limit
        missing = ~np.isfinite(limit) & np.isfinite(ratio) & (ratio > 0)
        limit = np.where(missing, value / np.where(missing, ratio, 1.0), limit)
        out.loc[rows, "quantity"] = quantity_title(c.quantity)
        out.loc[rows, "value"] = value
        out.loc[rows, "limit"] = limit
        out.loc[rows, "unit"] = quantity_unit(c.quantity)
        out.loc[rows, "ratio"] = ratio
    return out


def worst_positions(run, asset_ids) -> np.ndarray:
    """Position in the segment table of each asset's worst segment, -1 where none.

    The same rule as the assets layer (:func:`corridor.steps.report_tables.assets_layer`):
    highest utilization, then lowest chainage.
    """
    t = run.segment_table
    ids = pd.Index(np.asarray(asset_ids, dtype=object)).astype(str)
    a = ids.get_indexer(t["asset_id"].astype(str))
    util = np.nan_to_num(t["utilization"].to_numpy(float), nan=-np.inf)
    keep = a >= 0
    order = np.flatnonzero(keep)[np.lexsort((t["chainage_m"].to_numpy(float)[keep], -util[keep],
                                             a[keep]))]
    out = np.full(len(ids), -1, np.intp)
    if len(order):
        first = np.r_[True, a[order][1:] != a[order][:-1]]
        out[a[order][first]] = order[first]
    return out


def deciding_cells(d: pd.DataFrame) -> pd.DataFrame:
    """Display cells (HTML) of :func:`deciding_rows`: criterion, value, limit, ratio."""
    return pd.DataFrame({
        "Deciding criterion": [esc(c) for c in d["criterion"]],
        "Deciding value": [fmt_value(v, u) for v, u in zip(d["value"], d["unit"], strict=True)],
        "Limit": [fmt_value(v, u) for v, u in zip(d["limit"], d["unit"], strict=True)],
        "Ratio to limit": [fmt_num(r) for r in d["ratio"]],
    }, index=d.index)
