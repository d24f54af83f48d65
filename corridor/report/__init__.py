"""A self-contained HTML report of a finished screening run.

``report.html`` opens offline: CSS is inline, every figure is an inline SVG
drawn with matplotlib from the run's own geometries (no web tiles, fonts or
scripts). It opens with a banner for every rejected power line (the results
are incomplete near it) and one for the limit-set criteria the run could not
assess (they never count as passing). Sections: safety caution, summary
(inputs with date and SHA-256 prefix, CRS, limit set, counts by hazard
class, worst assets, change since the previous run), overview map, ranked
tables of the worst assets, exposures and segments, a |V|-along-chainage profile for each asset that
exceeds a limit (capped), rejected input features (power lines, assets,
others), the defaults used per field (with the feature ids for the
safety-relevant fields), the limit set's criteria (with what was not
assessed), and the method's assumptions.

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
from corridor.report.figures import criterion_of, overview_map, profile_plot
from corridor.report.html import MAX_PROFILES, MAX_ROWS, SEGMENTS_PER_ASSET, esc, html_table
from corridor.report.sections import (
    defaults_section,
    not_assessed_banner,
    not_assessed_rows,
    rejected_lines_banner,
    rejected_section,
    summary_section,
    worst_exposures,
)

log = logging.getLogger(__name__)

_ASSUMPTIONS = [
    "Steady-state phasors at the run frequency; |V| is the magnitude to remote earth.",
    "Earth-return coupling from Carson's equations (Sunde's surface form for buried assets),"
    " in homogeneous or two-layer soil (Sunde's layered kernel) per segment from the soil"
    " layer or the default; holiday density, foot resistance, electrodes and earth potential"
    " use the local (or top-layer) resistivity.",
    "Oblique exposures are split until the end separations differ by at most a factor of 3,"
    " each section taking the geometric-mean separation (ITU-T Directives practice).",
    "One earth fault at a time; each segment takes its worst case. Earth-wire screening is"
    " computed from the tower geometry.",
    "Touch voltage during a fault adds |V| of the asset and the earth potential rise near the"
    " faulted towers (hemisphere footing) as magnitudes: conservative, the phase is unknown.",
    "Assets respond as transmission lines with distributed sources; terminations and grounds"
    " as given, or the asset kind's defaults.",
    "Capacitive (electric-field) coupling only for above-ground assets.",
    "A ratio of 1 or more to a limit of the chosen set exceeds it; from the review threshold"
    " upwards a segment is flagged for review. Limit values follow the editions named above.",
]

_CSS = """
:root{--ink:#1f2328;--muted:#5b6470;--line:#d8dde3;--bg:#ffffff;--soft:#f5f7f9}
*{box-sizing:border-box}
body{margin:0;font:14px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",
 "Liberation Sans",Arial,sans-serif;color:var(--ink);background:var(--bg)}
main{max-width:1180px;margin:0 auto;padding:18px 28px 48px}
h1{font-size:24px;margin:6px 0 2px}h2{font-size:19px;margin:30px 0 8px;padding-bottom:4px;
 border-bottom:2px solid var(--line)}h3{font-size:15px;margin:18px 0 6px}
.sub{color:var(--muted);margin:0 0 12px}
.caution{border:3px solid #b8322f;background:#fff4f2;padding:12px 16px;border-radius:6px;
 font-size:15px;margin:12px 0 8px}
.caution strong{color:#8a1f1f;text-transform:uppercase;letter-spacing:.04em;margin-right:6px}
.alert{border:4px solid #8a1f1f;background:#ffe3de;padding:12px 16px;border-radius:6px;
 font-size:15px;margin:12px 0 8px}
.alert strong{display:block;color:#8a1f1f;font-size:18px;text-transform:uppercase;
 letter-spacing:.04em;margin-bottom:4px}
.alert ul{margin:6px 0 0 18px;padding:0}
dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:3px 16px;margin:8px 0}
dl.facts dt{color:var(--muted)}dl.facts dd{margin:0}
.tablewrap{overflow-x:auto;margin:6px 0 12px}
table{border-collapse:collapse;font-size:12.5px;min-width:40%}
caption{text-align:left;color:var(--muted);padding:4px 0}
th,td{border-bottom:1px solid var(--line);padding:4px 8px;text-align:left;vertical-align:top}
td{white-space:nowrap}
th{background:var(--soft);font-weight:600}td.n{text-align:right;font-variant-numeric:tabular-nums}
.badge{display:inline-block;padding:0 7px;border-radius:9px;font-size:12px;color:#fff}
.badge.clear{background:#4f9a6b}.badge.review{background:#e2a72e;color:#1f1f1f}
.badge.exceeds{background:#b8322f}
figure{margin:10px 0 20px}figure svg{max-width:100%;height:auto;display:block}
figcaption{color:var(--muted);font-size:12.5px;margin-top:4px}
code{font-size:12px;background:var(--soft);padding:0 3px;border-radius:3px}
footer{color:var(--muted);font-size:12px;margin-top:36px;border-top:1px solid var(--line);
 padding-top:8px}
"""


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
            not_assessed_banner(missing),
            f'<div class="caution" role="alert"><strong>Caution</strong>{esc(SAFETY_CAUTION)}'
            "</div>",
            summary_section(run, out_dir, assets_df, previous, thr, inputs)]

    body.append('<section id="map"><h2>Overview map</h2><figure>')
    body.append(overview_map(run, thr))
    body.append(f"<figcaption>Power lines (dashed, by voltage), asset segments coloured by"
                f" utilization in the clear / review / exceeds bands (review from {thr:g},"
                f" exceeds from 1), grounding sites where proposed. Grid north and scale of"
                f" {esc(run.inputs.crs.name)}.</figcaption></figure></section>")

    body.append('<section id="worst-assets"><h2>Worst assets</h2>')
    if assets_df is not None:
        cols = ["asset_rank", "asset_id", "asset_kind", "worst_utilization", "hazard_class",
                "governing", "worst_chainage_m", "worst_v_normal_v", "worst_v_fault_v",
                "worst_i_capacitive_short_ma", "length_over_limit_m", "length_m", "line_ids"]
        body.append(html_table(assets_df.head(max_rows), cols,
                           f"{min(max_rows, len(assets_df))} of {len(assets_df)} assets, worst"
                           " first", km=("worst_chainage_m", "length_over_limit_m", "length_m")))
    else:
        body.append("<p>No assets table in this run.</p>")
    body.append("</section>")

    ex = worst_exposures(run)
    body.append('<section id="worst-exposures"><h2>Worst exposures</h2>')
    body.append(html_table(ex.head(max_rows), [
        "exposure_id", "asset_id", "asset_kind", "line_id", "line_voltage_kv",
        "worst_utilization", "start_chainage_m", "end_chainage_m", "parallel_length_m",
        "min_separation_m", "equivalent_separation_m", "crossings"],
        f"{min(max_rows, len(ex))} of {len(ex)} exposures (asset, power line, continuous run),"
        " by the worst utilization along them",
        km=("start_chainage_m", "end_chainage_m")))
    body.append("</section>")

    body.append('<section id="worst-segments"><h2>Worst segments</h2>')
    if "rank" in t:
        # only the worst rows are needed: rank a bounded head, not the whole table
        cols = [c for c in ("rank", "asset_id", "asset_kind", "chainage_m", "separation_m",
                            "line_id", "v_normal_v", "v_fault_v", "utilization", "governing",
                            "hazard_class") if c in t.columns]
        head = min(len(t), max_rows * SEGMENTS_PER_ASSET * 50)
        order = np.argsort(t["rank"].to_numpy(), kind="stable")[:head]
        ranked = pd.DataFrame(t[cols].iloc[order])
        top = ranked[ranked.groupby("asset_id", sort=False).cumcount() < SEGMENTS_PER_ASSET]
        top = top.head(max_rows)
        body.append(html_table(top, ["rank", "asset_id", "asset_kind", "chainage_m", "separation_m",
                                 "line_id", "v_normal_v", "v_fault_v", "utilization",
                                 "governing", "hazard_class"],
                           f"{len(top)} of {len(t)} segments, worst first, at most"
                           f" {SEGMENTS_PER_ASSET} per asset", km=("chainage_m",)))
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
            crit = criterion_of(run, r.get("governing", ""))
            desc = f" — {crit.description}" if crit is not None and crit.description else ""
            body.append(f'<figure class="profile" id="profile-{i + 1}">')
            body.append(profile_plot(run, r, np.asarray(idx), s_rows, f"corridor-profile-{i}"))
            body.append(f"<figcaption>{esc(r['asset_id'])}: governing criterion"
                        f" <code>{esc(r.get('governing', ''))}</code>{esc(desc)}; limit drawn"
                        " from the limit set's permitted value per segment. Separation to the"
                        " nearest power line on the right axis.</figcaption></figure>")
        left_out = len(over) - len(shown)
        if left_out > 0:
            body.append(f"<p class='sub'>{left_out} more assets over a limit are not plotted"
                        f" (cap of {max_profiles}); see the assets layer.</p>")
    body.append("</section>")

    from corridor.report.readings import readings_section

    body.append(readings_section(run))  # [readings]: measured against predicted
    body.append(rejected_section(run))
    body.append(defaults_section(run))

    if ls is not None:
        unjudged = {r.get("criterion"): r for r in missing}
        crows = pd.DataFrame([{"criterion": c.name, "case": c.case, "quantity": c.quantity,
                               "applies to": ", ".join(c.applies_to),
                               "assessed": ("NOT ASSESSED" if c.name in unjudged else "yes"),
                               "needs": ", ".join(getattr(c, "needs", ())),
                               "source": c.source}
                              for c in ls.criteria])
        body.append('<section id="limits"><h2>Limit set criteria</h2>')
        body.append(html_table(crows, list(crows.columns), f"{ls.name}: {len(crows)} criteria"))
        body.append("</section>")

    run_assumptions = list(_ASSUMPTIONS)
    record = getattr(run, "record", None) or {}
    if isinstance(record, dict) and record.get("normal_load_assumption"):
        # the normal-load worst case over unknown directions and angles (docs/methods.md §8)
        run_assumptions.insert(1, str(record["normal_load_assumption"]))
    body.append('<section id="assumptions"><h2>Method and assumptions</h2><ul>'
                + "".join(f"<li>{esc(a)}</li>" for a in run_assumptions) + "</ul></section>")
    body.append(f"<footer>{esc(SAFETY_CAUTION)}</footer>")

    doc = ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
           "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
           f"<title>Corridor screening report — {esc(Path(str(run.config.path)).stem)}</title>"
           f"<style>{_CSS}</style></head><body><main>{''.join(body)}</main></body></html>\n")
    path = out_dir / "report.html"
    path.write_text(doc, encoding="utf-8")
    log.info("report written to %s (%.0f kB)", path, len(doc) / 1024)
    return path
