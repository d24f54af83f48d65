"""Benchmark: the HTML report alone, on reduced networks of several sizes.

``python benchmarks/bench_report.py --line-km 1000 --asset-km 10000 20000 40000``

For each asset length, writes the synthetic network (benchmarks/network.py,
same seed, so a larger network holds the smaller one's assets), screens it
once in this process without cache (kept as a pickle under ``--work`` and
reused by later invocations), then renders the report ``--repeat`` times and
prints the median wall time, the time per million segments and the time of
the main sections (the work list, the overview map, the profiles, the worst
exposures). The report should grow at most linearly with the network: the
time per million segments must not rise with the size.
"""

from __future__ import annotations

import argparse
import functools
import pickle
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))


def screened(folder: Path, line_km: float, asset_km: float, seed: int):
    """The screened run of a network, from ``run.pkl`` when already computed."""
    import network

    from corridor.backends import override_run
    from corridor.config import load_config
    from corridor.pipeline import screen
    from corridor.steps import asset_stages, run_stages

    folder.mkdir(parents=True, exist_ok=True)
    pkl = folder / "run.pkl"
    if pkl.exists():
        with open(pkl, "rb") as f:
            return pickle.load(f)
    cfg = override_run(load_config(network.write(folder, line_km, asset_km, seed)),
                       cache_dir="")
    run = screen(cfg, folder / "out", asset_stages(), run_stages())
    with open(pkl, "wb") as f:
        pickle.dump(run, f, protocol=5)
    return run


def timed_sections() -> dict[str, float]:
    """Wrap the report's main sections so that their time adds up in the returned dict."""
    import corridor.report as report

    acc: dict[str, float] = {}
    for name in ("worklist_section", "overview_map", "profile_plot", "worst_exposures"):
        f = getattr(report, name)

        @functools.wraps(f)
        def g(*a, _f=f, _name=name, **k):
            t = time.perf_counter()
            try:
                return _f(*a, **k)
            finally:
                acc[_name] = acc.get(_name, 0.0) + time.perf_counter() - t

        setattr(report, name, g)
    return acc


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--line-km", type=float, default=1000.0)
    ap.add_argument("--asset-km", type=float, nargs="+", default=[10_000.0, 20_000.0])
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--work", type=Path, default=HERE / "_work" / "report")
    a = ap.parse_args()
    from corridor.report import write_report

    acc = timed_sections()
    for asset_km in a.asset_km:
        folder = a.work / f"l{a.line_km:g}_a{asset_km:g}_s{a.seed}"
        run = screened(folder, a.line_km, asset_km, a.seed)
        n = len(run.segment_table)
        times, parts = [], []
        for _ in range(a.repeat):
            acc.clear()
            t = time.perf_counter()
            write_report(run, folder / "report")
            times.append(time.perf_counter() - t)
            parts.append(dict(acc))
        med = statistics.median(times)
        sec = {k: statistics.median(p.get(k, 0.0) for p in parts) for k in parts[0]}
        print(f"{asset_km:g} km assets, {n} segments: report median {med:.2f} s"
              f" ({med / n * 1e6:.2f} s per million segments; runs "
              + ", ".join(f"{x:.2f}" for x in times) + "); "
              + ", ".join(f"{k} {v:.2f}" for k, v in sec.items()), flush=True)


if __name__ == "__main__":
    main()
