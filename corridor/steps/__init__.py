"""Computing stages after the exposure geometry, in run order.

Each stage is ``fn(run)``: it reads what earlier stages left on the
:class:`corridor.pipeline.Run` and adds its own results and columns.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from corridor.limits.limit_sets import DEFAULT_SEARCH_DIR
from corridor.steps.columns import (
    categories,
    load_config_limit_set,
    load_run_limit_set,
    response_columns,
)

log = logging.getLogger(__name__)

#: The shipped limit sets (package data); kept here for the callers that import it
#: from the steps.
LIMITS_DIR = DEFAULT_SEARCH_DIR

__all__ = ["LIMITS_DIR", "asset_stages", "run_stages", "categories", "load_config_limit_set",
           "load_run_limit_set", "response_columns", "stage_couple", "stage_respond",
           "stage_assess", "stage_rank", "rank_segments", "id_order_key"]


def stage_couple(run) -> None:
    """Induced EMF, capacitive pickup and earth potential per segment."""
    from corridor.steps.couple import couple

    run.coupling = couple(run.config, run.inputs, run.geometry)


def stage_respond(run) -> None:
    """Voltages and currents along every asset."""
    from corridor.steps.respond import respond

    rs = respond(run.config, run.inputs, run.geometry, run.coupling)
    run.response = rs
    for fid, fld, reason in rs.rejected:
        run.inputs.rejected.add(run.config.grounds.label, fid, fld, reason, role="grounds")
    run.counts["grounds_rejected"] = len(rs.rejected)
    response_columns(run, rs, run.segment_table)


def stage_assess(run) -> None:
    """Ratios to the limit set, utilization, governing criterion, class."""
    from corridor.steps.assess import assess

    limit_set = load_run_limit_set(run)
    t = run.segment_table
    res = assess(limit_set, t, categories(run))
    run.assessment = res
    q = res["quantities"]
    t["ac_density_a_per_m2"] = q["ac_density_a_per_m2"]
    for name, ratio in res["ratios"].items():
        t[f"ratio_{name}"] = ratio
    t["utilization"] = res["utilization"]
    t["governing"] = res["governing"]
    t["hazard_class"] = res["hazard_class"]


def stage_rank(run) -> None:
    """Rank 1 is the worst segment of the run; ties by asset id, then chainage."""
    load_run_limit_set(run)  # merged (cached) runs did not assess in this process
    run.counts["segments_exceeding"] = rank_segments(run.segment_table)


def rank_segments(t: pd.DataFrame) -> int:
    """Add the ``rank`` column to an assessed segment table; the count exceeding a limit.

    Rank 1 is the worst segment (highest ``utilization``); ties by asset id, then
    chainage."""
    order = np.lexsort((t["chainage_m"].to_numpy(), id_order_key(t["asset_id"]),
                        -t["utilization"].to_numpy(float)))
    rank = np.empty(len(t), np.int64)
    rank[order] = np.arange(1, len(t) + 1)
    t["rank"] = rank
    return int((t["utilization"] >= 1.0).sum())


def id_order_key(ids) -> np.ndarray:
    """Integer keys that sort like the ids themselves (code-point order of ``str``).

    Sorting a few thousand distinct ids and keying millions of rows by them is
    much faster than a sort on the strings of every row."""
    codes, uniques = pd.factorize(pd.Series(ids), sort=False)
    rank = np.empty(len(uniques), np.int64)
    rank[np.argsort(np.asarray(uniques, dtype=str), kind="stable")] = np.arange(len(uniques))
    return rank[codes]


def asset_stages() -> dict:
    """Per-asset stages after ``expose``: name -> function(run)."""
    from corridor.series.stage import stage_series
    from corridor.steps.ground import stage_ground

    return {"couple": stage_couple, "respond": stage_respond, "assess": stage_assess,
            "series": stage_series, "ground": stage_ground}


def run_stages() -> dict:
    """Run-wide stages on the merged per-asset results."""
    from corridor.series.stage import stage_series_record
    from corridor.steps.report_tables import stage_tables

    return {"rank": stage_rank, "tables": stage_tables, "series": stage_series_record}
