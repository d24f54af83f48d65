"""OpenStreetMap tags: GDAL's ``other_tags`` hstore, tag selections and tag values.

Used by the reader :mod:`corridor.io.osm` (which re-exports
:func:`parse_other_tags` and :func:`parse_voltage_kv`).
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

__all__ = [
    "hstore_pair",
    "parse_count",
    "parse_frequencies",
    "parse_other_tags",
    "parse_voltage_kv",
    "select_mask",
    "tags_match",
    "way_tags",
]

_HSTORE = re.compile(r'"((?:[^"\\]|\\.)*)"=>"((?:[^"\\]|\\.)*)"')
_UNESCAPE = re.compile(r"\\(.)")


def parse_other_tags(text) -> dict[str, str]:
    """Tags of GDAL's ``other_tags`` hstore text (``"k"=>"v","k2"=>"v2"``)."""
    if not isinstance(text, str) or not text:
        return {}
    return {_UNESCAPE.sub(r"\1", k): _UNESCAPE.sub(r"\1", v) for k, v in _HSTORE.findall(text)}


def hstore_pair(key: str, value: str | None) -> str:
    def esc(s):
        return s.replace("\\", "\\\\").replace('"', '\\"')
    return f'"{esc(key)}"=>' + ("" if value is None else f'"{esc(value)}"')


def select_mask(df: pd.DataFrame, select: list[str]) -> np.ndarray:
    """Rows matching any ``key=value`` / ``key`` entry (vectorised on the raw columns)."""
    other = df["other_tags"].astype("string") if "other_tags" in df else None
    mask = np.zeros(len(df), bool)
    for entry in select:
        key, _, raw_value = entry.partition("=")
        key = key.strip()
        value = raw_value.strip() or None
        if key in df.columns and key not in ("other_tags", "geometry"):
            col = df[key].astype("string")
            hit = col.notna() if value in (None, "*") else (col == value)
        elif other is not None:
            pat = hstore_pair(key, None if value in (None, "*") else value)
            hit = other.str.contains(pat, regex=False)
        else:
            continue
        mask |= hit.fillna(False).to_numpy(dtype=bool)
    return mask


def way_tags(row: pd.Series, direct: list[str]) -> dict[str, str]:
    tags = parse_other_tags(row.get("other_tags"))
    for col in direct:
        value = row.get(col)
        if isinstance(value, str) and value != "":
            tags[col] = value
    return tags


def tags_match(tags: dict[str, str], select: list[str]) -> bool:
    for entry in select:
        key, _, value = entry.partition("=")
        key, value = key.strip(), value.strip()
        if key in tags and (value in ("", "*") or tags[key] == value):
            return True
    return False


_VOLT = re.compile(r"^\s*([0-9]+(?:\.[0-9]+)?)\s*(kv|v)?\s*$", re.IGNORECASE)


def parse_voltage_kv(text: str) -> tuple[list[float], str | None]:
    """Voltages [kV] of an OSM ``voltage`` value (volts; ``;`` between values).

    Returns the distinct values, highest first, and None; or ``[]`` and why the
    value cannot be used. ``230000`` and ``230 kV`` are 230 kV; a plain number
    below 1000 is refused (OSM voltages are in volts: ``230`` would be 230 V).
    """
    out: list[float] = []
    for part in str(text).split(";"):
        if not part.strip():
            continue
        m = _VOLT.match(part)
        if m is None:
            return [], (f"voltage {text!r} is not a number of volts (OSM gives voltages in"
                        " volts, several separated by ';', e.g. '230000' or '110000;20000')")
        number, unit = float(m.group(1)), (m.group(2) or "v").lower()
        kv = number if unit == "kv" else number / 1000.0
        if kv < 1.0:
            return [], (f"voltage {text!r}: {number:g} V is below 1 kV, not a power line"
                        " corridor screens; OSM voltages are in volts, so if kilovolts were"
                        f" meant the tag should read {int(number * 1000)}"
                        " (several voltages: '110000;20000')")
        if kv > 1200.0:
            return [], f"voltage {text!r}: {kv:g} kV is above 1200 kV"
        if kv not in out:
            out.append(kv)
    if not out:
        return [], "no voltage tag value"
    return sorted(out, reverse=True), None


def parse_count(text: str | None, tag: str) -> tuple[int | None, str | None]:
    if text is None or str(text).strip() == "":
        return None, None
    parts = [p.strip() for p in str(text).split(";") if p.strip()]
    try:
        values = [int(p) for p in parts]
    except ValueError:
        return None, f"{tag} {text!r} is not a whole number"
    if not values or min(values) < 0:
        return None, f"{tag} {text!r} is not a whole number >= 0"
    return sum(values), None  # '2;1' (circuits per voltage): all of them


def parse_frequencies(text: str | None) -> tuple[list[float], str | None]:
    if text is None or str(text).strip() == "":
        return [], None
    out = []
    for part in str(text).split(";"):
        if not part.strip():
            continue
        try:
            out.append(float(part))
        except ValueError:
            return [], f"frequency {text!r} is not a number of hertz"
    return out, None
