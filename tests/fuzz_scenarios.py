"""Malformed scenarios for whole-run fuzzing, shared by the test suite and the long fuzz run.

:func:`make_case` draws one small scenario from a :class:`random.Random`: a few
power lines and assets whose attributes are sometimes NULL, mistyped ("220 kV"),
out of range, NaN, huge or formula-like, whose ids are sometimes missing,
duplicated or numeric, whose geometries are sometimes empty, degenerate or far
outside any sane extent, plus an optional ground-items layer naming known,
unknown and numeric asset ids. :func:`check_outcome` states what a run must
do with any of them: end with a documented exit code (never the internal-error
code 3) and, when it publishes, account for every input feature, either in
the outputs or in ``rejected.csv``.

The scenario is invented; the values are chosen to break parsers, not to
describe a real network.
"""

from __future__ import annotations

import csv
import json
import random
import warnings
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import pyogrio
from shapely.geometry import LineString, MultiLineString, Point

try:  # imported as ``tests.fuzz_scenarios`` by pytest, plainly by benchmarks/fuzz_long.py
    from tests.conftest import PROJECTED_CRS, X0_M, Y0_M, Scenario, toml_text
except ImportError:  # pragma: no cover - the long fuzz run adds tests/ to sys.path
    from conftest import PROJECTED_CRS, X0_M, Y0_M, Scenario, toml_text  # type: ignore

#: Exit codes a run may end with on any input (README, "Exit codes"): 0 done,
#: 1 exceedance with --fail-on-exceedance, 2 bad config or input, 5 a power line
#: was rejected. 3 (internal error) and 4 (locked) are failures of the fuzzer.
ALLOWED_EXIT_CODES = (0, 1, 2, 5)

ODD_TEXT = ["220 kV", "", " ", "=1+2", "+SUM(A1)", "-5", "@x", "NaN", "1e400", "ten",
            "\u00e9\u00e8", "10,5", "0x1F", "None"]
ODD_NUMBERS = [float("nan"), float("inf"), -float("inf"), -1.0, 0.0, 1e9, -1e9, 1e300,
               4e5, 1e-12]
KINDS = ["pipeline", "fence", "rail", "telecom"]


@dataclass
class Case:
    """One drawn scenario: its config file and what went in."""

    config_path: Path
    out_dir: Path
    line_features: int
    asset_features: int
    ground_features: int


def _value(rng: random.Random, good, odd_p: float = 0.25):
    """``good`` most of the time, otherwise NULL, an odd number or an odd string."""
    if rng.random() > odd_p:
        return good
    pick = rng.random()
    if pick < 0.3:
        return None
    if pick < 0.65:
        return rng.choice(ODD_NUMBERS)
    return rng.choice(ODD_TEXT)


def _geometry(rng: random.Random, y_offset_m: float, x0_m: float, length_m: float):
    """A line parallel to the x axis, or now and then an odd geometry."""
    pick = rng.random()
    a = (X0_M + x0_m, Y0_M + y_offset_m)
    b = (X0_M + x0_m + length_m, Y0_M + y_offset_m + rng.uniform(-50, 50))
    if pick < 0.80:
        return LineString([a, b])
    if pick < 0.84:
        return LineString()
    if pick < 0.88:
        return LineString([a, a])
    if pick < 0.92:
        return LineString([(a[0] * 1e4, a[1] * 1e4), (b[0] * 1e4, b[1] * 1e4)])
    if pick < 0.96:
        return MultiLineString([[a, b], [(b[0] + 10, b[1]), (b[0] + 500, b[1] + 20)]])
    return Point(a)


def _column(values: list) -> list:
    """A column GDAL can write: all text as soon as one value is text."""
    if any(isinstance(v, str) for v in values):
        return [None if v is None else str(v) for v in values]
    return values


def _write(gdf: gpd.GeoDataFrame, path: Path, layer: str) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pyogrio.write_dataframe(gdf, path, layer=layer, driver="GPKG")


def make_case(root: Path, rng: random.Random) -> Case:
    """Write one malformed scenario into ``root`` and return its config."""
    sc = Scenario(root)
    n_lines = rng.randint(1, 3)
    n_assets = rng.randint(1, 4)
    ids_l = [_value(rng, f"L{i}", 0.15) for i in range(n_lines)]
    lines = gpd.GeoDataFrame({
        "LINE_ID": _column(ids_l),
        "KV": _column([_value(rng, rng.choice([69.0, 138.0, 220.0, 400.0]))
                       for _ in range(n_lines)]),
        "TOWER": _column([_value(rng, sc.arrangement, 0.1) for _ in range(n_lines)]),
        "LOAD_A": _column([_value(rng, rng.uniform(50, 1500)) for _ in range(n_lines)]),
        "IF_KA": _column([_value(rng, rng.uniform(1, 40)) for _ in range(n_lines)]),
    }, geometry=[_geometry(rng, 300.0 * i, 0.0, rng.uniform(500, 4000))
                 for i in range(n_lines)], crs=PROJECTED_CRS)
    ids_a = [_value(rng, f"A{i}", 0.15) for i in range(n_assets)]
    if rng.random() < 0.3:  # numeric asset ids, as some utility tables have
        ids_a = [None if v is None else (i + 1 if not isinstance(v, float) else v)
                 for i, v in enumerate(ids_a)]
    assets = gpd.GeoDataFrame({
        "AID": _column(ids_a),
        "KIND": _column([_value(rng, rng.choice(KINDS), 0.1) for _ in range(n_assets)]),
        "POST_OHM": _column([_value(rng, rng.uniform(5, 500)) for _ in range(n_assets)]),
        "HEIGHT": _column([_value(rng, rng.uniform(-2, 2), 0.15) for _ in range(n_assets)]),
    }, geometry=[_geometry(rng, rng.uniform(-400, 900), rng.uniform(-200, 800),
                           rng.uniform(100, 3000)) for _ in range(n_assets)],
        crs=PROJECTED_CRS)
    path = root / "layers.gpkg"
    _write(lines, path, "power_lines")
    _write(assets, path, "assets")
    cfg = sc.config(path, path)
    cfg["layers"]["power_lines"]["fields"].update(
        {"load_current_a": "LOAD_A", "fault_current_start_ka": "IF_KA"})
    cfg["layers"]["assets"][0]["fields"].update({"height_m": "HEIGHT"})
    n_grounds = 0
    if rng.random() < 0.5:
        n_grounds = rng.randint(1, 4)
        known = [v for v in ids_a if v is not None]
        refs = [rng.choice(known + ["NO-SUCH", 7, None]) if known else "NO-SUCH"
                for _ in range(n_grounds)]
        grounds = gpd.GeoDataFrame({
            "GID": [f"G{i}" for i in range(n_grounds)],
            "AID": _column(refs),
            "ITEM": _column([_value(rng, rng.choice(["ground", "insulating_joint", "gap"]),
                                    0.15) for _ in range(n_grounds)]),
            "OHM": _column([_value(rng, rng.uniform(0.5, 50)) for _ in range(n_grounds)]),
        }, geometry=[Point(X0_M + rng.uniform(0, 3000), Y0_M + rng.uniform(-400, 900))
                     for _ in range(n_grounds)], crs=PROJECTED_CRS)
        _write(grounds, path, "grounds")
        cfg["layers"]["grounds"] = {
            "path": path.name, "layer": "grounds",
            "fields": {"ground_id": "GID", "asset_id": "AID", "item": "ITEM",
                       "resistance_ohm": "OHM"}}
    cfg["run"]["cache_dir"] = rng.choice(["", "auto"])
    config_path = sc.write_config(toml_text(cfg))
    return Case(config_path, root / "out", n_lines, len(assets), n_grounds)


def read_csv_rows(path: Path) -> list[dict]:
    """Rows of one of corridor's CSV files, whichever way it carries its caution line."""
    with open(path, encoding="utf-8", newline="") as fh:
        text = fh.read().splitlines()
    body = [line for line in text if not line.startswith("# ")]
    return list(csv.DictReader(body))


def _distinct_rejected(rows: list[dict], role: str) -> int:
    """Distinct features of one role in rejected.csv (by its role column, else by layer name)."""
    def of_role(r: dict) -> bool:
        if r.get("role"):
            return r["role"] == role
        return str(r.get("layer", "")).rsplit(":", 1)[-1] == role

    return len({(r.get("layer"), r.get("feature_id")) for r in rows if of_role(r)})


def check_outcome(case: Case, exit_code: int) -> list[str]:
    """What went wrong with one run of ``case`` that ended with ``exit_code`` ([] if nothing)."""
    problems: list[str] = []
    if exit_code not in ALLOWED_EXIT_CODES:
        return [f"exit code {exit_code} (internal error or lock) on {case.config_path}"]
    if exit_code == 2:
        return problems  # refused: nothing published, every problem printed
    run_json = case.out_dir / "run.json"
    if not run_json.exists():
        return [f"exit {exit_code} but no run.json in {case.out_dir}"]
    record = json.loads(run_json.read_text(encoding="utf-8"))
    counts = record.get("counts", {})
    rejected = read_csv_rows(case.out_dir / "rejected.csv")
    lines_rejected = _distinct_rejected(rejected, "power_lines")
    assets_rejected = _distinct_rejected(rejected, "assets")
    if int(counts.get("power_lines", -1)) + lines_rejected != case.line_features:
        problems.append(f"power lines: {case.line_features} in, {counts.get('power_lines')}"
                        f" used + {lines_rejected} rejected")
    assets_out = len(pyogrio.read_dataframe(case.out_dir / "screening.gpkg", layer="assets",
                                            read_geometry=False))
    if assets_out + assets_rejected != case.asset_features:
        problems.append(f"assets: {case.asset_features} in, {assets_out} in the assets layer"
                        f" + {assets_rejected} rejected")
    if lines_rejected and exit_code != 5:
        problems.append(f"{lines_rejected} power line(s) rejected but exit code {exit_code}")
    if exit_code == 5 and not lines_rejected:
        problems.append("exit code 5 without a rejected power line")
    return problems
