"""The OpenStreetMap tag preset (``corridor/data/osm_preset.toml``) and its overrides.

Kept apart from :mod:`corridor.io.osm` (the reader) so that the config loader
can check a layer's ``osm`` table and recognise an OSM source without
importing the layer readers. Imports nothing of corridor.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

DATA_DIR = Path(__file__).resolve().parents[1] / "data"
#: The shipped tag preset.
PRESET_PATH = DATA_DIR / "osm_preset.toml"
#: The shipped typical arrangements per voltage class.
ARRANGEMENTS_PATH = DATA_DIR / "osm_arrangements.toml"
#: Key of the notes (rejections, warnings, defaults) the reader attaches to its frame.
NOTES = "corridor_osm"

POWER_KEYS = {"select", "voltage", "circuits", "cables", "frequency", "name", "arrangement",
              "cable_select", "join", "classes"}
CLASS_KEYS = {"min_kv", "max_kv", "arrangements", "cables"}
KIND_KEYS = {"select", "values"}
VALUE_KEYS = {"tag", "map", "scale"}

#: Frequencies [Hz] closer than this are the same (16.7 and 16 2/3 Hz are not 50 Hz).
FREQ_TOL_HZ = 0.05


def is_osm_path(path: Path) -> bool:
    """True for a file named ``*.osm``, ``*.osm.pbf`` or ``*.pbf``."""
    name = Path(path).name.lower()
    return name.endswith((".osm", ".pbf"))


def source_is_osm(src) -> bool:
    """True when a layer source is read as an OSM extract.

    ``format = "osm"`` in the layer's table, or no format and a file named
    ``.osm`` / ``.osm.pbf``. ``format = "gdal"`` reads any file as a plain layer.
    """
    fmt = getattr(src, "format", None)
    if fmt is not None:
        return fmt == "osm"
    return is_osm_path(src.path)


def _load_preset() -> dict:
    import tomllib

    with open(PRESET_PATH, "rb") as fh:
        return tomllib.load(fh)


def _merge(base: dict, over: dict) -> dict:
    """``base`` with ``over`` merged key by key (tables recursively; lists replace)."""
    out = copy.deepcopy(base)
    for key, value in over.items():
        if isinstance(value, dict) and isinstance(out.get(key), dict):
            out[key] = _merge(out[key], value)
        else:
            out[key] = copy.deepcopy(value)
    return out


def preset_for(role: str, overrides: Any = None) -> dict:
    """The effective tag mapping of a layer: the shipped preset's section for ``role``
    (``power_lines``: ``[power_lines]``; ``assets``: ``[assets]``, kind -> table)
    with the layer's ``osm`` table merged over it."""
    section = _load_preset()["power_lines" if role == "power_lines" else "assets"]
    return _merge(section, _plain(overrides or {}))


def _plain(value):
    """Mapping proxies back to dicts (the config freezes tables)."""
    if isinstance(value, Mapping):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    return value


def check_overrides(table: Any, role: str, where: str, kinds: tuple[str, ...]) -> list[str]:
    """Problems of a layer's ``osm`` table (empty when it is valid).

    Parameters
    ----------
    table : object
        The ``osm`` value of the layer's config table.
    role : str
        The layer's role; only ``power_lines`` and ``assets`` read OSM.
    where : str
        Prefix of messages (``run.toml: layers.power_lines``).
    kinds : tuple of str
        Asset kinds known to this run.
    """
    problems: list[str] = []
    w = f"{where}.osm"
    if role not in ("power_lines", "assets"):
        return [f"{w}: OSM extracts give power lines and assets only, not {role}"]
    if not isinstance(table, dict):
        return [f"{w}: expected a table overriding the tag preset"]
    merged = preset_for(role, table)
    if role == "power_lines":
        for key in table:
            if key not in POWER_KEYS:
                allowed = ", ".join(sorted(POWER_KEYS))
                problems.append(f"{w}.{key}: unknown key (allowed: {allowed})")
        problems += _check_select(merged.get("select"), f"{w}.select")
        problems += _check_select(merged.get("cable_select"), f"{w}.cable_select", empty=True)
        for key in ("voltage", "circuits", "cables", "frequency", "name", "arrangement"):
            if not isinstance(merged.get(key), str):
                problems.append(f"{w}.{key}: expected a tag name (a string)")
        if not isinstance(merged.get("join"), bool):
            problems.append(f"{w}.join: expected true or false")
        classes = merged.get("classes")
        if not isinstance(classes, list) or not classes:
            problems.append(f"{w}.classes: expected a list of voltage class tables")
            return problems
        for i, rule in enumerate(classes):
            cw = f"{w}.classes[{i}]"
            if not isinstance(rule, dict):
                problems.append(f"{cw}: expected a table")
                continue
            for key in rule:
                if key not in CLASS_KEYS:
                    problems.append(f"{cw}.{key}: unknown key")
            lo, hi = rule.get("min_kv"), rule.get("max_kv")
            if not (isinstance(lo, int | float) and not isinstance(lo, bool)
                    and isinstance(hi, int | float) and not isinstance(hi, bool)) \
                    or not lo < hi:
                problems.append(f"{cw}: min_kv and max_kv must be numbers [kV], min_kv < max_kv")
            for key in ("arrangements", "cables"):
                names = rule.get(key, [])
                if not isinstance(names, list) or not all(isinstance(n, str) for n in names):
                    problems.append(f"{cw}.{key}: expected a list of arrangement names, one per"
                                    " number of circuits (1, 2, ...)")
        return problems
    for kind, entry in table.items():
        kw = f"{w}.{kind}"
        if kind not in kinds:
            problems.append(f"{kw}: unknown asset kind (allowed: {', '.join(kinds)})")
            continue
        if not isinstance(entry, dict):
            problems.append(f"{kw}: expected a table")
            continue
        for key in entry:
            if key not in KIND_KEYS:
                problems.append(f"{kw}.{key}: unknown key (allowed: select, values)")
        spec = merged[kind]
        problems += _check_select(spec.get("select"), f"{kw}.select")
        values = spec.get("values", {})
        if not isinstance(values, dict):
            problems.append(f"{kw}.values: expected a table of field = {{ tag, map | scale }}")
            continue
        for fld, rule in values.items():
            vw = f"{kw}.values.{fld}"
            if not isinstance(rule, dict):
                problems.append(f"{vw}: expected a table {{ tag, map | scale }}")
                continue
            for key in rule:
                if key not in VALUE_KEYS:
                    problems.append(f"{vw}.{key}: unknown key (allowed: tag, map, scale)")
            if not isinstance(rule.get("tag"), str) or not rule.get("tag"):
                problems.append(f"{vw}.tag: expected a tag name")
            if ("map" in rule) == ("scale" in rule):
                problems.append(f"{vw}: give either 'map' or 'scale'")
            if "map" in rule and not isinstance(rule["map"], dict):
                problems.append(f"{vw}.map: expected a table tag value = field value")
            scale = rule.get("scale", 1.0)
            if isinstance(scale, bool) or not isinstance(scale, int | float) \
                    or not math.isfinite(scale) or scale <= 0:
                problems.append(f"{vw}.scale: expected a positive number")
    return problems


def _check_select(value, where: str, empty: bool = False) -> list[str]:
    if not isinstance(value, list) or not all(isinstance(v, str) and v.strip("= ")
                                              for v in value):
        return [f"{where}: expected a list of \"key=value\" or \"key\" strings"]
    if not value and not empty:
        return [f"{where}: at least one tag selection is required"]
    return []
