"""Output tables built from the assessed segments: hazards and assets layers."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd


def hazards_layer(t: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Segments ranked across the run, worst first."""
    return t.sort_values("rank", kind="stable").reset_index(drop=True)


def assets_layer(run) -> gpd.GeoDataFrame:
    """One row per asset: worst utilization, length over the limit, governing, lines."""
    t = run.segment_table
    assets = run.inputs.assets
    over = t["utilization"].to_numpy(float) >= 1.0
    g = t.assign(_over_m=np.where(over, t["length_m"], 0.0))
    worst_idx = g.groupby("asset_id", sort=False)["utilization"].idxmax()
    agg = g.groupby("asset_id", sort=False).agg(
        length_m=("length_m", "sum"), length_over_limit_m=("_over_m", "sum"))
    worst = g.loc[worst_idx.to_numpy(), ["asset_id", "utilization", "governing", "hazard_class",
                                         "chainage_m", "v_normal_v", "v_fault_v",
                                         "i_capacitive_short_ma"]]
    worst = worst.rename(columns={"utilization": "worst_utilization",
                                  "chainage_m": "worst_chainage_m",
                                  "v_normal_v": "worst_v_normal_v",
                                  "v_fault_v": "worst_v_fault_v",
                                  "i_capacitive_short_ma": "worst_i_capacitive_short_ma"})

    def lines_of(frame):
        s = set(frame["line_id"][frame["line_id"] != ""]) | set(
            frame["fault_line_id"][frame["fault_line_id"] != ""])
        return ";".join(sorted(s))

    responsible = {aid: lines_of(fr) for aid, fr in t[t["utilization"] > 0].groupby("asset_id")}
    out = pd.DataFrame({"asset_id": assets["asset_id"], "asset_kind": assets["asset_kind"],
                        "source_layer": assets["source_layer"]})
    out = out.merge(agg.reset_index(), on="asset_id", how="left").merge(
        worst, on="asset_id", how="left")
    out["line_ids"] = out["asset_id"].map(responsible).fillna("")
    out = gpd.GeoDataFrame(out, geometry=assets.geometry.to_numpy(), crs=assets.crs)
    order = np.lexsort((out["asset_id"].to_numpy(dtype=str),
                        -out["worst_utilization"].to_numpy(float)))
    out = out.iloc[order].reset_index(drop=True)
    out.insert(0, "asset_rank", np.arange(1, len(out) + 1))
    return out


def stage_tables(run) -> None:
    run.extra_tables["layer:hazards"] = hazards_layer(run.segment_table)
    run.extra_tables["layer:assets"] = assets_layer(run)
