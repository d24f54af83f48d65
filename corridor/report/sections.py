"""The report's text sections: banners, rejected features, defaults, summary, changes."""


from __future__ import annotations

import json
import logging
import re
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd

from corridor.io.outputs import sha256_file
from corridor.limits.limit_sets import HAZARD_CLASSES, QUANTITY_TITLES
from corridor.report.html import MAX_ROWS, class_badge, esc, fmt_num, html_table
from corridor.schema import SAFETY_DEFAULT_FIELDS

log = logging.getLogger(__name__)

# --------------------------------------------------------------------------
# Sections
# --------------------------------------------------------------------------

#: Most ids listed per field in the report (run.json keeps them all).
MAX_IDS = 200


def _role_rows(run, role: str) -> list[dict]:
    """Rows of ``run.inputs.rejected`` of one role (power_lines, assets, soil, ...).

    Rows without a ``role`` key are placed by their layer label: the power-line
    layer, an asset layer, else other.
    """
    rej = getattr(getattr(run, "inputs", None), "rejected", None)
    rows = list(getattr(rej, "rows", None) or [])
    cfg = run.config
    line_label = getattr(getattr(cfg, "power_lines", None), "label", None)
    asset_labels = {getattr(a, "label", None) for a in getattr(cfg, "assets", ()) or ()}

    def role_of(r):
        if r.get("role"):
            return r["role"]
        if line_label is not None and r.get("layer") == line_label:
            return "power_lines"
        if r.get("layer") in asset_labels:
            return "assets"
        return "other"

    if role == "other":
        return [r for r in rows if role_of(r) not in ("power_lines", "assets")]
    return [r for r in rows if role_of(r) == role]


def rejected_lines_banner(run) -> str:
    """The banner that opens the report when a power line was rejected."""
    rows = _role_rows(run, "power_lines")
    if not rows:
        return ""
    accepted = bool(run.config.run.accept_rejected_lines)
    reach = run.config.run.screening_distance_m
    items = "".join(f"<li><b>{esc(r.get('feature_id', ''))}</b> ({esc(r.get('layer', ''))}):"
                    f" field <code>{esc(r.get('field', ''))}</code> — {esc(r.get('reason', ''))}"
                    "</li>" for r in rows)
    note = (" The run was told to accept rejected lines (<code>accept_rejected_lines</code>);"
            " that changes the exit code only, not what is missing." if accepted else "")
    return (f'<div class="alert" id="rejected-lines" role="alert"><strong>Results incomplete'
            f"</strong>{len(rows)} power line{'s were' if len(rows) != 1 else ' was'} rejected"
            " and left out of the screening. Every asset within the screening distance"
            f" ({esc(reach)} m) of {'them' if len(rows) != 1 else 'it'} is assessed without"
            " its induction, fault and earth-potential contribution: an asset shown clear"
            f" there may not be.{note} Fix the line data and run again."
            f"<ul>{items}</ul></div>")


def not_assessed_rows(run) -> list[dict]:
    extra = getattr(run, "record", {}) or {}
    rows = extra.get("not_assessed") if isinstance(extra, dict) else None
    if rows is None:
        from corridor.steps.report_tables import not_assessed_criteria

        rows = not_assessed_criteria(run)
    return list(rows)


def not_assessed_banner(rows: list[dict], run=None) -> str:
    """The banner of the criteria the run could not assess (plain names)."""
    if not rows:
        return ""
    from corridor.report.deciding import plain_criterion, quantity_title

    def name(r):
        label = r.get("label", r.get("criterion", ""))
        return plain_criterion(run, label) if run is not None else str(label)

    def reason(r):
        # the run's reason names quantities by id: the report names them in words
        text = str(r.get("reason", ""))
        for q in sorted({str(r.get("quantity", "")), *QUANTITY_TITLES}, key=len, reverse=True):
            if q:
                text = re.sub(rf"\b{re.escape(q)}\b", quantity_title(q), text)
        return text

    items = "".join(f"<li><b>{esc(name(r))}</b>"
                    f" ({esc(quantity_title(str(r.get('quantity', ''))))}"
                    + (f", {fmt_num(r['segments'])} segments" if "segments" in r else "")
                    + f"): {esc(reason(r))}</li>" for r in rows)
    return ('<div class="alert" id="not-assessed" role="alert"><strong>Not assessed</strong>'
            f"{len(rows)} criteri{'a' if len(rows) != 1 else 'on'} of the limit set could not be"
            " judged on any segment. They did NOT pass: a segment shown clear was not checked"
            " against them. Check these hazards by other means."
            f"<ul>{items}</ul></div>")


def unjudged_banner(run) -> str:
    """The banner of the segments no criterion judged (``run.json``: segments_not_assessed)."""
    extra = getattr(run, "record", None)
    row = extra.get("segments_not_assessed") if isinstance(extra, dict) else None
    if not row:
        return ""
    more = int(row.get("assets_total", 0)) - len(row.get("assets", []))
    assets = ", ".join(str(a) for a in row.get("assets", [])) + (
        f" and {more} more" if more > 0 else "")
    return ('<div class="alert" id="segments-not-assessed" role="alert"><strong>Segments not'
            f" assessed</strong>{fmt_num(row['segments'])} segment(s) of"
            f" {esc(', '.join(row.get('kinds', [])))} asset(s) were judged by no criterion:"
            f" {esc(str(row.get('reason', '')))}. They are classed <b>not assessed</b>, never"
            f" clear. Assets: {esc(assets)}. Check these assets by other means or use a limit"
            " set that covers them.</div>")


def rejected_section(run) -> str:
    """Tables of rejected assets and other rejected input features."""
    parts = ['<section id="rejected"><h2>Rejected input features</h2>']
    cols = ["layer", "feature_id", "field", "reason"]
    lines = _role_rows(run, "power_lines")
    assets = _role_rows(run, "assets")
    other = _role_rows(run, "other")
    if not (lines or assets or other):
        parts.append("<p>No input feature was rejected.</p></section>")
        return "".join(parts)
    for title, rows in (("Power lines", lines), ("Assets", assets),
                        ("Soil, grounds and towers", other)):
        if not rows:
            continue
        frame = pd.DataFrame(rows).reindex(columns=cols)
        shown = frame.head(MAX_ROWS * 4)
        parts.append(f"<h3>{esc(title)}</h3>")
        parts.append(html_table(shown, cols, f"{len(shown)} of {len(frame)} rejected; every one is"
                            " in rejected.csv"))
    if assets:
        parts.append("<p>Rejected assets are not screened at all: they are in no layer"
                     " but rejected.csv.</p>")
    parts.append("</section>")
    return "".join(parts)


def defaults_section(run) -> str:
    """Counts of values filled from defaults per field; ids for the safety-relevant ones."""
    used = getattr(getattr(run, "inputs", None), "defaults_used", None)
    parts = ['<section id="defaults"><h2>Defaults used</h2>']
    if used is None:
        parts.append("<p>This run did not record which values came from defaults.</p>"
                     "</section>")
        return "".join(parts)
    if not used:
        parts.append("<p>No missing value was filled from defaults.</p></section>")
        return "".join(parts)
    rows = []
    for fld in sorted(used):
        ids = [str(i) for i in used[fld]]
        safety = fld in SAFETY_DEFAULT_FIELDS
        listed = ""
        if safety:
            listed = ", ".join(ids[:MAX_IDS]) + (f" … and {len(ids) - MAX_IDS} more (run.json)"
                                                 if len(ids) > MAX_IDS else "")
        rows.append(f"<tr><td><code>{esc(fld)}</code></td><td class='n'>{len(ids)}</td>"
                    f"<td>{'yes' if safety else ''}</td>"
                    f"<td style='white-space:normal'>{esc(listed)}</td></tr>")
    parts.append("<p>Missing values filled from the asset kind's defaults or"
                 " <code>[line_defaults]</code>. Where a default decides safety (fault current,"
                 " clearing time, post type, coating, terminations) the features are listed:"
                 " check them in the field data.</p>")
    parts.append("<div class='tablewrap'><table><thead><tr><th>Field</th><th>Features</th>"
                 "<th>Safety-relevant</th><th>Ids</th></tr></thead>"
                 f"<tbody>{''.join(rows)}</tbody></table></div></section>")
    return "".join(parts)



def _input_records(run, out_dir: Path) -> list[dict]:
    record = out_dir / "run.json"
    if record.exists():
        try:
            data = json.loads(record.read_text(encoding="utf-8"))
            if data.get("inputs"):
                return list(data["inputs"])
        except (OSError, ValueError):
            log.debug("run.json unreadable; hashing inputs again")
    cfg = run.config
    paths = [getattr(cfg, "path", None), getattr(cfg, "arrangements_path", None)]
    paths += [getattr(cfg.power_lines, "path", None)] if getattr(cfg, "power_lines", None) else []
    paths += [a.path for a in getattr(cfg, "assets", ())]
    paths += [getattr(s, "path", None) for s in (getattr(cfg, "soil", None),
                                                 getattr(cfg, "grounds", None),
                                                 getattr(cfg, "towers", None)) if s is not None]
    out = []
    for p in dict.fromkeys(Path(p) for p in paths if p is not None):
        if p.exists():
            out.append({"path": str(p), "sha256": sha256_file(p),
                        "modified_utc": datetime.fromtimestamp(p.stat().st_mtime, UTC)
                        .isoformat(timespec="seconds")})
    return out


def summary_section(run, out_dir: Path, assets: pd.DataFrame | None, previous: dict | None,
             review_threshold: float, inputs: list[dict] | None = None) -> str:
    t = run.segment_table
    parts = ['<section id="summary"><h2>Summary</h2>']
    crs = run.inputs.crs
    auth = crs.to_authority()
    crs_text = f"{crs.name}" + (f" ({auth[0]}:{auth[1]})" if auth else "")
    ls = getattr(run, "limit_set", None)
    facts = [("Config", Path(str(run.config.path)).name), ("CRS", crs_text),
             ("Frequency", f"{run.config.run.frequency_hz} Hz"),
             ("Screening distance", f"{run.config.run.screening_distance_m} m")]
    if ls is not None:
        facts += [("Limit set", f"{ls.name} — {ls.description}"),
                  ("Editions", "; ".join(ls.editions)),
                  ("Review threshold", f"utilization ≥ {ls.review_threshold:g}")]
    parts.append('<dl class="facts">' + "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>"
                                                for k, v in facts) + "</dl>")
    # counts by hazard class
    rows = []
    if "hazard_class" in t:
        seg_n = t["hazard_class"].value_counts()
        seg_km = t.groupby("hazard_class")["length_m"].sum() / 1000.0
        ast_n = (assets["hazard_class"].value_counts()
                 if assets is not None and "hazard_class" in assets else pd.Series(dtype=int))
        for k in HAZARD_CLASSES:
            rows.append(f"<tr><td>{class_badge(k)}</td><td class='n'>{int(seg_n.get(k, 0))}</td>"
                        f"<td class='n'>{fmt_num(seg_km.get(k, 0.0), 4)}</td>"
                        f"<td class='n'>{int(ast_n.get(k, 0))}</td></tr>")
        parts.append("<h3>Counts by hazard class</h3><div class='tablewrap'><table><thead><tr>"
                     "<th>Hazard class</th><th>Segments</th><th>Segment length [km]</th>"
                     f"<th>Assets</th></tr></thead><tbody>{''.join(rows)}</tbody></table></div>")
    if assets is not None and len(assets):
        from corridor.report.deciding import deciding_rows, fmt_value, worst_positions

        top = assets.head(5).reset_index(drop=True)
        pos = worst_positions(run, top["asset_id"])
        d = deciding_rows(run, np.maximum(pos, 0))
        items = "".join(
            f"<li><b>{esc(r.asset_id)}</b> ({esc(r.asset_kind)}): {esc(d.at[i, 'criterion'])}"
            f" {fmt_value(d.at[i, 'value'], d.at[i, 'unit'])} against a limit of"
            f" {fmt_value(d.at[i, 'limit'], d.at[i, 'unit'])}, ratio"
            f" {fmt_num(r.worst_utilization)} {class_badge(r.hazard_class)}, at chainage"
            f" {fmt_num(r.worst_chainage_m / 1e3, 4)} km</li>"
            for i, r in enumerate(top.itertuples()) if pos[i] >= 0)
        parts.append(f"<h3>Worst assets</h3><ol>{items}</ol>")
    # inputs
    recs = inputs if inputs is not None else _input_records(run, out_dir)
    if recs:
        body = "".join(f"<tr><td>{esc(Path(r['path']).name)}</td>"
                       f"<td>{esc(r.get('modified_utc', ''))}</td>"
                       f"<td><code>{esc(str(r.get('sha256', ''))[:16])}</code></td></tr>"
                       for r in recs)
        parts.append("<h3>Inputs</h3><div class='tablewrap'><table><thead><tr><th>File</th>"
                     "<th>Modified (UTC)</th><th>SHA-256 (first 16 hex)</th></tr></thead>"
                     f"<tbody>{body}</tbody></table></div>")
    parts.append(_changes(run, previous))
    parts.append("</section>")
    return "".join(parts)


def _changes(run, previous: dict | None) -> str:
    out = ['<div id="changes"><h3>Change since the last run</h3>']
    summary = run.record.get("changes", {}) or {}
    if previous and summary.get("unchanged_inputs"):
        out.append(f"<p>Previous run finished {esc(previous.get('finished_utc', '?'))}. No"
                   " input changed since; the results are those of that run.</p></div>")
        return "".join(out)
    changes = run.changes
    if isinstance(changes, pd.DataFrame) and (len(changes) or previous):
        if previous:
            out.append(f"<p>Previous run finished {esc(previous.get('finished_utc', '?'))}."
                       "</p>")
        if len(changes):
            frame = pd.DataFrame(changes.drop(columns="geometry", errors="ignore"))
            from corridor.report.deciding import plain_criterion

            for col in [c for c in frame.columns if str(c).startswith("governing")]:
                frame[col] = [plain_criterion(run, v) if isinstance(v, str) and v else ""
                              for v in frame[col]]
            out.append(html_table(frame.head(MAX_ROWS), list(frame.columns)))
            if len(frame) > MAX_ROWS:
                out.append(f"<p>{len(frame) - MAX_ROWS} more changes not shown.</p>")
        else:
            out.append("<p>No changes since the previous run.</p>")
    elif previous:
        out.append(f"<p>Previous run finished {esc(previous.get('finished_utc', '?'))}.</p>")
        before = previous.get("counts", {}) or {}
        rows = []
        for k, now in run.counts.items():
            if k in before and isinstance(now, int | float) and isinstance(before[k], int | float):
                d = now - before[k]
                rows.append(f"<tr><td>{esc(k)}</td><td class='n'>{fmt_num(before[k])}</td>"
                            f"<td class='n'>{fmt_num(now)}</td>"
                            f"<td class='n'>{'+' if d > 0 else ''}{fmt_num(d)}</td></tr>")
        if rows:
            out.append("<div class='tablewrap'><table><thead><tr><th>Count</th><th>Previous</th>"
                       f"<th>Now</th><th>Change</th></tr></thead><tbody>{''.join(rows)}"
                       "</tbody></table></div>")
    else:
        out.append("<p>First run: no previous run record in the output folder.</p>")
    out.append("</div>")
    return "".join(out)


def worst_exposures(run) -> pd.DataFrame:
    """Exposures by the worst ratio to a limit along them, with that segment's position.

    ``worst_utilization`` is the highest utilization of the exposure's asset
    segments near its line within its chainage range; ``worst_position`` the
    segment-table row of that segment (NaN where none).
    """
    ex = pd.DataFrame(run.exposure_table.drop(columns="geometry"))
    t = run.segment_table
    if not len(ex) or "utilization" not in t:
        return ex
    s = pd.DataFrame({"asset_id": t["asset_id"].astype(str), "line_id": t["line_id"].astype(str),
                      "chainage_m": t["chainage_m"].to_numpy(float),
                      "utilization": t["utilization"].to_numpy(float),
                      "position": np.arange(len(t))})
    m = ex[["exposure_id", "asset_id", "line_id", "start_chainage_m", "end_chainage_m"]].astype(
        {"asset_id": str, "line_id": str}).merge(s, on=["asset_id", "line_id"])
    m = m[(m["chainage_m"] >= m["start_chainage_m"] - 1e-6)
          & (m["chainage_m"] <= m["end_chainage_m"] + 1e-6)]
    m = m.sort_values(["exposure_id", "utilization", "chainage_m"],
                      ascending=[True, False, True], kind="stable", na_position="last")
    first = m.drop_duplicates("exposure_id")
    worst = first.set_index("exposure_id")[["utilization", "position"]].rename(
        columns={"utilization": "worst_utilization", "position": "worst_position"})
    ex = ex.merge(worst, left_on="exposure_id", right_index=True, how="left")
    return ex.sort_values(["worst_utilization", "exposure_id"], ascending=[False, True],
                          kind="stable", na_position="last")
