"""Readings: read, check and place each measured voltage on its asset segment.

Every row of the readings table comes out, one row each, with a ``status``:

- ``placed``: on an asset segment (``asset_id``, ``segment_index``, ``snap_distance_m``);
- ``unplaced``: no asset within the snap tolerance, two assets about equally near,
  a chainage beyond the asset's end, an asset id the run does not know;
- ``rejected``: a field cannot be used (the reason names layer, feature and field);
- ``not compared``: a measured voltage of 0 V (a log-residual needs a positive value).

Nothing is dropped (docs/methods.md §17).
"""

from __future__ import annotations

import logging
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from corridor.errors import InputError
from corridor.reconcile.settings import READING_FIELDS

log = logging.getLogger(__name__)

#: Columns of the placed readings table (before the comparison adds its own).
COLUMNS = ["reading_id", "measured_at", "asset_id", "segment_index", "chainage_m",
           "snap_distance_m", "measured_v", "measured_ac_density_a_per_m2",
           "line_currents_a", "status", "reason"]


def label(settings: dict) -> str:
    """How messages name the readings layer: ``file:layer``."""
    name = Path(settings["path"]).name
    return f"{name}:{settings['layer']}" if settings.get("layer") else name


def read_table(settings: dict, crs) -> gpd.GeoDataFrame:
    """The readings table with corridor's field names, in the run CRS.

    Raises
    ------
    InputError
        The file cannot be read (the message names the layer).
    """
    from corridor.config import LayerSource
    from corridor.io.layers import read_raw
    from corridor.settings import FrozenMap

    path = Path(settings["path"])
    if path.suffix.lower() == ".csv":  # a plain table: locations by asset and chainage, or x/y
        try:
            raw = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")
        except (OSError, ValueError, UnicodeDecodeError) as exc:
            raise InputError(f"layer {label(settings)}: cannot be read as CSV (UTF-8, a"
                             f" header row): {exc}") from None
        raw = raw.replace("", None)
    else:
        raw = read_raw(LayerSource("readings", path, settings.get("layer"),
                                   FrozenMap(settings.get("fields", {})),
                                   crs=settings.get("crs")))
    if not isinstance(raw, gpd.GeoDataFrame) or raw.geometry.name not in raw:
        raw = gpd.GeoDataFrame(pd.DataFrame(raw), geometry=[None] * len(raw), crs=crs)
    if raw.crs is None:
        declared = settings.get("crs")
        raw = raw.set_crs(declared if declared is not None else crs, allow_override=True)
    elif crs is not None and raw.geometry.notna().any() and not raw.crs.equals(crs):
        raw = raw.to_crs(crs)
    mapping = dict(settings.get("fields", {}))
    from corridor.io.fields import feature_labels

    # a reading without a name is named by its layer FID (fid:N), or its row of a CSV (row:N)
    out = gpd.GeoDataFrame({"feature_id": feature_labels(raw.index)},
                           geometry=raw.geometry.to_numpy(), crs=raw.crs)
    for spec in READING_FIELDS:
        source = mapping.get(spec.name, spec.name)
        out[spec.name] = raw[source].to_numpy(dtype=object) if source in raw else None
    missing = [f"{s.name} (attribute {mapping.get(s.name, s.name)!r})" for s in READING_FIELDS
               if s.default is None and mapping.get(s.name, s.name) not in raw]
    if missing:
        raise InputError(f"layer {label(settings)}: required field missing: {', '.join(missing)}"
                         f"; map it under [readings] fields")
    return out


def _number(value) -> float:
    if value is None or isinstance(value, bool):
        return float("nan")
    try:
        v = float(value)
    except (TypeError, ValueError):
        return float("inf")  # text that is not a number: a problem, not a missing value
    return v


def _text(value) -> str:
    if value is None or (isinstance(value, float) and not np.isfinite(value)):
        return ""
    return str(value).strip()


def parse_currents(text: str) -> dict[str, float]:
    """``'L1=420;L2=300'`` as ``{"L1": 420.0, "L2": 300.0}``.

    Raises
    ------
    ValueError
        An item without ``=``, or a current that is not a finite number >= 0.
    """
    out: dict[str, float] = {}
    for item in filter(None, (p.strip() for p in text.split(";"))):
        if "=" not in item:
            raise ValueError(f"{item!r} is not LINE_ID=amps")
        key, _, value = item.partition("=")
        amps = _number(value.strip())
        if not np.isfinite(amps) or amps < 0:
            raise ValueError(f"{item!r}: the current is not a number >= 0")
        out[key.strip()] = amps
    return out


def place(table: gpd.GeoDataFrame, segments: gpd.GeoDataFrame, settings: dict) -> pd.DataFrame:
    """Check every reading and place it on an asset segment.

    Parameters
    ----------
    table : GeoDataFrame
        :func:`read_table`.
    segments : GeoDataFrame
        The run's segment table (``asset_id``, ``segment_index``, ``chainage_m``,
        ``length_m``, geometry).
    settings : dict
        ``[readings]``: ``snap_tolerance_m`` and ``ambiguity_margin_m``.

    Returns
    -------
    DataFrame
        :data:`COLUMNS` plus ``geometry`` (the reading's point; a reading given by
        chainage takes its segment's midpoint), one row per reading, in input order.
    """
    name = label(settings)
    tol = float(settings["snap_tolerance_m"])
    margin = float(settings["ambiguity_margin_m"])
    seg_ids = segments["asset_id"].astype(str).to_numpy()
    seg_geom = segments.geometry.to_numpy()
    tree = shapely.STRtree(seg_geom)
    known = set(seg_ids)
    rows = []
    for k in range(len(table)):
        r = table.iloc[k]
        fid = _text(r["reading_id"]) or str(r["feature_id"])
        where = f"layer {name}: feature {fid}: field"
        row: dict = {c: None for c in COLUMNS}
        row.update(reading_id=fid, measured_at=_text(r["measured_at"]), status="placed",
                   reason="", line_currents_a=_text(r["line_currents_a"]))
        problems = []
        v = _number(r["voltage_v"])
        if not np.isfinite(v) or v < 0:
            problems.append(f"{where} 'voltage_v': {r['voltage_v']!r} is not a voltage >= 0 V")
        dens = _number(r["ac_density_a_per_m2"])
        if not (np.isnan(dens) or (np.isfinite(dens) and dens >= 0)):
            problems.append(f"{where} 'ac_density_a_per_m2': {r['ac_density_a_per_m2']!r} is"
                            " not a current density >= 0 A/m²")
        if row["line_currents_a"]:
            try:
                parse_currents(row["line_currents_a"])
            except ValueError as exc:
                problems.append(f"{where} 'line_currents_a': {exc}")
        row["measured_v"] = v if np.isfinite(v) else float("nan")
        row["measured_ac_density_a_per_m2"] = dens if np.isfinite(dens) else float("nan")
        aid = _text(r["asset_id"])
        ch = _number(r["chainage_m"])
        x, y = _number(r["x_m"]), _number(r["y_m"])
        point = r.geometry
        if (point is None or point.is_empty) and np.isfinite(x) and np.isfinite(y):
            point = shapely.Point(x, y)
        if point is not None and not point.is_empty and point.geom_type != "Point":
            problems.append(f"{where} 'geometry': a {point.geom_type}, expected a point")
            point = None
        if np.isinf(ch) or (np.isfinite(ch) and ch < 0):
            problems.append(f"{where} 'chainage_m': {r['chainage_m']!r} is not a distance >= 0")
        if problems:
            row.update(status="rejected", reason="; ".join(problems), geometry=point)
            rows.append(row)
            continue
        if aid and aid not in known:
            row.update(status="unplaced", geometry=point,
                       reason=f"{where} 'asset_id': {aid!r} is not an asset of this run"
                       " (rejected, out of reach of every line, or not in the layers)")
        elif aid and np.isfinite(ch):
            _by_chainage(row, segments, seg_ids == aid, aid, ch, tol, where)
        elif point is not None and not point.is_empty:
            _by_point(row, point, tree, seg_ids, seg_geom, segments, aid, tol, margin)
        else:
            row.update(status="unplaced", reason=f"{where} 'geometry': no location: give a"
                       " point, x_m and y_m, or asset_id with chainage_m")
        if row["status"] == "placed" and v == 0.0:
            row.update(status="not compared", reason="measured 0 V: no ratio or log-residual")
        rows.append(row)
    frame = pd.DataFrame(rows, columns=[*COLUMNS, "geometry"])
    frame["segment_index"] = pd.array(frame["segment_index"], dtype="Int64")
    for col in ("chainage_m", "snap_distance_m", "measured_v", "measured_ac_density_a_per_m2"):
        frame[col] = pd.to_numeric(frame[col], errors="coerce").astype(float)
    return frame


def _by_chainage(row, segments, mine, aid, ch, tol, where) -> None:
    idx = np.flatnonzero(mine)
    start = segments["chainage_m"].to_numpy(float)[idx]
    length = segments["length_m"].to_numpy(float)[idx]
    inside = np.flatnonzero((start <= ch) & (ch <= start + length))
    if len(inside) == 0:
        end = float((start + length).max())
        if ch <= end + tol:
            inside = np.array([int(np.argmax(start + length))])
        else:
            row.update(status="unplaced", geometry=None,
                       reason=f"{where} 'chainage_m': {ch:g} m is beyond the end of asset"
                       f" {aid} ({end:.0f} m)")
            return
    s = int(idx[inside[0]])
    row.update(asset_id=aid, segment_index=int(segments["segment_index"].iloc[s]),
               chainage_m=ch, snap_distance_m=0.0,
               geometry=shapely.line_interpolate_point(segments.geometry.iloc[s], 0.5,
                                                       normalized=True))


def _by_point(row, point, tree, seg_ids, seg_geom, segments, aid, tol, margin) -> None:
    near = tree.query(point, predicate="dwithin", distance=tol)
    if aid:
        near = near[seg_ids[near] == aid]
    row["geometry"] = point
    if len(near) == 0:
        what = f"asset {aid}" if aid else "any asset"
        row.update(status="unplaced", reason=f"no segment of {what} within the snap"
                   f" tolerance of {tol:g} m")
        return
    dist = shapely.distance(seg_geom[near], point)
    best: dict[str, tuple[float, int]] = {}
    for s, d in zip(near, dist, strict=True):
        a = str(seg_ids[s])
        if a not in best or d < best[a][0]:
            best[a] = (float(d), int(s))
    ranked = sorted(best.items(), key=lambda kv: kv[1][0])
    if len(ranked) > 1 and ranked[1][1][0] - ranked[0][1][0] <= margin:
        names = ", ".join(f"{a} ({d:.1f} m)" for a, (d, _) in ranked[:3])
        row.update(status="unplaced", reason=f"ambiguous: several assets about equally near"
                   f" ({names}); name the asset in asset_id")
        return
    a, (d, s) = ranked[0]
    seg = seg_geom[s]
    along = float(shapely.line_locate_point(seg, point))
    row.update(asset_id=a, segment_index=int(segments["segment_index"].iloc[s]),
               chainage_m=float(segments["chainage_m"].iloc[s]) + along, snap_distance_m=d)
