"""Generate the demo layers of the invented Brackenford Vale corridor.

Brackenford Vale is a fictional farming valley. Two transmission lines of the
fictional Vale Power Cooperative share it with a gas lateral, a branch
railway, two farm fences and a buried telecom cable. Every name and number
here is invented for the demo; attribute values are typical of the trade.

Run ``python sample_layers/make_demo.py``: it rewrites
``sample_layers/brackenford_vale.gpkg`` byte for byte the same each time
(GDAL's timestamp is pinned with ``OGR_CURRENT_DATE``).
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
from shapely.geometry import LineString, Point, Polygon

CRS = "EPSG:32615"  # UTM zone 15N, metres; a false origin keeps the scenario abstract
X0, Y0 = 520_000.0, 4_610_000.0
OUT = Path(__file__).with_name("brackenford_vale.gpkg")


def xy(points):
    return [(X0 + x, Y0 + y) for x, y in points]


def line(points):
    return LineString(xy(points))


def build() -> dict[str, gpd.GeoDataFrame]:
    lines = gpd.GeoDataFrame(
        {
            "LINE_ID": ["VPC-345-A", "VPC-138-B"],
            "NAME": ["Ashcombe - Thornvale 345 kV", "Brackenford - Millbrook 138 kV"],
            "KV": [345.0, 138.0],
            "TOWER_TYPE": ["lattice_345_double", "h_frame_138"],
            "LOAD_A": [900.0, 600.0],        # per circuit, a heavy summer load
            "UNBAL_PCT": [3.0, 6.0],
            "IF_START_KA": [16.0, 8.0],      # single line-to-earth fault at each end
            "IF_END_KA": [11.0, 5.5],
            "T_CLEAR_S": [0.1, 0.5],         # EHV primary vs. 138 kV backup-class clearing
            "HI_REL": [1, 0],
        },
        geometry=[
            line([(-6000, 0), (20000, 0), (26000, 3500)]),
            line([(-4000, 3000), (15000, 3000), (15000, 9000)]),
        ],
        crs=CRS,
    )
    assets = {}
    assets["pipelines"] = gpd.GeoDataFrame(
        {
            "PIPE_ID": ["MBL-12"],
            "NAME": ["Millbrook gas lateral"],
            "OD_M": [0.3239],                # 12 in line pipe
            "WT_M": [0.0095],
            "COAT_OHM_M2": [2.0e4],          # ageing FBE
            "COATING": ["fbe"],
            "CP": [1],
            "DEPTH_M": [1.2],
        },
        geometry=[line([(-5000, -1800), (0, -70), (9000, -70), (11000, 600),
                        (12500, 4200), (12500, 8000)])],
        crs=CRS,
    )
    assets["rails"] = gpd.GeoDataFrame(
        {"TRACK_ID": ["BVR-1"], "NAME": ["Brackenford Vale branch railway"],
         "BALLAST_OHM_KM": [8.0]},
        geometry=[line([(-3000, 3400), (12000, 3130), (16000, 5000), (17000, 9500)])],
        crs=CRS,
    )
    assets["fences"] = gpd.GeoDataFrame(
        {
            "FENCE_ID": ["FN-HOLLOW-1", "FN-RIDGE-2", "FN-MILL-3"],
            "FARM": ["Hollow Lane farm", "Ridgeback farm", "Mill End farm"],
            "POSTS": ["metal", "wood", "wood"],
            "POST_SPACING_M": [4.0, 3.0, 3.0],
            "POST_OHM": [150.0, 5000.0, 5000.0],  # wood: only its grounded posts leak
            "WIRES": [4, 3, 5],
            "HEIGHT_M": [1.0, 1.2, 1.0],
            # Mill End's fence is bonded to the farmyard earth at its west end
            "END_A": ["open", "open", "grounded"],
            "END_B": ["open", "open", "open"],
            "END_OHM": [50.0, 50.0, 20.0],
        },
        geometry=[
            line([(13000, 25), (15000, 25), (18500, 25)]),
            line([(2000, 3015), (4400, 3015)]),
            line([(5600, 2700), (6000, 2988), (9800, 2988)]),
        ],
        crs=CRS,
    )
    assets["telecom"] = gpd.GeoDataFrame(
        {"CABLE_ID": ["TC-VALE-3"], "NAME": ["Vale exchange feeder"], "SCREEN": [0.85],
         "GROUNDING": ["both_ends"]},
        geometry=[line([(1000, -1500), (3000, -320), (11000, -320), (13000, -1500)])],
        crs=CRS,
    )
    soil = gpd.GeoDataFrame(
        {"ZONE": ["river terrace", "clay vale", "granite ridge"],
         "RHO_OHM_M": [60.0, 150.0, 1200.0]},
        geometry=[
            Polygon(xy([(-8000, -4000), (4000, -4000), (4000, 10000), (-8000, 10000)])),
            Polygon(xy([(4000, -4000), (14000, -4000), (14000, 10000), (4000, 10000)])),
            Polygon(xy([(14000, -4000), (28000, -4000), (28000, 10000), (14000, 10000)])),
        ],
        crs=CRS,
    )
    grounds = gpd.GeoDataFrame(
        {
            "ITEM_ID": ["G1", "G2", "IJ1", "GAP1", "G3"],
            "ASSET": ["MBL-12", "MBL-12", "MBL-12", "FN-RIDGE-2", "BVR-1"],
            "ITEM": ["ground", "ground", "insulating_joint", "gap", "ground"],
            "R_OHM": [5.0, 8.0, np.nan, np.nan, 0.5],
        },
        geometry=[Point(xy([(-5000, -1800)])[0]), Point(xy([(12500, 8000)])[0]),
                  Point(xy([(4500, -70)])[0]), Point(xy([(3200, 3015)])[0]),
                  Point(xy([(12000, 3130)])[0])],
        crs=CRS,
    )
    return {"power_lines": lines, **assets, "soil": soil, "grounds": grounds}


def write(path: Path = OUT) -> Path:
    """Write every demo layer into one GeoPackage, reproducibly."""
    os.environ["OGR_CURRENT_DATE"] = "2026-01-01T00:00:00.000Z"
    path = Path(path)
    if path.exists():
        path.unlink()
    for name, frame in build().items():
        frame.to_file(path, layer=name, driver="GPKG", engine="pyogrio")
    return path


if __name__ == "__main__":
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else OUT
    print(write(target))
