"""OpenStreetMap extracts as input layers (``.osm`` XML or ``.osm.pbf``).

GDAL's OSM driver reads the ways of an extract (layer ``lines``: a few tags
as columns, the rest in the hstore text ``other_tags``). A tag preset shipped
as data (``corridor/data/osm_preset.toml``) says which ways are power lines
and which are assets of which kind, and how tags become corridor fields; the
layer's ``osm`` table in the run config overrides any part of it.

Power lines
    ``power=line`` and ``power=cable``. ``voltage`` is in volts, several
    values separated by ``;``. A way carrying several voltages (``110000;20000``:
    circuits of two systems on one route) is screened as ONE line at the
    highest voltage, which picks its voltage class and arrangement; the
    other values are reported as a warning naming layer, way and tag. A
    voltage that is not a number of volts (``medium``), or below 1 kV, rejects
    the way (``rejected.csv``: layer, way, tag, reason).
    ``circuits`` comes from the ``circuits`` tag, else ``cables / 3``
    (rounded down), else 1; the ``frequency`` tag must include the run's
    frequency (else the line is rejected: corridor screens one frequency).
Missing electrical data
    OSM says nothing of the towers: the voltage class rules of the preset
    (``[[power_lines.classes]]``) give each line a typical arrangement for its
    number of circuits from ``corridor/data/osm_arrangements.toml``. Every line
    screened on such a rule is listed in ``Inputs.defaults_used`` (fields
    ``arrangement``, ``circuits``, ``frequency_hz``), as for any default; the
    currents come from ``[line_defaults]`` as for any layer without them.
Joining ways
    OSM splits a line into ways at every junction. Ways with the same voltages,
    circuits, frequency and arrangement are joined into one electrical line
    (one ``line_id``, the lowest way id, e.g. ``way/10``) where exactly two of
    them end at one node, and all ways of a ``route=power`` relation are joined
    (``line_id`` ``relation/ID``). Asset ways of the same kind and values are
    joined the same way, so that a fence split by a gate stays one conductor.
"""

from __future__ import annotations

import logging
import re
import sys
from collections import defaultdict
from dataclasses import replace
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from corridor.errors import InputError
from corridor.io.osm_config import main, write_config
from corridor.io.osm_join import by_way_id, chains, group_ways, merged_geometry
from corridor.io.osm_preset import (  # noqa: F401 - re-exported for users of the reader
    ARRANGEMENTS_PATH,
    DATA_DIR,
    FREQ_TOL_HZ,
    NOTES,
    PRESET_PATH,
    _plain,
    check_overrides,
    is_osm_path,
    preset_for,
    source_is_osm,
)
from corridor.io.osm_tags import (
    parse_count,
    parse_frequencies,
    parse_other_tags,
    parse_voltage_kv,
    select_mask,
    tags_match,
    way_tags,
)

log = logging.getLogger(__name__)

__all__ = [
    "main",
    "parse_other_tags",
    "parse_voltage_kv",
    "read_osm",
    "settle",
    "typical_arrangements",
    "write_config",
]



def typical_arrangements() -> dict:
    """The shipped typical arrangements (name -> :class:`corridor.config.Arrangement`)."""
    from corridor.config import load_arrangements

    return load_arrangements(ARRANGEMENTS_PATH)


# --------------------------------------------------------------------------- reading


def _read_ways(src, read, layer: str = "lines") -> gpd.GeoDataFrame:
    return read(replace(src, layer=layer, format="gdal"))


def read_osm(src, read) -> gpd.GeoDataFrame:
    """Read a power-line or asset layer from an OSM extract.

    Returns a frame with corridor's canonical field names (``line_id``,
    ``voltage_kv``, ``arrangement``, ... or ``asset_id``, ``asset_kind``, ...),
    one row per joined line or asset, in the extract's CRS (EPSG:4326). Its
    ``attrs[NOTES]`` holds what :func:`settle` records: rejected ways, warnings
    and the defaults used. ``read(src)`` reads a plain GDAL layer (the caller's
    :func:`corridor.io.raw.read_raw`, with its error messages).

    Raises
    ------
    InputError
        When the extract cannot be read, or no way matches the preset.
    """
    _check_xml(src)
    ways = _read_ways(src, read)
    notes: dict[str, Any] = {"rejected": [], "warnings": [], "defaults": defaultdict(list)}
    if src.role == "power_lines":
        out = _power_lines(src, ways, notes, read)
    elif src.role == "assets":
        out = _assets(src, ways, notes)
    else:
        raise InputError(f"layer {src.label}: OSM extracts give power lines and assets only")
    out.attrs[NOTES] = notes
    return out


def _check_xml(src) -> None:
    """Refuse an OSM XML file that is not well-formed.

    GDAL's OSM driver stops at the first XML error without raising, returning
    the ways read so far (none, often): a truncated download would lose ways
    silently. A PBF file is checked by the driver's own block decoding.
    """
    from xml.etree.ElementTree import ParseError, iterparse

    with open(src.path, "rb") as fh:
        head = fh.read(64).lstrip()
    if not head.startswith(b"<"):
        return  # PBF (binary)
    try:
        for _event, elem in iterparse(src.path, events=("end",)):
            elem.clear()
    except ParseError as exc:
        raise InputError(f"layer {src.label}: the OSM XML file is not well-formed ({exc});"
                         " a truncated or corrupted download? Fetch the extract again") from None


def _direct(ways: gpd.GeoDataFrame) -> list[str]:
    return [c for c in ways.columns if c not in ("other_tags", "osm_id", "z_order")
            and c != ways.geometry.name]


def _way_ids(frame: pd.DataFrame) -> list[str]:
    return [f"way/{i}" for i in frame["osm_id"].astype("string").fillna("?")]


def _power_lines(src, ways: gpd.GeoDataFrame, notes: dict, read) -> gpd.GeoDataFrame:
    p = preset_for("power_lines", src.osm)
    sel = ways[select_mask(ways, p["select"])]
    if len(sel) == 0:
        raise InputError(f"layer {src.label}: no way of the extract is tagged as a power line"
                         f" ({', '.join(p['select'])}); check the extract's area, or the"
                         " 'select' of the layer's osm table")
    direct = _direct(ways)
    ids = _way_ids(sel)
    rows = []
    for fid, (_, row) in zip(ids, sel.iterrows(), strict=True):
        tags = way_tags(row, direct)
        if not tags_match(tags, p["select"]):  # the text search matched a lookalike
            continue
        rec = _power_way(src, p, fid, tags, notes)
        if rec is not None:
            rec["geometry"] = row[ways.geometry.name]
            rec["way"] = fid
            rows.append(rec)
    groups = _relation_groups(src, rows, read) if p["join"] else {}
    lines = []
    for members, line_id in group_ways(rows, p["join"], groups):
        first = members[0]
        line = {k: first[k] for k in ("voltage_kv", "arrangement", "voltages", "circuits",
                                      "frequencies", "cable")}
        line["line_id"] = line_id
        line["name"] = next((m["name"] for m in members if m["name"]), None)
        line["osm_ways"] = ";".join(m["way"] for m in members)
        line["geometry"] = merged_geometry([m["geometry"] for m in members])
        for fld in ("arrangement", "circuits", "frequency_hz"):
            if any(fld in m["defaulted"] for m in members):
                notes["defaults"][fld].append(line_id)
        if len(members) > 1:
            log.info("layer %s: line %s joined from %d ways (%s)", src.label, line_id,
                     len(members), line["osm_ways"])
        for m in members:
            for msg in m["warnings"]:
                note = f"layer {src.label}: feature {m['way']} (line {line_id}): {msg}"
                notes["warnings"].append(note)
                log.warning(note)
        lines.append(line)
    if not lines:
        frame = gpd.GeoDataFrame({"line_id": pd.Series([], dtype="string"),
                                  "voltage_kv": pd.Series([], dtype=float),
                                  "arrangement": pd.Series([], dtype="string")},
                                 geometry=gpd.GeoSeries([], crs=ways.crs))
        return frame
    frame = gpd.GeoDataFrame(pd.DataFrame(lines), geometry="geometry", crs=ways.crs)
    log.info("layer %s: %d power line ways of the extract read as %d lines", src.label,
             len(sel), len(frame))
    return frame


def _power_way(src, p: dict, fid: str, tags: dict, notes: dict) -> dict | None:
    """One selected way: its parsed electrical data, or None (rejected, with a note)."""
    def reject(tag, reason):
        notes["rejected"].append((fid, tag, reason))

    vtag = p["voltage"]
    if vtag not in tags:
        reject(vtag, f"no '{vtag}' tag: the voltage class (and so the arrangement) is unknown;"
                     " add the voltage in volts to the way (or a fixed copy of the extract)")
        return None
    kvs, err = parse_voltage_kv(tags[vtag])
    if err:
        reject(vtag, err)
        return None
    warnings: list[str] = []
    if len(kvs) > 1:
        others = ", ".join(f"{v:g} kV" for v in kvs[1:])
        warnings.append(f"field '{vtag}': several voltages ({tags[vtag]}); screened as one line"
                        f" at the highest, {kvs[0]:g} kV (its class, arrangement and"
                        f" [line_defaults] currents); the {others} circuits are not screened on"
                        " their own")
    defaulted: set[str] = set()
    circuits, err = parse_count(tags.get(p["circuits"]), p["circuits"])
    if err:
        reject(p["circuits"], err)
        return None
    if circuits is None:
        cables, err = parse_count(tags.get(p["cables"]), p["cables"])
        if err:
            reject(p["cables"], err)
            return None
        circuits = max(1, cables // 3) if cables else 1
        defaulted.add("circuits")
    if circuits < 1:
        reject(p["circuits"], f"{p['circuits']} {tags.get(p['circuits'])!r}: no circuit")
        return None
    freqs, err = parse_frequencies(tags.get(p["frequency"]))
    if err:
        reject(p["frequency"], err)
        return None
    if not freqs:
        defaulted.add("frequency_hz")
    cable = tags_match(tags, p["cable_select"])
    arrangement = tags.get(p["arrangement"]) if p["arrangement"] else None
    if not arrangement:
        rule = next((c for c in p["classes"] if c["min_kv"] <= kvs[0] < c["max_kv"]), None)
        names = [] if rule is None else rule.get("cables" if cable else "arrangements", [])
        if rule is None:
            reject(vtag, f"{kvs[0]:g} kV is in no voltage class of the OSM preset; add a class"
                         " ([[layers.power_lines.osm.classes]])")
            return None
        if circuits > len(names):
            what = "cable" if cable else "overhead"
            reject(p["circuits"], f"{circuits} circuits: the {rule['min_kv']:g}-"
                   f"{rule['max_kv']:g} kV class has {what} arrangements for up to {len(names)};"
                   " add one (or tag the way's arrangement) rather than under-count its currents")
            return None
        arrangement = names[circuits - 1]
        defaulted.add("arrangement")
    return {"voltage_kv": kvs[0], "voltages": ";".join(f"{v:g}" for v in kvs),
            "circuits": circuits, "frequencies": ";".join(f"{f:g}" for f in freqs),
            "cable": cable, "arrangement": arrangement, "name": tags.get(p["name"]),
            "defaulted": defaulted, "warnings": warnings}


def _relation_groups(src, rows: list[dict], read) -> dict[int, str]:
    """Row index -> ``relation/ID`` for the ways of ``route=power`` relations."""
    if not rows:
        return {}
    try:
        rels = _read_ways(src, read, "multilinestrings")
    except InputError as exc:
        log.debug("layer %s: no relations read: %s", src.label, exc)
        return {}
    if len(rels) == 0:
        return {}
    rels = rels[select_mask(rels, ["route=power"])]
    if len(rels) == 0:
        return {}
    geoms = np.array([r["geometry"] for r in rows], dtype=object)
    tree = shapely.STRtree(geoms)
    out: dict[int, str] = {}
    for osm_id, geom in zip(rels["osm_id"], rels.geometry, strict=True):
        if geom is None:
            continue
        for j in tree.query(geom, predicate="covers"):
            out.setdefault(int(j), f"relation/{osm_id}")
    return out


def _assets(src, ways: gpd.GeoDataFrame, notes: dict) -> gpd.GeoDataFrame:
    from corridor.registry import registry

    preset = preset_for("assets", src.osm)
    known = registry.kind_names()
    kinds = [k for k in preset if k in known and (src.kind is None or k == src.kind)]
    masks = {k: select_mask(ways, preset[k]["select"]) for k in kinds}
    anym = np.zeros(len(ways), bool)
    for m in masks.values():
        anym |= m
    sel = ways[anym]
    if len(sel) == 0:
        what = "; ".join(f"{k}: {', '.join(preset[k]['select'])}" for k in kinds)
        raise InputError(f"layer {src.label}: no way of the extract is tagged as an asset"
                         f" ({what}); check the extract's area, or the layer's osm table")
    direct = _direct(ways)
    ids = _way_ids(sel)
    rows = []
    for pos, (fid, (_, row)) in enumerate(zip(ids, sel.iterrows(), strict=True)):
        hit = [k for k in kinds if masks[k][np.flatnonzero(anym)[pos]]]
        tags = way_tags(row, direct)
        if len(hit) > 1:
            msg = (f"layer {src.label}: feature {fid}: tagged as {' and '.join(hit)}; screened"
                   f" as a {hit[0]}")
            notes["warnings"].append(msg)
            log.warning(msg)
        rec = _asset_way(src, preset[hit[0]], hit[0], fid, tags, notes)
        if rec is not None:
            rec["geometry"] = row[ways.geometry.name]
            rec["way"] = fid
            rows.append(rec)
    by_key: dict[tuple, list[dict]] = defaultdict(list)
    for r in rows:
        by_key[(r["asset_kind"], tuple(sorted(r["values"].items(), key=str)))].append(r)
    out = []
    for members_all in by_key.values():
        for chain in chains([m["geometry"] for m in members_all]):
            members = sorted((members_all[c] for c in chain), key=by_way_id)
            rec = {"asset_id": members[0]["way"], "asset_kind": members[0]["asset_kind"],
                   **members[0]["values"], "osm_ways": ";".join(m["way"] for m in members),
                   "geometry": merged_geometry([m["geometry"] for m in members])}
            out.append(rec)
    if not out:
        return gpd.GeoDataFrame({"asset_id": pd.Series([], dtype="string"),
                                 "asset_kind": pd.Series([], dtype="string")},
                                geometry=gpd.GeoSeries([], crs=ways.crs))
    frame = gpd.GeoDataFrame(pd.DataFrame(out), geometry="geometry", crs=ways.crs)
    log.info("layer %s: %d asset ways of the extract read as %d assets", src.label, len(sel),
             len(frame))
    return frame


_NUMBER = re.compile(r"^\s*([0-9]+(?:\.[0-9]+)?)\s*(mm)?\s*$", re.IGNORECASE)


def _asset_way(src, spec: dict, kind: str, fid: str, tags: dict, notes: dict) -> dict | None:
    values: dict[str, Any] = {}
    for fld, rule in spec.get("values", {}).items():
        tag = rule["tag"]
        raw = tags.get(tag)
        if raw is None or raw.strip() == "":
            continue
        if "map" in rule:
            if raw in rule["map"]:
                values[fld] = rule["map"][raw]
            else:
                msg = (f"layer {src.label}: feature {fid}: field '{tag}': value {raw!r} is not in"
                       f" the preset's map for {fld} ({', '.join(map(str, rule['map']))}); the"
                       f" {kind} default is used")
                notes["warnings"].append(msg)
                log.warning(msg)
            continue
        m = _NUMBER.match(raw)
        if m is None:
            notes["rejected"].append((fid, tag, f"{tag} {raw!r} is not a number (the preset"
                                      f" reads it times {rule['scale']:g} as {fld})"))
            return None
        values[fld] = float(m.group(1)) * float(rule.get("scale", 1.0))
    return {"asset_kind": kind, "values": values}


def settle(gdf: gpd.GeoDataFrame, src, cfg, rejected, warnings: list[str],
           defaults_used: dict[str, list[str]]) -> gpd.GeoDataFrame:
    """Record what :func:`read_osm` found and apply the run's frequency.

    Rejected ways go to ``rejected`` (layer, way, tag, reason), warnings to
    ``warnings``, defaulted fields to ``defaults_used``; a power line whose
    ``frequency`` tag does not include ``run.frequency_hz`` is rejected.
    Returns the frame without the rejected lines.
    """
    notes = gdf.attrs.get(NOTES, {})
    for fid, tag, reason in notes.get("rejected", []):
        rejected.add(src.label, fid, tag, reason, src.role)
    warnings.extend(notes.get("warnings", []))
    for fld, ids in notes.get("defaults", {}).items():
        defaults_used.setdefault(fld, []).extend(ids)
    if src.role != "power_lines" or "frequencies" not in gdf or len(gdf) == 0:
        return gdf
    f_run = float(cfg.run.frequency_hz)
    keep = np.ones(len(gdf), bool)
    tag = preset_for("power_lines", src.osm)["frequency"]
    for i, (line_id, text) in enumerate(zip(gdf["line_id"], gdf["frequencies"], strict=True)):
        freqs = [float(f) for f in str(text).split(";") if f]
        if freqs and not any(abs(f - f_run) <= FREQ_TOL_HZ for f in freqs):
            kind = "a DC line" if all(f == 0 for f in freqs) else f"{text} Hz"
            rejected.add(src.label, line_id, tag, f"{kind}, not the run's {f_run:g} Hz; corridor"
                         " screens one AC frequency per run (run.frequency_hz)", src.role)
            keep[i] = False
        elif len(freqs) > 1:
            msg = (f"layer {src.label}: feature {line_id}: field '{tag}': several frequencies"
                   f" ({text} Hz); screened at the run's {f_run:g} Hz, the circuits of the"
                   " other frequencies are not screened")
            warnings.append(msg)
            log.warning(msg)
    out = gdf[keep]
    out.attrs = {}
    return out


if __name__ == "__main__":
    sys.exit(main())
