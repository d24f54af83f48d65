"""Power lines drawn as several features: one electrical line per ``line_id``.

A line route is often stored in pieces (one feature per section between
angle towers, or per map sheet). Features sharing a ``line_id`` are one
electrical line: the fault scan chains them end to end into one route fed from
its two terminals (docs/methods.md §8.1, §18), and the normal load treats them
as one line with one flow direction and one phase angle.

The parts keep their own geometry, arrangement (a line may change tower type)
and ``flow_direction`` (stated against each part's digitised direction); every
other electrical field must agree between the parts. A line whose parts
disagree, or one of whose parts was rejected, is rejected whole, each part with
its own row naming the part's FID: a line screened in part would be fed from
the wrong terminals.
"""

from __future__ import annotations

import logging
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from corridor.schema import LINE_FIELDS

if TYPE_CHECKING:
    import geopandas as gpd

    from corridor.config import LayerSource
    from corridor.io.rejected import Rejected

log = logging.getLogger(__name__)

#: Line fields the parts of one line may give differently: the tower arrangement, and
#: the flow direction against each part's own digitised direction (given on all parts
#: or on none).
PER_PART_FIELDS = ("line_id", "arrangement", "flow_direction")
#: Line fields every part of one line must give alike.
SHARED_FIELDS = tuple(s.name for s in LINE_FIELDS if s.name not in PER_PART_FIELDS)


def _labels(index: pd.Index) -> np.ndarray:
    from corridor.io.fields import feature_labels

    return feature_labels(index)


def _same(values: pd.Series) -> bool:
    """True when every value of one field agrees (numbers to 1e-9 relative, NaN = NaN)."""
    num = pd.to_numeric(values, errors="coerce")
    if num.notna().all() or (values.isna().all()):
        arr = num.to_numpy(dtype=float, na_value=np.nan)
        ref = arr[0]
        if np.isnan(ref):
            return bool(np.isnan(arr).all())
        return bool(np.all(np.abs(arr - ref) <= 1e-9 * max(abs(ref), 1.0)))
    text = values.astype("string").str.strip().fillna("")
    return bool((text == text.iloc[0]).all())


def _shown(value) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return "empty"
    if isinstance(value, np.generic):
        value = value.item()
    return repr(value)


def settle_parts(lines: gpd.GeoDataFrame, src: LayerSource,
                 rejected: Rejected) -> gpd.GeoDataFrame:
    """Check that the features of each multi-feature line agree; reject a line that does not.

    Parameters
    ----------
    lines : GeoDataFrame
        Kept power-line features, canonical fields, indexed as read (FID).
    src : corridor.config.LayerSource
        The power-line layer.
    rejected : corridor.io.layers.Rejected
        Receives one row per part of a line whose parts disagree, naming the
        layer, the line id, the user's field and the parts' FIDs and values.

    Returns
    -------
    GeoDataFrame
        ``lines`` without the rejected lines.
    """
    if len(lines) == 0:
        return lines
    ids = lines["line_id"].astype(str).to_numpy()
    labels = _labels(lines.index)
    uniq, inverse, counts = np.unique(ids, return_inverse=True, return_counts=True)
    keep = np.ones(len(lines), bool)
    for g in np.flatnonzero(counts > 1):
        members = np.flatnonzero(inverse == g)
        part = lines.iloc[members]
        problems = []
        for name in SHARED_FIELDS:
            if name in part and not _same(part[name]):
                problems.append(name)
        if "flow_direction" in part:
            given = np.isfinite(pd.to_numeric(part["flow_direction"], errors="coerce")
                                .to_numpy(dtype=float, na_value=np.nan))
            if given.any() and not given.all():
                problems.append("flow_direction")
        if not problems:
            log.info("layer %s: line %s is drawn as %d features (%s); screened as one"
                     " electrical line", src.label, uniq[g], len(members),
                     ", ".join(labels[members]))
            continue
        keep[members] = False
        for name in problems:
            values = ", ".join(f"{labels[m]}: {_shown(lines[name].iloc[m])}" for m in members)
            what = ("is given on some of them and not on others" if name == "flow_direction"
                    else "differs between them")
            for m in members:
                rejected.add(src.label, ids[m], src.fields.get(name, name),
                             f"feature {labels[m]} is one of {len(members)} features of line"
                             f" {uniq[g]!r}, and field '{src.fields.get(name, name)}' {what}"
                             f" ({values}); the features of one line must carry the same"
                             " electrical data", "power_lines")
    return drop_incomplete(lines[keep], src, rejected)


def drop_incomplete(lines: gpd.GeoDataFrame, src: LayerSource,
                    rejected: Rejected) -> gpd.GeoDataFrame:
    """Reject the remaining features of a line one of whose features was rejected.

    A line with a missing part would be chained short and fed from the wrong
    terminals, so it is screened whole or not at all (each remaining part gets a
    row in ``rejected`` pointing to the rejected one).
    """
    if len(lines) == 0:
        return lines
    lost = {str(r["feature_id"]) for r in rejected.by_role("power_lines")}
    ids = lines["line_id"].astype(str).to_numpy()
    hit = np.isin(ids, list(lost))
    named = lines.index.name == "fid"
    labels = _labels(lines.index)
    for i in np.flatnonzero(hit):
        part = f"feature {labels[i]} of line {ids[i]!r}" if named else f"line {ids[i]!r}"
        rejected.add(src.label, ids[i], src.fields.get("line_id", "line_id"),
                     f"another feature of line {ids[i]!r} was rejected (see its row), so"
                     f" {part} is not screened either: a line drawn in several features is"
                     " screened whole or not at all", "power_lines")
    out = lines[~hit]
    return out if named else out.reset_index(drop=True)
