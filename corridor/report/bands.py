"""The report's "Uncertainty bands" section (a run with an ``[uncertainty]`` section).

What the ensemble (docs/methods.md §16) found: the ranges, how many segments exceed
across the whole band, how many are uncertain, the segments that are clear in the
deterministic run yet reach a limit inside the band (never to be read as passing), the
assets' bands with the input that decides them, and the uncertain stretches with what
would settle each.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from corridor.report.html import esc, html_table
from corridor.uncertainty.tables import settle_advice

__all__ = ["bands_section", "uncertain_stretches"]


def uncertain_stretches(t: pd.DataFrame) -> pd.DataFrame:
    """Runs of consecutive uncertain segments of one asset, worst band first.

    Returns
    -------
    DataFrame
        ``asset_id``, ``start_chainage_m``, ``end_chainage_m``, ``segments``,
        ``utilization_p95`` (largest of the run), ``share_exceeding`` (largest),
        ``band_driver`` (the input deciding most of its segments) and ``settle`` (what
        would settle it).
    """
    cols = ["asset_id", "start_chainage_m", "end_chainage_m", "segments", "utilization_p95",
            "share_exceeding", "band_driver", "settle"]
    if "band_verdict" not in t or not len(t):
        return pd.DataFrame(columns=cols)
    u = pd.DataFrame({
        "asset_id": t["asset_id"].to_numpy(dtype=object),
        "chainage_m": t["chainage_m"].to_numpy(float),
        "end_m": t["chainage_m"].to_numpy(float) + t["length_m"].to_numpy(float),
        "uncertain": t["band_verdict"].to_numpy(dtype=object) == "uncertain",
        "p95": t["utilization_p95"].to_numpy(float),
        "share": t["share_exceeding"].to_numpy(float),
        "driver": (t["band_driver"].to_numpy(dtype=object) if "band_driver" in t
                   else np.full(len(t), "", dtype=object)),
    })
    u = u.sort_values(["asset_id", "chainage_m"], kind="stable").reset_index(drop=True)
    new = (u["uncertain"] & ~(u["uncertain"].shift(fill_value=False)
                              & (u["asset_id"] == u["asset_id"].shift()))).to_numpy()
    run_id = np.cumsum(new)
    u = u[u["uncertain"].to_numpy()]
    if not len(u):
        return pd.DataFrame(columns=cols)
    rows = []
    for _, g in u.groupby(run_id[u.index], sort=False):
        drivers = g["driver"][g["driver"] != ""]
        driver = str(drivers.mode().iloc[0]) if len(drivers) else ""
        rows.append({"asset_id": g["asset_id"].iloc[0],
                     "start_chainage_m": float(g["chainage_m"].min()),
                     "end_chainage_m": float(g["end_m"].max()), "segments": len(g),
                     "utilization_p95": float(g["p95"].max()),
                     "share_exceeding": float(g["share"].max()),
                     "band_driver": driver, "settle": settle_advice(driver)})
    out = pd.DataFrame(rows, columns=cols)
    return out.sort_values(["utilization_p95", "asset_id"], ascending=[False, True],
                           kind="stable").reset_index(drop=True)


def bands_section(run, max_rows: int = 25) -> str:
    """HTML of the section; empty for a run without bands."""
    record = (getattr(run, "record", None) or {}).get("uncertainty")
    t = run.segment_table
    if not record or t is None or "band_verdict" not in t:
        return ""
    ranges = pd.DataFrame([{"input": name, "low": r["low"], "high": r["high"],
                            "distribution": r["distribution"]}
                           for name, r in record.get("ranges", {}).items()])
    body = ['<section id="bands"><h2>Uncertainty bands</h2>',
            f"<p>An ensemble of {int(record.get('members', 0))} members (Latin hypercube,"
            f" seed {int(record.get('seed', 0))}) over the ranges below; each segment's"
            " utilization is given as the 5th, 50th and 95th percentile of the members."
            " A verdict is <em>robust</em> when the whole band lies on one side of 1."
            " Factors multiply the inputs as given; a soil polygon's range is its"
            " resistivity in Ω·m (docs/methods.md §16).</p>"]
    if len(ranges):
        body.append(html_table(ranges, list(ranges.columns), "Ranges of the uncertain"
                               " inputs"))
    clear_reach = int(record.get("segments_clear_but_band_reaches_limit", 0))
    body.append("<dl class='facts'>"
                f"<dt>Segments exceeding across the band</dt>"
                f"<dd>{int(record.get('segments_exceeding_in_band', 0))}</dd>"
                f"<dt>Segments whose verdict the band leaves open</dt>"
                f"<dd>{int(record.get('segments_uncertain', 0))}</dd>"
                f"<dt>Assets whose verdict the band leaves open</dt>"
                f"<dd>{int(record.get('assets_uncertain', 0))}</dd></dl>")
    if clear_reach:
        body.append(f'<div class="alert" role="alert"><strong>Clear only at the given'
                    f' values</strong>{clear_reach} segments are below the limit with the'
                    " inputs as given but reach it within the band: treat them as possibly"
                    " exceeding until the deciding input is known.</div>")
    assets = run.assets
    if assets is not None and "band_verdict" in assets:
        frame = pd.DataFrame(assets.drop(columns="geometry", errors="ignore"))
        order = np.lexsort((frame["asset_id"].to_numpy(dtype=str),
                            -frame["worst_utilization_p95"].to_numpy(float)))
        frame = frame.iloc[order]
        body.append(html_table(frame.head(max_rows), [
            "asset_id", "asset_kind", "worst_utilization", "worst_utilization_p05",
            "worst_utilization_p50", "worst_utilization_p95", "share_exceeding",
            "band_verdict", "band_driver", "band_driver_rho", "band_advice"],
            f"{min(max_rows, len(frame))} of {len(frame)} assets by the 95th percentile of"
            " their worst utilization; the deciding input by Spearman rank correlation"))
    stretches = uncertain_stretches(t)
    body.append("<h3>Uncertain stretches and what would settle them</h3>")
    if len(stretches):
        body.append(html_table(stretches.head(max_rows), list(stretches.columns),
                               f"{min(max_rows, len(stretches))} of {len(stretches)} runs of"
                               " segments whose band straddles the limit",
                               km=("start_chainage_m", "end_chainage_m")))
        first = stretches.iloc[0]
        if first["settle"]:
            body.append(f"<p>For example, {esc(first['asset_id'])} from"
                        f" {first['start_chainage_m'] / 1000:.2f} to"
                        f" {first['end_chainage_m'] / 1000:.2f} km: {esc(first['settle'])}"
                        " would settle whether it exceeds.</p>")
    else:
        body.append("<p>No segment's verdict depends on where in the band the inputs"
                    " lie.</p>")
    body.append("</section>")
    return "".join(body)
