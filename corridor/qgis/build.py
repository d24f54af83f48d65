"""Build the installable QGIS plugin zip (``corridor qgis-plugin --zip out.zip``)."""

from __future__ import annotations

import json
import sys
import zipfile
from pathlib import Path

from corridor.qgis.adapter import algorithm_specs

#: Folder of the plugin inside the zip (its id in QGIS).
PLUGIN_ID = "corridor_qgis"
PLUGIN_DIR = Path(__file__).resolve().parent / "plugin"
#: Files of the plugin copied as they are.
PLUGIN_FILES = ("__init__.py", "provider.py", "algorithm.py", "icon.svg")

_DESCRIPTION = ("Screens the voltages high-voltage AC power lines induce on nearby fences,"
                " rails, pipelines and telecom cables (Processing provider).")
_ABOUT = ("Processing algorithms for corridor, a batch screener of AC interference in"
          " power-line corridors: one algorithm per step of corridor's step catalog, and"
          " 'Screen corridor' for the whole run. The screening runs in corridor's own Python"
          " ({python}); set CORRIDOR_PYTHON to use another. Screening estimates for planning,"
          " not a substitute for a study by a licensed engineer under local codes and the"
          " asset owner's procedures; treat metal near energised lines as possibly energised.")
METADATA = "\n".join([
    "[general]",
    "name=corridor",
    "qgisMinimumVersion=3.22",
    "description=" + _DESCRIPTION,
    "about=" + _ABOUT,
    "version={version}",
    "author=corridor contributors",
    "email=corridor@example.invalid",
    "hasProcessingProvider=yes",
    "experimental=True",
    "icon=icon.svg",
    "tags=processing,power lines,induction,pipelines,railways,screening",
    "",
])


def build_zip(target: str | Path, python: str | None = None,
              pythonpath: str | None = None) -> Path:
    """Write the plugin zip.

    Parameters
    ----------
    target : str or Path
        The zip file to write.
    python : str, optional
        The Python the plugin runs corridor with (default: this one).
    pythonpath : str, optional
        A folder the engine puts on its path (default: the folder holding this
        ``corridor`` package when it is not installed under site-packages, so
        that a source checkout works; else none).

    Returns
    -------
    Path
        The zip written.
    """
    from corridor import __version__

    target = Path(target)
    python = python or sys.executable
    if pythonpath is None:
        root = Path(__file__).resolve().parents[2]
        pythonpath = "" if "site-packages" in root.parts else str(root)
    engine = {"python": python, "pythonpath": pythonpath, "corridor_version": __version__}
    target.parent.mkdir(parents=True, exist_ok=True)
    with zipfile.ZipFile(target, "w", zipfile.ZIP_DEFLATED) as z:
        for name in PLUGIN_FILES:
            z.write(PLUGIN_DIR / name, f"{PLUGIN_ID}/{name}")
        z.writestr(f"{PLUGIN_ID}/metadata.txt", METADATA.format(version=__version__,
                                                                python=python))
        z.writestr(f"{PLUGIN_ID}/algorithms.json", json.dumps(algorithm_specs(), indent=1))
        z.writestr(f"{PLUGIN_ID}/engine.json", json.dumps(engine, indent=1))
    return target


def main(argv: list[str] | None = None) -> int:
    """``corridor qgis-plugin --zip OUT.zip [--python PATH]``."""
    import argparse

    ap = argparse.ArgumentParser(prog="corridor qgis-plugin",
                                 description="build the QGIS Processing plugin zip")
    ap.add_argument("--zip", required=True, type=Path, help="zip file to write")
    ap.add_argument("--python", default=None,
                    help="Python that runs corridor for the plugin (default: this one)")
    args = ap.parse_args(argv)
    path = build_zip(args.zip, args.python)
    print(f"wrote {path}; install it in QGIS: Plugins > Manage and Install Plugins >"
          " Install from ZIP")
    return 0


if __name__ == "__main__":
    sys.exit(main())
