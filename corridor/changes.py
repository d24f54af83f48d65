"""What changed since the previous run, and which input change caused it.

Each run compares itself with the outputs still in its output folder (read
before they are replaced): the ``assets`` layer of ``screening.gpkg`` (worst
utilization and governing criterion per asset) and ``run.json`` (per-asset
component hashes, line attributes and config hashes written by the previous
run under ``inputs_state``).

Rows of ``changes.csv``: ``new exceedance`` (worst utilization reached 1),
``resolved exceedance`` (fell below 1), ``line rejected`` (fell below 1 while a
power line that acted on the asset in the previous run was rejected in this
one: the exceedance was not resolved, it is no longer assessed), ``no longer
assessed`` (the asset now has a segment no criterion judged, and what was judged
stays below 1: nothing was resolved), ``utilization moved`` (changed by more than
``run.change_threshold`` without crossing 1),
``new asset`` and ``removed asset``. The ``cause`` names the input change found
for the asset: ``line rejected: <id> (<field>: <reason>)`` first when a line of
the asset's previous ``line_ids`` was rejected in this run,
``asset edited (geometry|attributes)``, ``line <id>: <field> <before> -> <after>``,
``line <id> geometry edited``, ``line <id> now in reach``, ``soil changed``,
``grounding items changed``, ``config changed: <keys>``, ``arrangements
changed``, ``limit set changed``, ``corridor code or version changed``.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio

log = logging.getLogger(__name__)

COLUMNS = ["change", "asset_id", "asset_kind", "utilization_before", "utilization_after",
           "governing_before", "governing_after", "cause"]
HASH_FIELDS = ["asset_geometry", "asset_attributes", "lines", "soil", "grounds"]
_SHORT = 16
_LINE_SKIP = {"geometry", "feature_id", "source_layer"}


def inputs_state(run, keys) -> dict:
    """The part of run.json a later run compares against (compact hashes)."""
    t = keys.table
    hashes = {str(a): [str(v)[:_SHORT] for v in row]
              for a, row in zip(t["asset_id"], t[HASH_FIELDS].to_numpy(), strict=True)}
    lines = run.inputs.lines
    attrs = [c for c in lines.columns if c not in _LINE_SKIP]
    line_state = {}
    for i, row in enumerate(lines[attrs].to_dict("records")):
        line_state[str(row["line_id"])] = {
            "geometry": keys.line_geometry[i][:_SHORT] if keys.line_geometry else "",
            "attributes": {k: _plain(v) for k, v in row.items() if k != "line_id"}}
    from corridor.keys import relevant_config

    return {"hash_fields": HASH_FIELDS, "asset_hashes": hashes,
            "config_parts": {k: v[:_SHORT] for k, v in keys.config_parts.items()},
            "relevant_config": relevant_config(run.config), "lines": line_state}


def _plain(v):
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, float) and not np.isfinite(v):
        return None
    return v


def worst_by_asset(segments: pd.DataFrame) -> pd.DataFrame:
    """Worst utilization and its governing criterion per asset."""
    if segments is None or len(segments) == 0 or "utilization" not in segments:
        return pd.DataFrame(columns=["asset_id", "utilization", "governing", "unjudged"])
    u = segments["utilization"].astype(float)
    idx = u.fillna(-np.inf).groupby(segments["asset_id"], sort=False).idxmax()
    out = segments.loc[idx.to_numpy(), ["asset_id", "utilization"]].copy()
    out["governing"] = (segments.loc[idx.to_numpy(), "governing"].astype(object).to_numpy()
                        if "governing" in segments else "")
    # a segment no criterion judged (empty utilization): the asset is partly not assessed
    out["unjudged"] = (u.isna().groupby(segments["asset_id"], sort=False).any()
                       .reindex(out["asset_id"]).to_numpy(bool))
    return out.reset_index(drop=True)


def read_previous(out_dir: Path) -> tuple[pd.DataFrame, dict] | None:
    """The previous run's per-asset worst utilization and its run.json, or None."""
    out_dir = Path(out_dir)
    gpkg, rj = out_dir / "screening.gpkg", out_dir / "run.json"
    if not gpkg.exists() or not rj.exists():
        return None
    try:
        record = json.loads(rj.read_text(encoding="utf-8"))
        layers = [str(n) for n in pyogrio.list_layers(gpkg)[:, 0]]
        if "assets" in layers:
            names = set(pyogrio.read_info(gpkg, layer="assets")["fields"])
            prev = pyogrio.read_dataframe(gpkg, layer="assets", read_geometry=False,
                                          columns=["asset_id", "asset_kind",
                                                   "worst_utilization", "governing"]
                                          + (["line_ids"] if "line_ids" in names else [])
                                          + (["hazard_class"] if "hazard_class" in names
                                             else []))
            prev = prev.rename(columns={"worst_utilization": "utilization"})
            prev["unjudged"] = (prev["hazard_class"].astype(object) == "not assessed"
                                if "hazard_class" in prev else False)
            prev = prev.drop(columns=["hazard_class"], errors="ignore")
        else:
            seg = pyogrio.read_dataframe(gpkg, layer="segments", read_geometry=False,
                                         columns=["asset_id", "asset_kind", "utilization",
                                                  "governing"])
            prev = worst_by_asset(seg).merge(
                seg.drop_duplicates("asset_id")[["asset_id", "asset_kind"]], on="asset_id")
    except (OSError, ValueError, KeyError, pyogrio.errors.DataSourceError,
            pyogrio.errors.DataLayerError, pyogrio.errors.FieldError) as exc:
        log.warning("previous outputs in %s unreadable (%s); no change report", out_dir, exc)
        return None
    prev["asset_id"] = prev["asset_id"].astype(str)
    return prev, record


def _config_diff(before: dict, after: dict, prefix: str = "") -> list[str]:
    keys = sorted(set(before) | set(after))
    out = []
    for k in keys:
        a, b = before.get(k), after.get(k)
        if isinstance(a, dict) and isinstance(b, dict):
            out += _config_diff(a, b, f"{prefix}{k}.")
        elif a != b:
            out.append(f"{prefix}{k}")
    return out


def _line_causes(line_ids: list[str], prev_lines: dict, cur_lines: dict) -> list[str]:
    out = []
    for lid in line_ids:
        cur, old = cur_lines[lid], prev_lines.get(lid)  # every line in reach is current
        if old is None:
            out.append(f"line {lid} now in reach (new line)")
            continue
        diffs = [f"{k} {old['attributes'].get(k)!r} -> {v!r}"
                 for k, v in cur["attributes"].items() if old["attributes"].get(k) != v]
        if diffs:
            out.append(f"line {lid}: " + ", ".join(diffs))
        if cur["geometry"] != old["geometry"]:
            out.append(f"line {lid} geometry edited")
    return out


def causes(asset_id: str, i: int, state: dict, prev_state: dict | None, keys,
           line_ids: np.ndarray) -> str:
    """The input changes found for one asset since the previous run."""
    if not prev_state or "asset_hashes" not in prev_state:
        return "unknown (previous run kept no input hashes)"
    old = prev_state["asset_hashes"].get(asset_id)
    cur = state["asset_hashes"][asset_id]
    found = []
    if old is None:
        return "new asset"
    if old[0] != cur[0] or old[1] != cur[1]:
        what = [n for n, j in (("geometry", 0), ("attributes", 1)) if old[j] != cur[j]]
        found.append(f"asset edited ({', '.join(what)})")
    if old[2] != cur[2]:
        reach = [str(line_ids[k]) for k in keys.lines_of(i)]
        detail = _line_causes(reach, prev_state.get("lines", {}), state["lines"])
        gone = sorted(set(prev_state.get("lines", {})) - set(state["lines"]))
        if gone:
            detail.append(f"lines removed: {', '.join(gone[:5])}")
        found += detail or ["lines in reach changed (a line moved out of reach, or its towers)"]
    if old[3] != cur[3]:
        found.append("soil changed")
    if old[4] != cur[4]:
        found.append("grounding items changed")
    pc, cc = prev_state.get("config_parts", {}), state["config_parts"]
    if pc.get("config") != cc.get("config"):
        diff = _config_diff(prev_state.get("relevant_config", {}), state["relevant_config"])
        from corridor.reconcile.settings import calibration_cause

        cal = calibration_cause(asset_id, prev_state.get("relevant_config", {}),
                                state["relevant_config"])
        if cal:  # the calibration's factors of this asset changed (docs/methods.md §17)
            found.append(cal)
        diff = [d for d in diff if d.split(".")[0] not in ("calibration", "readings")]
        if diff or not cal:
            found.append("config changed" + (f": {', '.join(diff[:8])}" if diff else ""))
    if pc.get("arrangements") != cc.get("arrangements"):
        found.append("arrangements changed")
    if pc.get("limit_set") != cc.get("limit_set"):
        found.append("limit set changed")
    if pc.get("code") != cc.get("code"):
        found.append("corridor code or version changed")
    return "; ".join(found) if found else "no input change found"


def rejected_power_lines(run) -> dict[str, str]:
    """Power lines rejected in this run: line id -> ``"<field>: <reason>"``.

    Rows of ``run.inputs.rejected`` whose ``role`` is ``power_lines`` (rows
    without a role: those of the power-line layer's label).
    """
    rej = getattr(getattr(run, "inputs", None), "rejected", None)
    if rej is None:
        return {}
    label = getattr(getattr(run.config, "power_lines", None), "label", None)
    out: dict[str, str] = {}
    for r in rej.rows:
        role = r.get("role")
        if role == "power_lines" or (role is None and label is not None
                                     and r.get("layer") == label):
            out.setdefault(str(r.get("feature_id")),
                           f"{r.get('field', '')}: {r.get('reason', '')}")
    return out


def _rejected_cause(prev_line_ids, rejected: dict[str, str]) -> str:
    if not rejected or not isinstance(prev_line_ids, str) or not prev_line_ids:
        return ""
    hit = [lid for lid in prev_line_ids.split(";") if lid in rejected]
    return "; ".join(f"line rejected: {lid} ({rejected[lid]})" for lid in hit)


def compare(run, keys, state: dict, previous, threshold: float) -> tuple[pd.DataFrame, dict]:
    """Rows of ``changes.csv`` and the ``changes`` section of run.json.

    Parameters
    ----------
    run : corridor.pipeline.Run
        The finished run (finalized).
    keys : corridor.keys.AssetKeys
    state : dict
        :func:`inputs_state` of this run.
    previous : tuple or None
        :func:`read_previous` of the output folder.
    threshold : float
        Change of worst utilization that counts as moved [-].
    """
    if previous is None:
        return pd.DataFrame(columns=COLUMNS), {"previous_run": None, "counts": {}}
    prev, record = previous
    prev_state = record.get("inputs_state")
    cur = worst_by_asset(run.segment_table)
    assets = run.inputs.assets
    kinds = dict(zip(assets["asset_id"].astype(str), assets["asset_kind"], strict=True))
    pos = {a: i for i, a in enumerate(assets["asset_id"].astype(str))}
    cur["asset_id"] = cur["asset_id"].astype(str)
    m = pd.merge(prev, cur, on="asset_id", how="outer", suffixes=("_before", "_after"),
                 indicator="merge_state")
    line_ids = run.inputs.lines["line_id"].to_numpy(dtype=object)
    rejected = rejected_power_lines(run)
    rows = []
    for r in m.itertuples(index=False):
        ub = float(r.utilization_before) if pd.notna(r.utilization_before) else np.nan
        ua = float(r.utilization_after) if pd.notna(r.utilization_after) else np.nan
        aid = str(r.asset_id)
        kind = kinds.get(aid, getattr(r, "asset_kind", ""))
        gb = r.governing_before if pd.notna(r.governing_before) else ""
        ga = r.governing_after if pd.notna(r.governing_after) else ""
        if r.merge_state == "left_only":
            change, cause = "removed asset", "asset removed from the input layers"
        elif r.merge_state == "right_only":
            change, cause = "new asset", "asset added to the input layers"
        else:
            b, a = (0.0 if np.isnan(ub) else ub), (0.0 if np.isnan(ua) else ua)
            lost = _rejected_cause(getattr(r, "line_ids", ""), rejected)
            now, before = getattr(r, "unjudged_after", False), getattr(r, "unjudged_before", False)
            unjudged_now = bool(now) if pd.notna(now) else False
            unjudged_before = bool(before) if pd.notna(before) else False
            if b < 1.0 <= a:
                change = "new exceedance"
            elif unjudged_now and a < 1.0 and (b >= 1.0 or not unjudged_before):
                change = "no longer assessed"  # what was not checked is not resolved
            elif a < 1.0 <= b:
                change = "line rejected" if lost else "resolved exceedance"
            elif abs(a - b) > threshold:
                change = "utilization moved"
            else:
                continue
            cause = causes(aid, pos[aid], state, prev_state, keys, line_ids)
            if lost:
                cause = f"{lost}; results incomplete near it; {cause}"
        rows.append({"change": change, "asset_id": aid, "asset_kind": kind,
                     "utilization_before": ub, "utilization_after": ua,
                     "governing_before": gb, "governing_after": ga, "cause": cause})
    frame = pd.DataFrame(rows, columns=COLUMNS)
    if len(frame):
        order = {"new exceedance": 0, "line rejected": 1, "no longer assessed": 2,
                 "resolved exceedance": 3, "utilization moved": 4, "new asset": 5,
                 "removed asset": 6}
        frame = frame.iloc[np.lexsort((frame["asset_id"].to_numpy(dtype=str),
                                       frame["change"].map(order).to_numpy()))]
        frame = frame.reset_index(drop=True)
    counts = {k: int((frame["change"] == k).sum()) for k in
              ("new exceedance", "line rejected", "no longer assessed", "resolved exceedance",
               "utilization moved", "new asset", "removed asset")}
    summary = {"previous_run": record.get("finished_utc"), "threshold": threshold,
               "counts": counts,
               "rows": json.loads(frame.head(1000).to_json(orient="records"))}
    for k, v in counts.items():
        if v:
            log.info("changes since the previous run: %s: %d", k, v)
    return frame, summary
