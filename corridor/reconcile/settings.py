"""The ``[readings]`` and ``[calibration]`` sections of a run configuration.

``[readings]`` names a table of measured AC voltages (test posts, data loggers)
and the settings of the reconciliation (docs/methods.md §17)::

    [readings]
    path = "../sample_layers/brackenford_readings.gpkg"   # any layer GDAL reads, or .csv
    layer = "readings"
    fields = { reading_id = "POST", voltage_v = "V_AC", measured_at = "TIME" }
    snap_tolerance_m = 25.0          # farthest a reading may lie from its asset
    anomaly_log_residual = 0.35      # |ln(measured/predicted)| after calibration
    calibration_path = "../out/demo_calibration.json"   # where `corridor calibrate` writes

``[calibration]`` makes a run use the factors a calibration wrote::

    [calibration]
    path = "../out/demo_calibration.json"

This module imports nothing from corridor but :mod:`corridor.settings`, so
:mod:`corridor.config` may call it.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

from corridor.settings import Spec

#: Canonical fields of a readings table (user attribute names map to these).
READING_FIELDS = (
    Spec("reading_id", "str", "", doc="Identifier of the reading (default: its row number)."),
    Spec("asset_id", "str", "", doc="Asset the reading was taken on (with chainage_m, or to"
         " pick the asset when a point lies near several)."),
    Spec("chainage_m", "float", float("nan"), low=0.0, unit="m",
         doc="Distance along the asset from its first vertex (instead of a point)."),
    Spec("x_m", "float", float("nan"), unit="m",
         doc="Easting in the run CRS (a CSV without geometry)."),
    Spec("y_m", "float", float("nan"), unit="m",
         doc="Northing in the run CRS (a CSV without geometry)."),
    Spec("measured_at", "str", "", doc="Time of the reading (ISO 8601)."),
    Spec("voltage_v", "float", None, low=0.0, unit="V",
         doc="Measured AC voltage of the asset to remote earth (RMS)."),
    Spec("ac_density_a_per_m2", "float", float("nan"), low=0.0, unit="A/m²",
         doc="Measured AC current density of a coupon, optional."),
    Spec("line_currents_a", "str", "",
         doc="Line currents at that time: 'LINE_ID=amps;LINE_ID=amps', optional."),
)

#: Settings of ``[readings]`` besides the layer keys.
READING_SETTINGS = {
    "snap_tolerance_m": Spec("snap_tolerance_m", "float", 25.0, low=0.0, high=10_000.0,
                             unit="m", doc="Farthest a reading may lie from its asset"
                             " (common practice: a test post stands beside the pipe)."),
    "ambiguity_margin_m": Spec("ambiguity_margin_m", "float", 5.0, low=0.0, high=1_000.0,
                               unit="m", doc="A second asset this much farther or less is"
                               " ambiguous, unless the reading names its asset."),
    "anomaly_log_residual": Spec("anomaly_log_residual", "float", 0.35, low=0.01, high=10.0,
                                 doc="|ln(measured/predicted)| after calibration beyond which"
                                 " a reading is an anomaly (0.35: a factor 1.4)."),
    "reading_sigma_log": Spec("reading_sigma_log", "float", 0.1, low=0.001, high=5.0,
                              doc="Scatter of one reading in ln units assumed when the"
                              " readings cannot estimate it (one reading per factor)."),
    "coating_factor_range": Spec("coating_factor_range", "float_list", (0.01, 100.0),
                                 doc="Bounds of the coating (leakage) resistance factor."),
    "soil_factor_range": Spec("soil_factor_range", "float_list", (0.1, 10.0),
                              doc="Bounds of the soil resistivity factor."),
    "calibration_path": Spec("calibration_path", "str", "calibration.json", unit="path",
                             doc="File `corridor calibrate` writes, relative to the config."),
}
LAYER_KEYS = {"path", "layer", "fields", "crs"}


def parse_readings(raw: Any, name: str, base: Path, problems: list[str]) -> dict | None:
    """The ``[readings]`` table checked: a plain dict, or None when absent.

    Every problem is appended to ``problems`` naming ``<config>: readings.<key>``.
    """
    if raw is None:
        return None
    where = f"{name}: readings"
    if not isinstance(raw, dict):
        problems.append(f"{where}: expected a table")
        return None
    out: dict[str, Any] = {}
    known = LAYER_KEYS | set(READING_SETTINGS)
    for key in raw:
        if key not in known:
            problems.append(f"{where}.{key}: unknown key (allowed: {', '.join(sorted(known))})")
    path = raw.get("path")
    if not isinstance(path, str) or not path or "\0" in path:
        problems.append(f"{where}.path: required, the file of the readings")
    else:
        full = (base / path).resolve()
        if not full.exists():
            problems.append(f"{where}.path: {full} not found")
        out["path"] = str(full)
    layer = raw.get("layer")
    if layer is not None and not isinstance(layer, str):
        problems.append(f"{where}.layer: expected str, got {layer!r}")
    out["layer"] = layer if isinstance(layer, str) else None
    crs = raw.get("crs")
    out["crs"] = crs if isinstance(crs, str | int) and not isinstance(crs, bool) else None
    fields = raw.get("fields", {})
    names = {s.name for s in READING_FIELDS}
    if not isinstance(fields, dict) or any(not isinstance(v, str) for v in fields.values()):
        problems.append(f"{where}.fields: expected a table of field = \"attribute\"")
        fields = {}
    for key in fields:
        if key not in names:
            problems.append(f"{where}.fields.{key}: unknown field (allowed:"
                            f" {', '.join(sorted(names))})")
    out["fields"] = dict(fields)
    for key, spec in READING_SETTINGS.items():
        value, problem = spec.validate(raw.get(key, spec.default))
        if problem is None and key.endswith("_range") and (
                len(value) != 2 or not value[0] < 1.0 < value[1]):
            problem = f"expected [low, high] with low < 1 < high, got {list(value)}"
        if problem:
            problems.append(f"{where}.{key}: {problem}")
        else:
            out[key] = list(value) if isinstance(value, tuple) else value
    if "calibration_path" in out:
        out["calibration_path"] = str((base / out["calibration_path"]).resolve())
    return out


def parse_calibration(raw: Any, name: str, base: Path, problems: list[str]) -> dict | None:
    """The ``[calibration]`` table with the factors read from its file, or None.

    Returns ``{"path": str, "factors": {asset_id: {"coating_factor", "soil_factor"}}}``;
    the factors enter the resolved config, so the cache keys and changes.csv see them.
    """
    if raw is None:
        return None
    where = f"{name}: calibration"
    if not isinstance(raw, dict) or set(raw) - {"path"}:
        problems.append(f"{where}: expected a table with one key, path")
        return None
    path = raw.get("path")
    if not isinstance(path, str) or not path or "\0" in path:
        problems.append(f"{where}.path: required, the file `corridor calibrate` wrote")
        return None
    full = (base / path).resolve()
    try:
        factors = read_factors(full)
    except ValueError as exc:
        problems.append(f"{where}.path: {exc}")
        return None
    return {"path": str(full), "factors": factors}


def read_factors(path: Path) -> dict[str, dict[str, float]]:
    """The fitted factors of a calibration file: asset_id -> coating and soil factor.

    Raises
    ------
    ValueError
        The file is missing, not a calibration, or holds a factor that is not a
        positive finite number (the message names the asset and the factor).
    """
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ValueError(f"{path}: not found (run `corridor calibrate` first)") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ValueError(f"{path}: not a readable calibration file ({exc})") from None
    assets = data.get("assets") if isinstance(data, dict) else None
    if not isinstance(assets, dict) or data.get("format") != CALIBRATION_FORMAT:
        raise ValueError(f"{path}: not a calibration file written by `corridor calibrate`")
    out: dict[str, dict[str, float]] = {}
    for aid, entry in assets.items():
        factors = {}
        for key in ("coating_factor", "soil_factor"):
            v = entry.get(key, 1.0) if isinstance(entry, dict) else None
            if isinstance(v, bool) or not isinstance(v, int | float) or not (
                    math.isfinite(v) and v > 0):
                raise ValueError(f"{path}: asset {aid}: {key}: expected a positive number,"
                                 f" got {v!r}")
            factors[key] = float(v)
        out[str(aid)] = factors
    return out


#: The ``format`` entry of a calibration file.
CALIBRATION_FORMAT = "corridor-calibration-1"


def calibration_cause(asset_id: str, before: dict, after: dict) -> str:
    """changes.csv's cause when a calibration changed an asset's factors ('' if not).

    ``before`` and ``after`` are the resolved configs of the previous and this run.
    """
    def factors(cfg: dict) -> tuple[dict, str]:
        cal = cfg.get("calibration") if isinstance(cfg, dict) else None
        if not isinstance(cal, dict):
            return {}, ""
        return (cal.get("factors", {}) or {}).get(asset_id, {}), str(cal.get("path", ""))

    old, _ = factors(before)
    new, path = factors(after)
    parts = []
    for key, what in (("coating_factor", "coating"), ("soil_factor", "soil")):
        a, b = float(old.get(key, 1.0)), float(new.get(key, 1.0))
        if a != b:
            parts.append(f"{what} x{a:.3g} -> x{b:.3g}")
    if not parts:
        return ""
    where = f" ({Path(path).name})" if path else " (calibration removed)"
    return f"calibration{where}: " + ", ".join(parts)
