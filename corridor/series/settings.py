"""The ``[load_series]`` section of a run config: where the load time series is, how to average.

Keys (all but ``path`` optional)::

    [load_series]
    path = "loads.csv"          # CSV or Parquet, relative to the config file
    period_h = 24.0             # ISO 18086 representative period for the AC density mean [h]
    averaging = "rolling"       # "rolling" (every window of period_h) or "fixed" (back to back)
    block_steps = 2048          # time steps per block of the streamed evaluation
    curve_assets = 5            # assets whose peak-voltage duration curve the report draws
    screen_below = 0.5          # segments bounded below this fraction of every limit are not
                                # stepped (hours 0, peak an upper bound); 0 steps every segment

The file's SHA-256 is part of the resolved config, so the cache recomputes the
assets when the series changes (docs/methods.md §15).
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = ["SeriesSettings", "parse_load_series", "SERIES_KEYS"]

#: Keys of the ``[load_series]`` section.
SERIES_KEYS = ("path", "period_h", "averaging", "block_steps", "curve_assets", "screen_below")
_FORMATS = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}


@dataclass(frozen=True)
class SeriesSettings:
    """Validated ``[load_series]`` settings.

    Attributes
    ----------
    path : Path
        The series file (absolute).
    file_format : str
        ``"csv"`` or ``"parquet"``.
    period_h : float
        Representative period of the ISO 18086 mean [h].
    averaging : str
        ``"rolling"`` or ``"fixed"``.
    block_steps : int
        Time steps evaluated together (memory is segments of one asset × block).
    curve_assets : int
        Number of worst assets whose duration curve is kept for the report.
    screen_below : float
        Fraction of a segment's thresholds below which its voltage bound over
        the series lets it skip the step-by-step evaluation (0: none skip).
    sha256 : str
        Hash of the file's bytes.
    """

    path: Path
    file_format: str
    period_h: float = 24.0
    averaging: str = "rolling"
    block_steps: int = 2048
    curve_assets: int = 5
    sha256: str = ""
    screen_below: float = 0.5

    def as_dict(self) -> dict[str, Any]:
        """The settings for the resolved config (run.json, cache key)."""
        return {"path": str(self.path), "period_h": self.period_h, "averaging": self.averaging,
                "block_steps": self.block_steps, "curve_assets": self.curve_assets,
                "screen_below": self.screen_below, "sha256": self.sha256}


def _number(raw, key, where, problems, *, integer=False, low=0.0):
    value = raw[key]
    ok = isinstance(value, int | float) and not isinstance(value, bool)
    if ok and integer and not isinstance(value, int):
        ok = False
    if not ok or not value > low or value != value:
        kind = "an integer" if integer else "a number"
        problems.append(f"{where}.{key}: expected {kind} > {low:g}, got {value!r}")
        return None
    return value


def parse_load_series(raw: Any, where: str, base: Path,
                      problems: list[str]) -> SeriesSettings | None:
    """Validate the ``[load_series]`` table; None when the config has none.

    Parameters
    ----------
    raw : object
        The table as read from TOML (None when absent).
    where : str
        Prefix for messages (the config file's name).
    base : Path
        Folder that relative paths start from (the config file's folder).
    problems : list of str
        Each problem found is appended, naming the file and key.
    """
    if raw is None:
        return None
    where = f"{where}: load_series"
    if not isinstance(raw, dict):
        problems.append(f"{where}: expected a table, got {type(raw).__name__}")
        return None
    for key in raw:
        if key not in SERIES_KEYS:
            problems.append(f"{where}.{key}: unknown key (allowed: {', '.join(SERIES_KEYS)})")
    n_before = len(problems)
    path_raw = raw.get("path")
    if not isinstance(path_raw, str) or not path_raw.strip():
        problems.append(f"{where}.path: required, the CSV or Parquet file of the load series")
        return None
    path = (base / path_raw).resolve()
    fmt = _FORMATS.get(path.suffix.lower())
    if fmt is None:
        problems.append(f"{where}.path: {path_raw}: expected a .csv or .parquet file")
    elif not path.is_file():
        problems.append(f"{where}.path: {path}: file not found")
    values: dict[str, Any] = {}
    for key, integer, default in (("period_h", False, 24.0), ("block_steps", True, 2048),
                                  ("curve_assets", True, 5)):
        if key in raw:
            got = _number(raw, key, where, problems, integer=integer)
            values[key] = got if got is not None else default
        else:
            values[key] = default
    screen = raw.get("screen_below", 0.5)
    if (not isinstance(screen, int | float) or isinstance(screen, bool) or not 0 <= screen < 1):
        problems.append(f"{where}.screen_below: expected a number from 0 up to (not"
                        f" including) 1, got {screen!r}")
    averaging = raw.get("averaging", "rolling")
    if averaging not in ("rolling", "fixed"):
        problems.append(f"{where}.averaging: expected 'rolling' or 'fixed', got {averaging!r}")
    if len(problems) > n_before or fmt is None:
        return None
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    return SeriesSettings(path, fmt, float(values["period_h"]), str(averaging),
                          int(values["block_steps"]), int(values["curve_assets"]), digest,
                          float(screen))
