"""Benchmark: corridor's exposure search against a PostGIS ST_DWithin join.

``python benchmarks/postgis_join.py --line-km 10000 --asset-km 100000``

Builds the synthetic network (benchmarks/network.py) in memory, cuts it into
the same asset segments and line edges corridor uses
(:func:`corridor.geometry.segments.split_lines`,
:class:`corridor.geometry.exposure.LineEdges`), then in one run:

* corridor: :func:`corridor.geometry.exposure.find_pairs`, the (segment, line)
  pairs within ``run.screening_distance_m`` (default 1000 m);
* PostGIS: the same segments and edges loaded with ``COPY`` (hex EWKB), a GiST
  index on each, ``ANALYZE``, then
  ``SELECT DISTINCT s.seg_id, e.line FROM segs s JOIN edges e ON
  ST_DWithin(s.geom, e.geom, d)``.

It checks that the pair counts agree and prints both times and their ratio
(target: corridor at least 5x faster than the join alone).

PostgreSQL and PostGIS come from Debian's packages: when they are missing
and the script runs as root on a machine with ``apt-get``, it installs them
(``apt-get update`` then ``apt-get install -y postgresql postgis``; pass
``--no-install`` to forbid that). A throw-away cluster is created
with ``initdb`` under a temporary folder, owned by the ``postgres`` user,
listening on 127.0.0.1 only (trust authentication, loopback only), and
stopped and deleted at the end. Without PostgreSQL/PostGIS the script says so
and exits 0.
"""

from __future__ import annotations

import argparse
import glob
import os
import shutil
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import shapely

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

SRID = 32633


def pg_bin() -> Path | None:
    """The newest PostgreSQL server bin folder with initdb, or None."""
    cands = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"),
                   key=lambda p: int(Path(p).parts[-3]) if Path(p).parts[-3].isdigit() else 0)
    return Path(cands[-1]).parent if cands else None


def postgis_available(bindir: Path) -> bool:
    version = bindir.parts[-2]
    return bool(glob.glob(f"/usr/share/postgresql/{version}/extension/postgis.control"))


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Cluster:
    """A temporary PostgreSQL cluster on 127.0.0.1, run as the ``postgres`` user."""

    def __init__(self, bindir: Path, root: Path):
        self.bindir = bindir
        self.root = root
        self.data = root / "data"
        self.port = free_port()
        self.as_pg = [] if os.geteuid() != 0 else ["runuser", "-u", "postgres", "--"]

    def _run(self, *cmd, **kw):
        return subprocess.run([*self.as_pg, *map(str, cmd)], check=True, capture_output=True,
                              text=True, **kw)

    def start(self) -> None:
        if self.as_pg:
            shutil.chown(self.root, "postgres", "postgres")
        self._run(self.bindir / "initdb", "-D", self.data, "-A", "trust", "-U", "postgres",
                  "-E", "UTF8", "--no-sync")
        opts = (f"-p {self.port} -k {self.root} -c listen_addresses=127.0.0.1"
                " -c shared_buffers=1GB -c work_mem=256MB -c maintenance_work_mem=1GB"
                " -c max_parallel_workers_per_gather=2 -c fsync=off"
                " -c synchronous_commit=off -c full_page_writes=off")
        self._run(self.bindir / "pg_ctl", "-D", self.data, "-o", opts, "-l",
                  self.root / "server.log", "-w", "start")

    def stop(self) -> None:
        try:
            self._run(self.bindir / "pg_ctl", "-D", self.data, "-m", "fast", "-w", "stop")
        except subprocess.CalledProcessError:
            pass

    def psql(self, sql: str) -> str:
        """Run SQL (psql meta-commands allowed) and return psql's output."""
        cmd = [self.bindir / "psql", "-h", "127.0.0.1", "-p", str(self.port), "-U", "postgres",
               "-d", "postgres", "-X", "-q", "-t", "-A", "-v", "ON_ERROR_STOP=1"]
        p = subprocess.run([*map(str, cmd)], input=sql, capture_output=True, text=True)
        if p.returncode != 0:
            raise RuntimeError(f"psql failed: {p.stderr}")
        return p.stdout.strip()


def ewkb_hex(x0, y0, x1, y1) -> np.ndarray:
    """Hex EWKB (with SRID) of straight two-point lines."""
    coords = np.stack([np.column_stack([x0, y0]), np.column_stack([x1, y1])], axis=1)
    lines = shapely.linestrings(coords)
    lines = shapely.set_srid(lines, SRID)
    return shapely.to_wkb(lines, hex=True, include_srid=True)


def write_csv(path: Path, columns: list[np.ndarray]) -> None:
    import pandas as pd

    pd.DataFrame({f"c{i}": c for i, c in enumerate(columns)}).to_csv(path, header=False,
                                                                   index=False)


def install_postgis() -> None:
    """Install PostgreSQL and PostGIS from Debian's packages (root with apt-get only)."""
    if shutil.which("apt-get") is None or os.geteuid() != 0:
        print("postgis_join: cannot install PostgreSQL/PostGIS here (needs root and apt-get)")
        return
    print("postgis_join: installing postgresql and postgis from Debian's packages ...",
          flush=True)
    env = {**os.environ, "DEBIAN_FRONTEND": "noninteractive"}
    for cmd in (["apt-get", "update", "-qq"],
                ["apt-get", "install", "-y", "-qq", "postgresql", "postgis"]):
        p = subprocess.run(cmd, capture_output=True, text=True, env=env)
        if p.returncode != 0:
            print(f"postgis_join: {' '.join(cmd)} failed:\n{p.stderr[-2000:]}")
            return


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--line-km", type=float, default=10_000.0)
    ap.add_argument("--asset-km", type=float, default=100_000.0)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--distance-m", type=float, default=1000.0)
    ap.add_argument("--segment-length-m", type=float, default=50.0)
    ap.add_argument("--no-install", action="store_true",
                    help="do not install PostgreSQL/PostGIS when they are missing")
    a = ap.parse_args()

    bindir = pg_bin()
    if (bindir is None or not postgis_available(bindir)) and not a.no_install:
        install_postgis()
        bindir = pg_bin()
    if bindir is None or not postgis_available(bindir):
        print("postgis_join: skipped: PostgreSQL and/or PostGIS are not installed"
              " (apt-get install -y postgresql postgis)")
        return
    import network

    from corridor.geometry.exposure import LineEdges, find_pairs
    from corridor.geometry.segments import split_lines

    t = time.perf_counter()
    lines, assets, _soil = network.build(a.line_km, a.asset_km, a.seed)
    print(f"network {a.line_km:g} km lines / {a.asset_km:g} km assets (seed {a.seed}) built"
          f" in {time.perf_counter() - t:.1f} s", flush=True)
    t = time.perf_counter()
    segments = split_lines(assets.geometry.to_numpy(), a.segment_length_m)
    edges = LineEdges.from_geometries(lines.geometry.to_numpy())
    seg_s = time.perf_counter() - t
    print(f"segments {len(segments):,}, line edges {len(edges.segments):,}"
          f" (segmentation {seg_s:.2f} s)", flush=True)

    t = time.perf_counter()
    pairs = find_pairs(segments, edges, a.distance_m, 1.0, 10.0)
    corridor_s = time.perf_counter() - t
    print(f"corridor find_pairs: {len(pairs):,} (segment, line) pairs in {corridor_s:.2f} s",
          flush=True)

    root = Path(tempfile.mkdtemp(prefix="corridor-pg-"))
    cluster = Cluster(bindir, root)
    try:
        t = time.perf_counter()
        cluster.start()
        cluster.psql("CREATE EXTENSION postgis;")
        print(f"PostgreSQL {bindir.parts[-2]} + PostGIS"
              f" {cluster.psql('SELECT postgis_lib_version();')} on 127.0.0.1:{cluster.port}"
              f" (started in {time.perf_counter() - t:.1f} s)", flush=True)
        s, e = segments, edges.segments
        seg_csv, edge_csv = root / "segs.csv", root / "edges.csv"
        t = time.perf_counter()
        write_csv(seg_csv, [np.arange(len(s)), ewkb_hex(s.x0_m, s.y0_m, s.x1_m, s.y1_m)])
        write_csv(edge_csv, [np.arange(len(e)), e.feature,
                             ewkb_hex(e.x0_m, e.y0_m, e.x1_m, e.y1_m)])
        csv_s = time.perf_counter() - t
        for p in (seg_csv, edge_csv):
            os.chmod(p, 0o644)
        t = time.perf_counter()
        cluster.psql(
            f"CREATE UNLOGGED TABLE segs (seg_id int, geom geometry(LineString, {SRID}));\n"
            f"CREATE UNLOGGED TABLE edges (edge_id int, line int,"
            f" geom geometry(LineString, {SRID}));\n"
            f"\\copy segs FROM '{seg_csv}' CSV\n"
            f"\\copy edges FROM '{edge_csv}' CSV\n")
        load_s = time.perf_counter() - t
        t = time.perf_counter()
        cluster.psql("CREATE INDEX ON segs USING gist (geom);\n"
                     "CREATE INDEX ON edges USING gist (geom);\n"
                     "ANALYZE segs; ANALYZE edges;")
        index_s = time.perf_counter() - t
        query = (f"SELECT count(*) FROM (SELECT DISTINCT s.seg_id, e.line FROM segs s JOIN edges"
                 f" e ON ST_DWithin(s.geom, e.geom, {a.distance_m!r})) q;")
        t = time.perf_counter()
        n_pg = int(cluster.psql(query))
        join_s = time.perf_counter() - t
        print(f"PostGIS: CSV {csv_s:.2f} s, COPY {load_s:.2f} s, GiST + ANALYZE {index_s:.2f} s,"
              f" ST_DWithin join {join_s:.2f} s: {n_pg:,} (segment, line) pairs", flush=True)
    finally:
        cluster.stop()
        shutil.rmtree(root, ignore_errors=True)

    agree = "agree" if n_pg == len(pairs) else f"DIFFER by {n_pg - len(pairs):+,}"
    print(f"\npair counts {agree}: corridor {len(pairs):,}, PostGIS {n_pg:,}")
    print(f"join alone: PostGIS {join_s:.2f} s / corridor {corridor_s:.2f} s ="
          f" {join_s / corridor_s:.1f}x (target >= 5x)")
    pg_total = load_s + index_s + join_s
    print(f"with loading and indexing: PostGIS {pg_total:.2f} s / corridor"
          f" {corridor_s + seg_s:.2f} s (incl. segmentation) ="
          f" {pg_total / (corridor_s + seg_s):.1f}x")


if __name__ == "__main__":
    main()
