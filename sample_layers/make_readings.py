"""Generate invented test-post readings for two assets of the Brackenford Vale demo.

The readings are made up: the screening model of the demo corridor is run with
invented "true" factors (the gas lateral MBL-12's coating resistance three
times its recorded value, the branch railway BVR-1's soil at half its mapped
resistivity), sampled at test posts and given a few per cent of seeded noise.
One reading of MBL-12, at the insulating joint IJ1, is taken from the same
model with the joint bridged (an anomaly the calibration must flag), one
reading lies far from every asset (listed as unplaced, never dropped), and
two carry the 345 kV line's current at the time of the reading.

Run ``python sample_layers/make_readings.py`` (with the repository on
PYTHONPATH): it rewrites ``sample_layers/brackenford_readings.gpkg``
(GDAL's timestamp pinned with ``OGR_CURRENT_DATE``).
"""

from __future__ import annotations

import copy
import os
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import shapely

ROOT = Path(__file__).resolve().parents[1]
OUT = Path(__file__).with_name("brackenford_readings.gpkg")
#: The invented truth the demo calibration should find.
TRUE_FACTORS = {"MBL-12": {"coating_factor": 3.0, "soil_factor": 1.0},
                "BVR-1": {"coating_factor": 1.0, "soil_factor": 0.5}}
#: Test posts: chainage along the asset [m].
POSTS_M = {"MBL-12": [600, 2400, 4800, 6600, 8400, 9800, 11400, 13200, 16200, 20400],
           "BVR-1": [1500, 4500, 7500, 10500, 13500, 16500, 19500, 22500]}
#: The reading at the insulating joint, generated with the joint bridged.
BRIDGED = ("MBL-12", 9800)
NOISE_LOG = 0.03


def build() -> gpd.GeoDataFrame:
    sys.path.insert(0, str(ROOT))
    from corridor.compute import compute
    from corridor.config import load_config
    from corridor.io.layers import read_inputs
    from corridor.reconcile.model import asset_voltages, model_stages

    cfg = load_config(ROOT / "config" / "demo.toml")
    inputs = read_inputs(cfg)
    segs = compute(cfg, inputs, model_stages()).segment_table
    ids = list(inputs.assets["asset_id"].astype(str))
    bridged = copy.copy(inputs)
    bridged.grounds = inputs.grounds[inputs.grounds["item"] != "insulating_joint"]
    rng = np.random.default_rng(20261202)
    rows = []
    for aid, posts in POSTS_M.items():
        i = ids.index(aid)
        v = asset_voltages(cfg, inputs, i, TRUE_FACTORS[aid])
        v_b = asset_voltages(cfg, bridged, i, TRUE_FACTORS[aid])
        mine = segs[segs["asset_id"] == aid].sort_values("segment_index")
        start = mine["chainage_m"].to_numpy(float)
        for n, ch in enumerate(posts):
            s = int(np.searchsorted(start, ch, side="right") - 1)
            volts = (v_b if (aid, ch) == BRIDGED else v)[s]
            currents = ""
            if aid == "MBL-12" and n in (3, 6):  # the utility's current at that instant
                assert mine["line_id"].iloc[s] == "VPC-345-A"  # the line governing there
                amps = 900.0 * (0.8 if n == 3 else 1.15)
                currents = f"VPC-345-A={amps:g}"
                volts *= amps / 900.0
            geom = mine.geometry.iloc[s]
            p = shapely.line_interpolate_point(geom, 0.5, normalized=True)
            rows.append({"POST": f"{aid}-TP{n + 1:02d}", "ASSET": aid if aid == "MBL-12" else "",
                         "TIME": f"2026-11-{3 + n:02d}T10:00:00Z",
                         "V_AC": round(float(volts * np.exp(rng.normal(0, NOISE_LOG))), 2),
                         "CURRENTS": currents,
                         "geometry": shapely.Point(p.x + 3.0, p.y + 3.0)})
    rows.append({"POST": "OLD-TP7", "ASSET": "", "TIME": "2026-11-20T10:00:00Z",
                 "V_AC": 4.2, "CURRENTS": "", "geometry": shapely.Point(540_000.0, 4_640_000.0)})
    return gpd.GeoDataFrame(rows, geometry="geometry", crs=inputs.crs)


def write(path: Path = OUT) -> Path:
    os.environ.setdefault("OGR_CURRENT_DATE", "2026-01-01T00:00:00Z")
    if path.exists():
        path.unlink()
    build().to_file(path, layer="readings", driver="GPKG", engine="pyogrio")
    return path


if __name__ == "__main__":
    print(write())
