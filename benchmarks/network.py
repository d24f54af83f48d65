"""Reproducible synthetic benchmark network at any scale, from a seed.

Power lines are grid-like corridors (gently wandering polylines running east
or north); assets run partly parallel to a line at a random offset, partly
crossing, and partly far away. Soil is a grid of polygons. Every number is
invented for benchmarking.

``python benchmarks/network.py --line-km 10000 --asset-km 100000 --out DIR``
writes ``network.gpkg`` and ``bench.toml`` into DIR.
"""

from __future__ import annotations

import argparse
import os
import shutil
from pathlib import Path

import geopandas as gpd
import numpy as np
import shapely
from shapely.ops import substring

CRS = "EPSG:32633"
KINDS = np.array(["pipeline", "fence", "rail", "telecom"])


def _wander(rng, start, heading, length_m, step_m, wiggle_m):
    n = max(2, int(length_m / step_m) + 1)
    t = np.arange(n) * step_m
    lateral = np.cumsum(rng.normal(0.0, wiggle_m, n))
    lateral -= np.linspace(lateral[0], lateral[-1], n)  # no drift
    hx, hy = np.cos(heading), np.sin(heading)
    x = start[0] + t * hx - lateral * hy
    y = start[1] + t * hy + lateral * hx
    return np.column_stack([x, y])


def build(line_km: float, asset_km: float, seed: int = 7):
    """Return (lines, assets, soil) GeoDataFrames."""
    rng = np.random.default_rng(seed)
    line_len = 100_000.0
    n_lines = max(1, int(round(line_km * 1000 / line_len)))
    side = max(200_000.0, np.sqrt(n_lines) * 40_000.0)
    x0 = 300_000.0
    y0 = 5_000_000.0
    geoms = []
    for i in range(n_lines):
        heading = 0.0 if i % 2 == 0 else np.pi / 2
        start = (x0 + rng.uniform(0, side - line_len), y0 + rng.uniform(0, side))
        if i % 2:
            start = (x0 + rng.uniform(0, side), y0 + rng.uniform(0, side - line_len))
        geoms.append(shapely.LineString(_wander(rng, start, heading, line_len, 350.0, 15.0)))
    lines = gpd.GeoDataFrame({
        "line_id": [f"L{i:05d}" for i in range(n_lines)],
        "voltage_kv": rng.choice([138.0, 230.0, 345.0], n_lines),
        "arrangement": rng.choice(["h_frame_138", "lattice_345_double"], n_lines),
        "load_current_a": rng.uniform(200, 900, n_lines).round(0),
        "residual_current_pct": rng.uniform(2, 8, n_lines).round(1),
        "fault_current_start_ka": rng.uniform(10, 40, n_lines).round(1),
        "fault_current_end_ka": rng.uniform(5, 30, n_lines).round(1),
        "clearing_time_s": rng.choice([0.1, 0.3, 0.5], n_lines),
    }, geometry=geoms, crs=CRS)

    target = asset_km * 1000.0
    a_geoms, total = [], 0.0
    while total < target:
        kind = rng.uniform()
        length = rng.uniform(3_000, 25_000)
        if kind < 0.4:  # parallel to a line at an offset
            base = geoms[rng.integers(n_lines)]
            a = rng.uniform(0, max(1.0, base.length - length))
            piece = substring(base, a, a + length)
            if piece.length <= 0:
                continue
            off = rng.choice([-1, 1]) * rng.uniform(15, 900)
            g = shapely.offset_curve(piece, off)
            if g.geom_type != "LineString" or g.length <= 0:
                continue
            g = shapely.segmentize(g, 200.0)
        else:  # crossing or far away
            start = (x0 + rng.uniform(0, side), y0 + rng.uniform(0, side))
            heading = rng.uniform(0, 2 * np.pi)
            g = shapely.LineString(_wander(rng, start, heading, length, 200.0, 10.0))
        a_geoms.append(g)
        total += g.length
    n_assets = len(a_geoms)
    kinds = KINDS[rng.integers(0, 4, n_assets)]
    assets = gpd.GeoDataFrame({
        "asset_id": [f"A{i:07d}" for i in range(n_assets)],
        "asset_kind": kinds,
    }, geometry=a_geoms, crs=CRS)

    cells = []
    rho = []
    step = 50_000.0
    for ix in range(int(np.ceil(side / step))):
        for iy in range(int(np.ceil(side / step))):
            cells.append(shapely.box(x0 + ix * step, y0 + iy * step, x0 + (ix + 1) * step,
                                     y0 + (iy + 1) * step))
            rho.append(float(rng.choice([30.0, 100.0, 300.0, 1000.0, 3000.0])))
    soil = gpd.GeoDataFrame({"soil_resistivity_ohm_m": rho}, geometry=cells, crs=CRS)
    return lines, assets, soil


CONFIG = """# Synthetic benchmark network (invented data).
[run]
output_dir = "out"
frequency_hz = 50.0
screening_distance_m = 1000.0
segment_length_m = 50.0
limit_set = "iec_en"
arrangements = "arrangements.toml"

[layers.power_lines]
path = "network.gpkg"
layer = "power_lines"

[[layers.assets]]
path = "network.gpkg"
layer = "assets"

[layers.soil]
path = "network.gpkg"
layer = "soil"
"""


def write(out_dir: Path, line_km: float, asset_km: float, seed: int = 7) -> Path:
    """Write the network and a run config into ``out_dir``; return the config path."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    lines, assets, soil = build(line_km, asset_km, seed)
    gpkg = out_dir / "network.gpkg"
    if gpkg.exists():
        gpkg.unlink()
    os.environ.setdefault("OGR_CURRENT_DATE", "2026-01-01T00:00:00.000Z")
    for name, frame in (("power_lines", lines), ("assets", assets), ("soil", soil)):
        frame.to_file(gpkg, layer=name, driver="GPKG", engine="pyogrio", use_arrow=True)
    shutil.copy(Path(__file__).resolve().parents[1] / "corridor" / "data" / "arrangements.toml",
                out_dir / "arrangements.toml")
    cfg = out_dir / "bench.toml"
    cfg.write_text(CONFIG, encoding="utf-8")
    return cfg


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--line-km", type=float, default=10_000.0)
    ap.add_argument("--asset-km", type=float, default=100_000.0)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--out", type=Path, default=Path("benchmarks/_work/network"))
    a = ap.parse_args()
    print(write(a.out, a.line_km, a.asset_km, a.seed))
