"""Writing a run config for an OpenStreetMap extract (``python -m corridor.io.osm``).

:func:`write_config` writes the config and a copy of the typical arrangements
beside it; :func:`main` is the command line, run as ``python -m corridor.io.osm``
(both are importable from :mod:`corridor.io.osm`).
"""

from __future__ import annotations

import sys
from pathlib import Path

from corridor.io.osm_preset import ARRANGEMENTS_PATH

__all__ = ["CONFIG_TEMPLATE", "main", "write_config"]

CONFIG_TEMPLATE = """\
# corridor run configuration for the OpenStreetMap extract {extract}
# (written by `python -m corridor.io.osm`). Power lines and assets are read with the
# built-in tag preset (corridor/data/osm_preset.toml); override any part of it in a
# layer's osm table. Each line takes a typical arrangement of its voltage class from
# {arrangements} (a copy of corridor's typical set: edit it to match the real towers).
# Screening estimates for planning, not a substitute for a study by a licensed engineer
# under local codes and the asset owner's procedures; treat metal near energised lines
# as possibly energised.

[run]
output_dir = "{output_dir}"
frequency_hz = {frequency_hz}
limit_set = "{limit_set}"
arrangements = "{arrangements}"

[line_defaults]
# OSM carries no currents: these apply to every line (and are listed in run.json).
load_current_a = 400.0
fault_current_start_ka = 10.0
fault_current_end_ka = 10.0
clearing_time_s = 0.5

[layers.power_lines]
path = "{extract}"

[[layers.assets]]
path = "{extract}"
"""


def write_config(extract: Path, config: Path, frequency_hz: float = 50.0,
                 limit_set: str = "iec_en") -> Path:
    """Write a run config (and a copy of the typical arrangements) for an OSM extract.

    Parameters
    ----------
    extract : Path
        The ``.osm`` / ``.osm.pbf`` file.
    config : Path
        The config file to write; the arrangements copy is written beside it.
    frequency_hz : float
        The system frequency [Hz].
    limit_set : str
        Name of the limit set.

    Returns
    -------
    Path
        The config file.
    """
    config = Path(config)
    arr = config.with_name(config.stem + "_arrangements.toml")
    extract_rel = _relative(Path(extract).resolve(), config.resolve().parent)
    arr.write_text(ARRANGEMENTS_PATH.read_text(encoding="utf-8"), encoding="utf-8")
    config.write_text(CONFIG_TEMPLATE.format(
        extract=extract_rel, output_dir=config.stem + "_out", frequency_hz=float(frequency_hz),
        limit_set=limit_set, arrangements=arr.name), encoding="utf-8")
    return config


def _relative(path: Path, base: Path) -> str:
    import os

    try:
        return Path(os.path.relpath(path, base)).as_posix()
    except ValueError:  # another drive on Windows
        return path.as_posix()


def main(argv: list[str] | None = None) -> int:
    """``python -m corridor.io.osm EXTRACT CONFIG [--frequency HZ] [--limit-set NAME]``."""
    import argparse

    ap = argparse.ArgumentParser(prog="python -m corridor.io.osm",
                                 description="write a corridor run config for an OSM extract")
    ap.add_argument("extract", type=Path, help=".osm or .osm.pbf file")
    ap.add_argument("config", type=Path, help="config file to write (TOML)")
    ap.add_argument("--frequency", type=float, default=50.0, help="system frequency [Hz]")
    ap.add_argument("--limit-set", default="iec_en", help="limit set name (default iec_en)")
    args = ap.parse_args(argv)
    if not args.extract.is_file():
        print(f"error: {args.extract}: file not found", file=sys.stderr)
        return 2
    path = write_config(args.extract, args.config, args.frequency, args.limit_set)
    print(f"wrote {path}; now run: python -m corridor run {path}")
    return 0
