"""Benchmark: the whole run end to end at scale, and how it scales with the assets.

``python benchmarks/bench_scale.py --line-km 10000 --asset-km 100000 --repeat 3``

1. Writes the reproducible synthetic network (benchmarks/network.py, from
   ``--seed``) and the same network with twice the assets (same seed: the
   first half of its assets are the smaller network's).
2. Runs :func:`corridor.runner.publish` with the standard stages into a
   temporary output folder, without cache (``run.cache_dir = ""``), each run
   in a fresh process so that its peak memory is its own: wall time per step
   (``run.timings_s``), total wall time and peak resident memory of the run's
   process and of its children (``resource.getrusage``; the children are the
   Dask workers with ``--backend dask``).
3. Prints medians over ``--repeat`` runs, the peak resident memory of each
   phase of the first run (sampled from /proc; ``write+writer``: this
   process's resident memory plus the private memory of the forked GeoPackage
   writer, i.e. the run's footprint while both live) and the ratio
   time(2x assets) / time(1x) measured in this one invocation (target <= 2.05).
4. With ``--profile``, profiles one more 1x run with pyinstrument and writes
   the profile to ``benchmarks/_work/profile.txt`` (top printed). With the
   local backend that run uses one thread, so that the partitions' work is on
   the main thread where pyinstrument samples.
"""

from __future__ import annotations

import argparse
import json
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))


def network_config(folder: Path, line_km: float, asset_km: float, seed: int) -> Path:
    """The network's config, written only when ``folder`` holds no network of these sizes."""
    import network

    stamp = folder / "params.json"
    want = {"line_km": line_km, "asset_km": asset_km, "seed": seed}
    cfg = folder / "bench.toml"
    if cfg.exists() and stamp.exists() and json.loads(stamp.read_text()) == want:
        return cfg
    t = time.perf_counter()
    cfg = network.write(folder, line_km, asset_km, seed)
    stamp.write_text(json.dumps(want))
    print(f"network {line_km:g} km lines / {asset_km:g} km assets written in"
          f" {time.perf_counter() - t:.1f} s", flush=True)
    return cfg


class PhaseMemory:
    """Peak resident memory per phase of :func:`corridor.runner.screen` (read, compute,
    finalize, compare, write), sampled from /proc every 20 ms (Linux only)."""

    def __init__(self):
        import os
        import threading

        from corridor import progress

        self.page = os.sysconf("SC_PAGE_SIZE")
        self.phase = "start"
        self.peak_gb: dict[str, float] = {}
        original = progress.stage

        def stage(name, index, count, stream=None):
            self.phase = name
            return original(name, index, count, stream)

        progress.stage = stage
        self.on = Path("/proc/self/statm").exists()
        if self.on:
            threading.Thread(target=self._sample, daemon=True).start()

    def _sample(self) -> None:
        statm = Path("/proc/self/statm")
        tick = 0
        child = 0.0
        while True:
            rss = int(statm.read_text().split()[1]) * self.page / 1024 ** 3
            self.peak_gb[self.phase] = max(self.peak_gb.get(self.phase, 0.0), rss)
            # with a forked GeoPackage writer: this process's resident memory plus the
            # writer's private pages (the pages it shares with this process count once).
            # The writer's smaps_rollup costs the kernel about 6 ms per read for a 4 GB
            # process (it walks the page tables, under the writer's memory-map lock):
            # read every 20 ms it took about a third of a core from the run it measures,
            # so it is read every 0.5 s (the writer's memory changes slowly).
            if tick % 25 == 0:
                child = children_private_gb()
            tick += 1
            if child:
                key = f"{self.phase}+writer"
                self.peak_gb[key] = max(self.peak_gb.get(key, 0.0), rss + child)
            time.sleep(0.02)


def children_private_gb() -> float:
    """Private memory (clean + dirty pages) of this process's children [GB] (Linux)."""
    total_kb = 0
    for task in Path("/proc/self/task").iterdir():
        try:
            pids = (task / "children").read_text().split()
        except OSError:
            continue
        for pid in pids:
            try:
                text = Path(f"/proc/{pid}/smaps_rollup").read_text()
            except OSError:
                continue
            for line in text.splitlines():
                if line.startswith(("Private_Clean:", "Private_Dirty:")):
                    total_kb += int(line.split()[1])
    return total_kb / 1024 ** 2


def one_run(cfg_path: Path, backend: str, profile: Path | None) -> dict:
    """One publish in this process; the figures as a dict."""
    from corridor.backends import override_run
    from corridor.config import load_config
    from corridor.runner import publish
    from corridor.steps import asset_stages, run_stages

    cfg = override_run(load_config(cfg_path), cache_dir="", backend=backend)
    if profile is not None and backend == "local":
        # one thread: the partitions run on the main thread, where the profiler looks
        cfg = override_run(cfg, threads=1)
    with tempfile.TemporaryDirectory(dir=cfg_path.parent) as tmp:
        profiler = None
        if profile is not None:
            from pyinstrument import Profiler

            profiler = Profiler(interval=0.01)
            profiler.start()
        memory = PhaseMemory()
        t0 = time.perf_counter()
        run = publish(cfg, Path(tmp) / "out", asset_stages(), run_stages())
        total = time.perf_counter() - t0
        if profiler is not None:
            profiler.stop()
            profile.write_text(profiler.output_text(unicode=False, color=False,
                                                    show_all=False), encoding="utf-8")
    self_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    child_kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return {"total_s": total, "timings_s": dict(run.timings_s), "counts": dict(run.counts),
            "peak_self_gb": self_kb / 1024 ** 2, "peak_children_gb": child_kb / 1024 ** 2,
            "peak_by_phase_gb": dict(memory.peak_gb)}


def run_in_process(cfg_path: Path, backend: str, profile: Path | None = None) -> dict:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--one-run", str(cfg_path),
           "--backend", backend]
    if profile is not None:
        cmd += ["--profile-to", str(profile)]
    p = subprocess.run(cmd, capture_output=True, text=True)
    if p.returncode != 0:
        raise SystemExit(f"run failed ({p.returncode}):\n{p.stderr[-4000:]}")
    return json.loads(p.stdout.strip().splitlines()[-1])


def summary(label: str, runs: list[dict]) -> float:
    tot = [r["total_s"] for r in runs]
    med = statistics.median(tot)
    c = runs[0]["counts"]
    print(f"\n== {label}: assets {c.get('assets')}, segments {c.get('segments')}, pairs"
          f" {c.get('pairs')}, exposures {c.get('exposures')}")
    print(f"total wall   median {med:8.2f} s   (runs: " + ", ".join(f"{x:.2f}" for x in tot)
          + ")")
    steps = list(runs[0]["timings_s"])
    for s in steps:
        vals = [r["timings_s"].get(s, float("nan")) for r in runs]
        print(f"  {s:16s} median {statistics.median(vals):8.2f} s")
    print(f"peak memory  self {max(r['peak_self_gb'] for r in runs):.2f} GB, children"
          f" {max(r['peak_children_gb'] for r in runs):.2f} GB")
    phases = runs[0].get("peak_by_phase_gb", {})
    if phases:
        print("  by phase (first run): " + ", ".join(f"{k} {v:.2f} GB"
                                                    for k, v in phases.items()))
    return med


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--line-km", type=float, default=10_000.0)
    ap.add_argument("--asset-km", type=float, default=100_000.0)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--backend", default="local", choices=["local", "dask"])
    ap.add_argument("--no-scaling", action="store_true", help="skip the 2x-assets run")
    ap.add_argument("--profile", action="store_true", help="profile one 1x run (pyinstrument)")
    ap.add_argument("--work", type=Path, default=HERE / "_work" / "scale")
    ap.add_argument("--one-run", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--profile-to", type=Path, help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.one_run is not None:
        print(json.dumps(one_run(a.one_run, a.backend, a.profile_to)))
        return
    print(f"bench_scale: {a.line_km:g} km of lines, {a.asset_km:g} km of assets, seed"
          f" {a.seed}, backend {a.backend}, repeat {a.repeat}", flush=True)
    base = network_config(a.work / "x1", a.line_km, a.asset_km, a.seed)
    runs1 = [run_in_process(base, a.backend) for _ in range(a.repeat)]
    med1 = summary(f"1x ({a.asset_km:g} km of assets)", runs1)
    if not a.no_scaling:
        double = network_config(a.work / "x2", a.line_km, 2 * a.asset_km, a.seed)
        runs2 = [run_in_process(double, a.backend) for _ in range(a.repeat)]
        med2 = summary(f"2x ({2 * a.asset_km:g} km of assets)", runs2)
        seg1, seg2 = runs1[0]["counts"]["segments"], runs2[0]["counts"]["segments"]
        print(f"\nscaling: segments x{seg2 / seg1:.2f}, time x{med2 / med1:.2f}"
              f" (target <= 2.05)")
    if a.profile:
        out = HERE / "_work" / "profile.txt"
        out.parent.mkdir(parents=True, exist_ok=True)
        run_in_process(base, a.backend, profile=out)
        print(f"\nprofile of one 1x run written to {out}; top:")
        print("\n".join(out.read_text(encoding="utf-8").splitlines()[:60]))


if __name__ == "__main__":
    main()
