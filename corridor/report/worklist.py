"""The report's first sections: the grounding work list and the ranked assets.

Both show the deciding quantity (:mod:`corridor.report.deciding`): the value
that was compared with the limit, the limit and their ratio, under the
criterion's plain name. Everything is read from the run's tables
(``grounding_sites``, the segment table before and after the proposed grounds,
the limits table, the assets layer); nothing is assessed again.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from corridor.report.deciding import (
    criterion_of,
    deciding_cells,
    deciding_rows,
    fmt_value,
    worst_positions,
)
from corridor.report.html import esc, fmt_num, html_table

log = logging.getLogger(__name__)


def site_positions(run, sites: pd.DataFrame) -> np.ndarray:
    """Segment-table position of the segment at each site, -1 where none.

    A site stands on a node between two segments of its asset; of the
    segments touching it, the one where the site's criterion has the larger
    ratio is taken.
    """
    t = run.segment_table
    groups = t.groupby(t["asset_id"].astype(str), sort=False).indices
    start = t["chainage_m"].to_numpy(float)
    end = start + t["length_m"].to_numpy(float)
    out = np.full(len(sites), -1, np.intp)
    ratios: dict[str, np.ndarray | None] = {}  # column arrays, read once per criterion
    for i, (aid, ch, gov) in enumerate(zip(sites["asset_id"].astype(str),
                                           sites["chainage_m"].to_numpy(float),
                                           sites["governing"].astype(str), strict=True)):
        idx = groups.get(aid)
        if idx is None or not len(idx) or not np.isfinite(ch):
            continue
        gap = np.maximum(np.maximum(start[idx] - ch, ch - end[idx]), 0.0)
        near = idx[gap <= gap.min() + 1e-6]
        if len(near) > 1:
            if gov not in ratios:
                c = criterion_of(run, gov)
                col = f"ratio_{c.name}" if c is not None else "utilization"
                ratios[gov] = t[col].to_numpy(float) if col in t else None
            values = ratios[gov]
            if values is not None:
                near = near[np.argmax(np.nan_to_num(values[near], nan=-np.inf)):]
        out[i] = near[0]
    return out


def _after_values(run, pos: np.ndarray, labels) -> np.ndarray:
    """The deciding quantity with every proposed ground in place, NaN where not kept."""
    after = getattr(run, "segment_table_after_grounding", None)
    out = np.full(len(pos), np.nan)
    if after is None or not len(pos):
        return out
    t = run.segment_table
    key = pd.MultiIndex.from_arrays([after["asset_id"].astype(str),
                                     after["segment_index"].to_numpy(np.int64)])
    ok = pos >= 0
    want = pd.MultiIndex.from_arrays([t["asset_id"].astype(str).to_numpy()[np.maximum(pos, 0)],
                                      t["segment_index"].to_numpy(np.int64)[np.maximum(pos, 0)]])
    where = np.where(ok, key.get_indexer(want), -1)
    columns: dict[str, np.ndarray] = {}
    for i, label in enumerate(labels):
        c = criterion_of(run, label)
        if c is None or where[i] < 0 or c.quantity not in after:
            continue
        if c.quantity not in columns:
            columns[c.quantity] = after[c.quantity].to_numpy(float)
        out[i] = abs(float(columns[c.quantity][where[i]]))
    return out


def _coords_text(x, y, lat, lon) -> str:
    """Easting, northing and latitude, longitude of a site (HTML), "–" where missing."""
    def num(v, fmt):
        try:
            v = float(v)
        except (TypeError, ValueError):
            return "–"
        return format(v, fmt) if np.isfinite(v) else "–"

    return (f"{num(x, '.1f')} E<br>{num(y, '.1f')} N<br><span class='small'>"
            f"{num(lat, '.5f')}°, {num(lon, '.5f')}°</span>")


def worklist_section(run) -> str:
    """The grounding work list: every proposed site, worst first."""
    parts = ['<section id="worklist"><h2>Grounding work list</h2>']
    sites = getattr(run, "grounding_sites", None)
    if sites is None:
        parts.append("<p>This run did not design grounding (no grounding step).</p></section>")
        return "".join(parts)
    if not len(sites):
        parts.append("<p>No site proposed: no asset exceeds a limit.</p></section>")
        return "".join(parts)
    sites = pd.DataFrame(sites).reset_index(drop=True)
    pos = site_positions(run, sites)
    labels = sites["governing"].astype(str).to_numpy()
    before = deciding_rows(run, np.maximum(pos, 0), labels=labels)
    before.loc[pos < 0, ["value", "limit", "ratio"]] = np.nan
    after_v = _after_values(run, pos, labels)
    limit = before["limit"].to_numpy(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        after_r = np.where(np.isfinite(limit) & (limit > 0), after_v / limit, np.nan)
    order = np.lexsort((sites["site_id"].astype(str).to_numpy(),
                        -np.nan_to_num(before["ratio"].to_numpy(float), nan=-np.inf)))
    crs = run.inputs.crs
    unit = "m" if not crs.is_geographic else "°"
    # columns read once (not a pandas row per site: the list has every proposed site)
    n = len(sites)

    def col(name, default=None) -> list:
        return sites[name].tolist() if name in sites else [default] * n

    site_id, asset_id, kind = col("site_id"), col("asset_id"), col("asset_kind")
    chainage, remedy = col("chainage_m"), col("remedy")
    unresolved, tower = col("unresolved", False), col("in_tower_zone", False)
    util_after, r_ohm = col("utilization_after"), col("ground_resistance_ohm")
    length, line_ids = col("electrode_length_m"), col("line_ids", "")
    xs, ys, lats, lons = col("x", np.nan), col("y", np.nan), col("lat", np.nan), col("lon", np.nan)
    units = before["unit"].tolist()
    crit_name, value = before["criterion"].tolist(), before["value"].tolist()
    ratio = before["ratio"].tolist()
    rows = []
    for i in order:
        u = units[i]
        flags = []
        if bool(unresolved[i]):
            flags.append('<span class="flag">UNRESOLVED</span>: the asset still exceeds a'
                         f" limit (worst ratio {fmt_num(util_after[i])})")
        if bool(tower[i]):
            flags.append("in a faulted tower's zone")
        rows.append({
            "site": f"<b>{esc(site_id[i])}</b>",
            "asset": f"{esc(asset_id[i])}<br><span class='small'>{esc(kind[i])}</span>",
            "chainage": fmt_num(float(chainage[i]) / 1000.0, 4),
            "coords": _coords_text(xs[i], ys[i], lats[i], lons[i]),
            "remedy": esc(remedy[i]),
            "criterion": esc(crit_name[i]),
            "before": fmt_value(value[i], u),
            "after": fmt_value(after_v[i], u),
            "limit": fmt_value(limit[i], u),
            "ratio": f"{fmt_num(ratio[i])} →<br>{fmt_num(after_r[i])}",
            "r": fmt_num(r_ohm[i]),
            "length": fmt_num(length[i]),
            "line_ids": line_ids[i],
            "flags": "<br>".join(flags) if flags else "–",
        })
    frame = pd.DataFrame(rows)
    heads = {"site": "Site id", "asset": "Asset", "chainage": "Chainage [km]",
             "coords": f"Coordinates [{unit}] (lat, lon)", "remedy": "Remedy",
             "criterion": "Deciding criterion", "before": "Deciding value before",
             "after": "After all proposed grounds", "limit": "Limit",
             "ratio": "Ratio to limit, before → after", "r": "Ground resistance [Ω]",
             "length": "Electrode length [m]", "line_ids": "Power line ids",
             "flags": "Unresolved / notes"}
    n_unres = int(sites["unresolved"].astype(bool).sum()) if "unresolved" in sites else 0
    parts.append(f"<p>{len(sites)} proposed site{'s' if len(sites) != 1 else ''} on"
                 f" {sites['asset_id'].nunique()} assets; {n_unres} asset"
                 f"{'s remain' if n_unres != 1 else ' remains'} over a limit after"
                 f" {'their' if n_unres != 1 else 'its'} last site (UNRESOLVED). The"
                 " deciding value is the quantity the criterion judges, at the segment of the"
                 " site; after: with every proposed"
                 " ground of the run in place. A remedy other than a ground names what the site"
                 " needs instead (no resistance).</p>")
    parts.append(html_table(
        frame, list(heads), f"Proposed sites, worst first (ratio to the limit before"
        f" grounding). Coordinates: easting and northing in {crs.name}, then latitude and"
        " longitude (WGS 84).", headers=heads,
        raw=tuple(k for k in heads if k != "line_ids"),
        numeric=("chainage", "before", "after", "limit", "ratio", "r", "length")))
    parts.append("</section>")
    return "".join(parts)


def ranked_assets_section(run, assets_df: pd.DataFrame | None, max_rows: int) -> str:
    """The ranked assets with their deciding quantity, worst first."""
    parts = ['<section id="worst-assets"><h2>Ranked assets</h2>']
    if assets_df is None:
        parts.append("<p>No assets table in this run.</p></section>")
        return "".join(parts)
    head = assets_df.head(max_rows).reset_index(drop=True)
    pos = worst_positions(run, head["asset_id"])
    d = deciding_rows(run, np.maximum(pos, 0))
    d.loc[pos < 0, ["value", "limit", "ratio"]] = np.nan
    cells = deciding_cells(d)
    frame = pd.concat([head, cells], axis=1)
    cols = ["asset_rank", "asset_id", "asset_kind", "Deciding criterion", "Deciding value",
            "Limit", "Ratio to limit", "hazard_class", "worst_chainage_m",
            "length_over_limit_m", "length_m", "line_ids"]
    if "hours_above_limit_h" in frame:  # with a load series (corridor.series)
        cols.insert(cols.index("hazard_class") + 1, "hours_above_limit_h")
    parts.append(html_table(
        frame, cols, f"{len(head)} of {len(assets_df)} assets, worst first; the deciding value"
        " is the quantity compared with the limit at the asset's worst segment",
        km=("worst_chainage_m", "length_over_limit_m", "length_m"),
        headers={"asset_rank": "Rank", "asset_id": "Asset", "asset_kind": "Kind",
                 "worst_chainage_m": "Worst at chainage [km]",
                 "length_over_limit_m": "Length over a limit [km]",
                 "length_m": "Length [km]"},
        raw=tuple(cells.columns), numeric=("Deciding value", "Limit", "Ratio to limit")))
    parts.append("</section>")
    return "".join(parts)
