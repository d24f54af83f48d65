"""Shared fixtures: tiny scenarios written into ``tmp_path``.

A scenario is one straight power line and one or more assets, written in a
chosen GDAL driver, plus a run config kept as a plain dict so that a test can
change one key at a time and write it out as TOML (:func:`toml_text`).

User field names are at most 10 characters so that the same layers survive
the ESRI Shapefile format, whose dBASE table truncates longer names.
"""

from __future__ import annotations

import copy
import logging
import math
import shutil
import warnings
from pathlib import Path

import geopandas as gpd
import pyogrio
import pytest
from shapely.geometry import LineString

REPO = Path(__file__).resolve().parents[1]
ARRANGEMENTS_TOML = REPO / "corridor" / "data" / "arrangements.toml"

#: File extension of each GDAL driver the readers are tested with.
DRIVER_EXT = {
    "GPKG": ".gpkg",
    "ESRI Shapefile": ".shp",
    "GeoJSON": ".geojson",
    "FlatGeobuf": ".fgb",
}

#: corridor field -> short user field name (<= 10 characters, Shapefile-safe).
LINE_FIELD_MAP = {"line_id": "LINE_ID", "voltage_kv": "KV", "arrangement": "TOWER"}
ASSET_FIELD_MAP = {"asset_id": "AID", "asset_kind": "KIND", "post_resistance_ohm": "POST_OHM"}

#: A projected CRS (UTM zone 33N, metres) and an origin inside it, near
#: lon 15.2 E, lat 47.1 N; the scenario is invented.
PROJECTED_CRS = "EPSG:32633"
X0_M, Y0_M = 515_000.0, 5_216_000.0
LINE_LENGTH_M = 4000.0


def first_arrangement_name() -> str:
    """Name of the first arrangement defined in the repo's arrangements file."""
    import tomllib

    with open(ARRANGEMENTS_TOML, "rb") as fh:
        return next(iter(tomllib.load(fh)["arrangements"]))


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            return {math.inf: "inf", -math.inf: "-inf"}.get(value, "nan")
        return repr(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(f"cannot write {value!r} as TOML")


def _is_array_of_tables(value) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(e, dict) for e in value)


def _is_table(value) -> bool:
    """A dict written as its own ``[table]``: one that holds a dict or an array of tables."""
    return isinstance(value, dict) and any(
        isinstance(v, dict) or _is_array_of_tables(v) for v in value.values())


def toml_text(cfg: dict) -> str:
    """Write a nested config dict as TOML.

    Top-level dicts become ``[section]`` tables; inside a table, a dict that
    itself holds dicts becomes ``[section.sub]``, a list of dicts becomes an
    array of tables (``[[layers.assets]]``) and any other dict (such as a
    layer's ``fields``) is written inline. Top-level scalars come first.
    """
    out: list[str] = [f"{k} = {_toml_value(v)}" for k, v in cfg.items()
                      if not isinstance(v, dict)]

    def body(prefix: str, table: dict, header: str) -> None:
        out.append(f"\n{header}")
        nested = []
        for k, v in table.items():
            if _is_table(v) or _is_array_of_tables(v):
                nested.append((k, v))
            else:
                out.append(f"{k} = {_toml_value(v)}")
        for k, v in nested:
            if isinstance(v, list):
                for entry in v:
                    body(f"{prefix}.{k}", entry, f"[[{prefix}.{k}]]")
            else:
                body(f"{prefix}.{k}", v, f"[{prefix}.{k}]")

    for key, value in cfg.items():
        if isinstance(value, dict):
            body(key, value, f"[{key}]")
    return "\n".join(out).lstrip("\n") + "\n"


class Scenario:
    """Builder of a tiny scenario in one folder.

    Parameters
    ----------
    root : Path
        Folder the layers, the config and the copied arrangements file go in.
    """

    def __init__(self, root: Path):
        self.root = root
        self.arrangements_path = root / "arrangements.toml"
        shutil.copyfile(ARRANGEMENTS_TOML, self.arrangements_path)
        self.arrangement = first_arrangement_name()

    # -- layers -----------------------------------------------------------
    def line_frame(self, crs: str | None = PROJECTED_CRS) -> gpd.GeoDataFrame:
        """One straight power line running east along y = Y0_M."""
        geom = LineString([(X0_M, Y0_M), (X0_M + LINE_LENGTH_M, Y0_M)])
        return gpd.GeoDataFrame({"LINE_ID": ["L1"], "KV": [220.0],
                                 "TOWER": [self.arrangement]}, geometry=[geom], crs=crs)

    def asset_frame(self, crs: str | None = PROJECTED_CRS) -> gpd.GeoDataFrame:
        """One fence parallel to the line, 100 m north of it, 3 km long."""
        geom = LineString([(X0_M + 500.0, Y0_M + 100.0), (X0_M + 3500.0, Y0_M + 100.0)])
        return gpd.GeoDataFrame({"AID": ["F1"], "KIND": ["fence"], "POST_OHM": [80.0]},
                                geometry=[geom], crs=crs)

    def write_layer(self, gdf: gpd.GeoDataFrame, name: str, driver: str = "GPKG") -> Path:
        """Write ``gdf`` to ``root/name<ext>`` (GeoPackage layer ``name``) with pyogrio."""
        path = self.root / f"{name}{DRIVER_EXT[driver]}"
        with warnings.catch_warnings():
            # a layer without a CRS is written on purpose by the no-CRS tests
            warnings.filterwarnings("ignore", "'crs' was not provided", UserWarning)
            # the Shapefile truncation tests write a long field name on purpose
            warnings.filterwarnings("ignore", "Normalized/laundered field name", RuntimeWarning)
            pyogrio.write_dataframe(gdf, path, layer=name if driver == "GPKG" else None,
                                    driver=driver)
        return path

    # -- config -----------------------------------------------------------
    def config(self, lines_path: Path, assets_path: Path, *, driver: str = "GPKG",
               kind: str | None = None) -> dict:
        """A minimal valid config dict for the given layer files."""
        def source(path: Path, name: str, fields: dict) -> dict:
            entry = {"path": path.name}
            if driver == "GPKG":
                entry["layer"] = name
            entry["fields"] = dict(fields)
            return entry

        assets = source(assets_path, "assets", ASSET_FIELD_MAP)
        if kind is not None:
            assets["kind"] = kind
            assets["fields"].pop("asset_kind")
        return {
            "run": {"output_dir": "out", "crs": "", "arrangements": "arrangements.toml"},
            "layers": {
                "power_lines": source(lines_path, "power_lines", LINE_FIELD_MAP),
                "assets": [assets],
            },
        }

    def build(self, driver: str = "GPKG", *, lines: gpd.GeoDataFrame | None = None,
              assets: gpd.GeoDataFrame | None = None, kind: str | None = None) -> dict:
        """Write the line and asset layers in ``driver`` and return a config dict."""
        lines = self.line_frame() if lines is None else lines
        assets = self.asset_frame() if assets is None else assets
        lp = self.write_layer(lines, "power_lines", driver)
        ap = self.write_layer(assets, "assets", driver)
        return self.config(lp, ap, driver=driver, kind=kind)

    def write_config(self, cfg: dict | str, name: str = "run.toml") -> Path:
        """Write a config dict (or raw TOML text) to ``root/name``."""
        path = self.root / name
        path.write_text(cfg if isinstance(cfg, str) else toml_text(cfg), encoding="utf-8")
        return path

    @staticmethod
    def mutate(cfg: dict) -> dict:
        """A deep copy of ``cfg`` to change one key in."""
        return copy.deepcopy(cfg)


@pytest.fixture
def scenario(tmp_path) -> Scenario:
    """A :class:`Scenario` builder rooted in the test's ``tmp_path``."""
    return Scenario(tmp_path)


@pytest.fixture
def cli(monkeypatch, tmp_path):
    """Run ``corridor.cli.main`` in-process, undoing its logging set-up afterwards.

    ``main`` attaches a console handler to the ``corridor`` logger on every
    call; left in place it would write to a closed capture stream in later
    tests. The working folder is ``tmp_path`` so a crash log cannot land in
    the repo.
    """
    from corridor.cli import main

    logger = logging.getLogger("corridor")
    handlers, level = list(logger.handlers), logger.level
    monkeypatch.chdir(tmp_path)
    yield main
    for h in list(logger.handlers):
        if h not in handlers:
            logger.removeHandler(h)
    logger.setLevel(level)
