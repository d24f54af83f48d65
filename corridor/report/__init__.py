"""A self-contained HTML report of a finished screening run.

``report.html`` opens offline: CSS is inline, every figure is an inline SVG
drawn with matplotlib from the run's own geometries (no web tiles, fonts or
scripts). It opens with a banner for every rejected power line (the results
are incomplete near it) and one for the limit-set criteria the run could not
assess (they never count as passing), then the safety caution. Sections:
the grounding work list (every proposed site, worst first), the ranked
assets, the summary (inputs with date and SHA-256 prefix, CRS, limit set,
counts by hazard class, change since the previous run), overview map, worst
exposures and segments, a profile along chainage for each asset that exceeds
a limit (capped), rejected input features, the defaults used per field (with
the feature ids for the safety-relevant fields), the criteria (plain name,
limit value, formula, source, edition; what was not assessed) and the
assumptions (values to be verified, method, defaults and settings used).

Every table and plot shows the deciding quantity: the value compared with
the limit, the limit and their ratio, under the criterion's plain name
(:mod:`corridor.report.deciding`). The report presents the run's tables; it
never assesses again. A print stylesheet fits A4 and Letter landscape
(:mod:`corridor.report.style`).

Large runs stay small and fast: map geometries are simplified to well below
the drawing resolution and drawn as one ``LineCollection`` per layer
(rasterised inside the SVG above :data:`RASTER_ABOVE` segments), profile
series are reduced to a max/min envelope above :data:`PROFILE_POINTS`
points, and at most ``max_profiles`` profiles are drawn.
"""

from __future__ import annotations

import logging
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd

from corridor import __version__
from corridor.io.outputs import SAFETY_CAUTION
from corridor.limits.limit_sets import DEFAULT_REVIEW_THRESHOLD
from corridor.report.deciding import deciding_cells, deciding_rows, plain_criterion
from corridor.report.figures import overview_map, profile_plot
from corridor.report.html import MAX_PROFILES, MAX_ROWS, SEGMENTS_PER_ASSET, esc, html_table
from corridor.report.limits_section import assumptions_section, criteria_section
from corridor.report.sections import (
    defaults_section,
    not_assessed_banner,
    not_assessed_rows,
    rejected_lines_banner,
    rejected_section,
    summary_section,
    unjudged_banner,
    worst_exposures,
)
from corridor.report.style import CSS
from corridor.report.worklist import ranked_assets_section, worklist_section

log = logging.getLogger(__name__)


def write_report(run, out_dir: Path, previous: dict | None = None,
                 max_profiles: int = MAX_PROFILES, max_rows: int = MAX_ROWS,
                 inputs: list[dict] | None = None) -> Path:
    """Write ``report.html`` for a finished run.

    Parameters
    ----------
    run : corridor.pipeline.Run
        A run through every stage (segment table with ``utilization``,
        ``hazard_class``, ``rank``; ``assets``;
        ``limit_set`` and ``assessment`` from the assess stage).
        ``sites`` (points with ``asset_id``,
        ``chainage_m`` [m] and optionally ``v_before_v``, ``v_after_v`` [V])
        and ``extra_tables["changes"]`` are drawn when present.
    out_dir : Path
        Output folder; ``run.json`` there, if present, supplies the input
        file dates and hashes.
    previous : dict, optional
        The previous run's ``run.json``, for the change summary.
    max_profiles : int, optional
        Cap on the number of profile plots (worst assets first).
    max_rows : int, optional
        Rows per ranked table.
    inputs : list of dict, optional
        Input files (``path``, ``sha256``, ``modified_utc``); default: from
        ``run.json`` in ``out_dir``, else hashed again.

    Returns
    -------
    Path
        The report file.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    ls = getattr(run, "limit_set", None)
    thr = ls.review_threshold if ls is not None else DEFAULT_REVIEW_THRESHOLD
    assets = run.assets
    assets_df = None if assets is None else pd.DataFrame(assets.drop(columns="geometry"))
    sites = run.sites
    sites_df = None if sites is None else pd.DataFrame(sites.drop(columns="geometry",
                                                                  errors="ignore"))
    t = run.segment_table
    now = datetime.now(UTC).isoformat(timespec="seconds")
    missing = not_assessed_rows(run)
    body = [f"<header><h1>Corridor screening report</h1><p class='sub'>"
            f"{esc(Path(str(run.config.path)).name)} · written {now} · corridor {__version__}"
            "</p></header>",
            rejected_lines_banner(run),
            not_assessed_banner(missing, run),
            unjudged_banner(run),
            f'<div class="caution" role="alert"><strong>Caution</strong>{esc(SAFETY_CAUTION)}'
            "</div>",
            worklist_section(run),
            ranked_assets_section(run, assets_df, max_rows),
            summary_section(run, out_dir, assets_df, previous, thr, inputs)]

    body.append('<section id="map"><h2>Overview map</h2><figure>')
    body.append(overview_map(run, thr))
    body.append(f"<figcaption>Power lines (dashed, by voltage), asset segments coloured by"
                f" their ratio to the limit in the clear / review / exceeds bands (review from"
                f" {thr:g}, exceeds from 1), grounding sites where proposed. Grid north and"
                f" scale of {esc(run.inputs.crs.name)}.</figcaption></figure></section>")

    ex = worst_exposures(run)
    body.append('<section id="worst-exposures"><h2>Worst exposures</h2>')
    ex_head = ex.head(max_rows).reset_index(drop=True)
    ex_cols = ["exposure_id", "asset_id", "asset_kind", "line_id", "line_voltage_kv"]
    if "worst_position" in ex_head and len(ex_head):
        pos = ex_head["worst_position"].to_numpy(float)
        ok = np.isfinite(pos)
        d = deciding_rows(run, np.where(ok, pos, 0).astype(np.intp))
        d.loc[~ok, ["value", "limit", "ratio"]] = np.nan
        d.loc[~ok, "criterion"] = "–"
        cells = deciding_cells(d)
        ex_head = pd.concat([ex_head, cells], axis=1)
        ex_cols += list(cells.columns)
    ex_cols += ["start_chainage_m", "end_chainage_m", "parallel_length_m", "min_separation_m",
                "equivalent_separation_m", "crossings"]
    body.append(html_table(
        ex_head, ex_cols,
        f"{min(max_rows, len(ex))} of {len(ex)} exposures (asset, power line, continuous run),"
        " by the worst ratio to a limit along them; the deciding value at that worst segment",
        km=("start_chainage_m", "end_chainage_m"),
        raw=("Deciding criterion", "Deciding value", "Limit", "Ratio to limit"),
        numeric=("Deciding value", "Limit", "Ratio to limit")))
    body.append("</section>")

    body.append('<section id="worst-segments"><h2>Worst segments</h2>')
    if "rank" in t:
        # only the worst rows are needed: rank a bounded head, not the whole table
        cols = [c for c in ("rank", "asset_id", "asset_kind", "chainage_m", "separation_m",
                            "line_id", "fault_line_id", "hazard_class", "hours_above_limit_h")
                if c in t.columns]
        head = min(len(t), max_rows * SEGMENTS_PER_ASSET * 50)
        order = np.argsort(t["rank"].to_numpy(), kind="stable")[:head]
        ranked = pd.DataFrame(t[cols].iloc[order])
        ranked["_pos"] = order
        top = ranked[ranked.groupby("asset_id", sort=False).cumcount() < SEGMENTS_PER_ASSET]
        top = top.head(max_rows).reset_index(drop=True)
        cells = deciding_cells(deciding_rows(run, top["_pos"].to_numpy(np.intp)))
        top = pd.concat([top, cells], axis=1)
        body.append(html_table(
            top, ["rank", "asset_id", "asset_kind", "chainage_m", "separation_m", "line_id",
                  "fault_line_id", *cells.columns, "hazard_class",
                  *[c for c in ("hours_above_limit_h",) if c in top.columns]],
            f"{len(top)} of {len(t)} segments, worst first, at most {SEGMENTS_PER_ASSET} per"
            " asset", km=("chainage_m",),
            headers={"rank": "Rank", "asset_id": "Asset", "asset_kind": "Kind",
                     "line_id": "Nearest power line", "fault_line_id": "Faulted line"},
            raw=tuple(cells.columns), numeric=("Deciding value", "Limit", "Ratio to limit")))

    body.append("</section>")

    body.append('<section id="profiles"><h2>Profiles of assets over a limit</h2>')
    if assets_df is not None and "worst_utilization" in assets_df:
        over = assets_df[assets_df["worst_utilization"].to_numpy(float) >= 1.0]
        groups = t.groupby("asset_id", sort=False).indices
        site_groups = (sites_df.groupby("asset_id").indices
                       if sites_df is not None and "asset_id" in sites_df else {})
        shown = over.head(max_profiles)
        if not len(over):
            body.append("<p>No asset exceeds a limit.</p>")
        for i, row in enumerate(shown.itertuples(index=False)):
            r = pd.Series(row._asdict())
            idx = groups.get(r["asset_id"])
            if idx is None or not len(idx):
                continue
            s_idx = site_groups.get(r["asset_id"])
            s_rows = (sites_df.iloc[s_idx] if s_idx is not None and sites_df is not None
                      else None)
            body.append(f'<figure class="profile" id="profile-{i + 1}">')
            body.append(profile_plot(run, r, np.asarray(idx), s_rows, f"corridor-profile-{i}"))
            body.append(f"<figcaption>{esc(r['asset_id'])}: deciding criterion"
                        f" {esc(plain_criterion(run, r.get('governing', '')))}. The limit line"
                        " is the permitted value per segment from the limit set; the earth-fault"
                        " curve is the worst over the scanned fault positions. Separation to"
                        " the nearest power line on the right axis.</figcaption></figure>")
        left_out = len(over) - len(shown)
        if left_out > 0:
            body.append(f"<p class='sub'>{left_out} more assets over a limit are not plotted"
                        f" (cap of {max_profiles}); see the assets layer.</p>")
    body.append("</section>")

    from corridor.report.bands import bands_section  # [uncertainty] runs only (§16)

    body.append(bands_section(run, max_rows))

    from corridor.report.series import series_section

    body.append(series_section(run))  # with a load series only

    from corridor.report.readings import readings_section

    body.append(readings_section(run))  # [readings]: measured against predicted
    body.append(rejected_section(run))
    body.append(defaults_section(run))
    body.append(criteria_section(run, missing))
    body.append(assumptions_section(run))
    body.append(f"<footer>{esc(SAFETY_CAUTION)}</footer>")

    doc = ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
           "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
           f"<title>Corridor screening report — {esc(Path(str(run.config.path)).stem)}</title>"
           f"<style>{CSS}</style></head><body><main>{''.join(body)}</main></body></html>\n")
    path = out_dir / "report.html"
    path.write_text(doc, encoding="utf-8")
    log.info("report written to %s (%.0f kB)", path, len(doc) / 1024)
    return path
