"""Benchmark: what a GeoPackage layer write costs, by column count and spatial index.

``python benchmarks/bench_gpkg_write.py --rows 2473662``

Writes ``--rows`` two-point lines with 0, 14, 28 and 56 float columns through
pyogrio's Arrow path (as :func:`corridor.io.outputs.write_layer` does), with
and without GDAL's spatial index, and prints the time of each write (median
of ``--repeat``). The lines are placed at random in a 100 km square (the
worst case for the R-tree); ``--ordered`` places them end to end along rows,
as asset segments come. ``--sqlite-pragmas`` writes with SQLite's
``synchronous=OFF`` and a 1 GB page cache (GDAL's ``OGR_SQLITE_SYNCHRONOUS`` and
``OGR_SQLITE_CACHE``); ``--parquet`` also times the same frame written as
GeoParquet (geopandas + pyarrow). Invented data; the files go to a temporary
folder.
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio
import shapely


def lines(n: int, ordered: bool, rng) -> np.ndarray:
    if ordered:
        x0 = (np.arange(n) % 2000) * 50.0
        y0 = (np.arange(n) // 2000) * 100.0
        xy = np.stack([np.c_[x0, y0], np.c_[x0 + 50.0, y0]], axis=1)
    else:
        xy = rng.random((n, 2, 2)) * 100_000.0
    return shapely.linestrings(xy)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=2_473_662)
    ap.add_argument("--columns", type=int, nargs="+", default=[0, 14, 28, 56])
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--ordered", action="store_true")
    ap.add_argument("--sqlite-pragmas", action="store_true")
    ap.add_argument("--parquet", action="store_true")
    a = ap.parse_args()
    if a.sqlite_pragmas:
        pyogrio.set_gdal_config_options({"OGR_SQLITE_SYNCHRONOUS": "OFF",
                                         "OGR_SQLITE_CACHE": "1024"})
    rng = np.random.default_rng(1)
    geoms = lines(a.rows, a.ordered, rng)
    print(f"{a.rows:,} two-point lines, {'ordered' if a.ordered else 'random'} positions,"
          f" pyogrio {pyogrio.__version__}, GDAL {pyogrio.__gdal_version_string__}")
    with tempfile.TemporaryDirectory() as tmp:
        for k in a.columns:
            frame = gpd.GeoDataFrame({f"c{i}": rng.random(a.rows) for i in range(k)},
                                     geometry=geoms, crs="EPSG:32633")
            for index in ("NO", "YES"):
                times = []
                for r in range(a.repeat):
                    path = Path(tmp) / f"w{k}_{index}_{r}.gpkg"
                    t = time.perf_counter()
                    pyogrio.write_dataframe(frame, path, layer="a", driver="GPKG",
                                            use_arrow=True,
                                            layer_options={"SPATIAL_INDEX": index})
                    times.append(time.perf_counter() - t)
                    path.unlink()
                med = statistics.median(times)
                print(f"{k:3d} float columns, spatial index {index:3s}: {med:7.2f} s"
                      f" ({a.rows / med / 1e6:.2f} M rows/s)", flush=True)
            if a.parquet:
                times = []
                for r in range(a.repeat):
                    path = Path(tmp) / f"w{k}_{r}.parquet"
                    t = time.perf_counter()
                    frame.to_parquet(path, index=False)
                    times.append(time.perf_counter() - t)
                    path.unlink()
                med = statistics.median(times)
                print(f"{k:3d} float columns, GeoParquet        : {med:7.2f} s"
                      f" ({a.rows / med / 1e6:.2f} M rows/s)", flush=True)


if __name__ == "__main__":
    main()
