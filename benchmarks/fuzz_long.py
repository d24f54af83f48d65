"""Long fuzz run of whole runs on malformed layers, outside the test suite.

``python benchmarks/fuzz_long.py --cases 3000 --jobs 2``

Draws ``--cases`` scenarios with :func:`tests.fuzz_scenarios.make_case` (seeds
``--seed``, ``--seed + 1``, ...), runs ``python -m corridor run`` on each in a
subprocess with a time limit, and counts the outcomes: inputs tried, exit
codes, internal errors (exit 3, a traceback in the log), hangs (past
``--timeout-s``) and features lost (an input feature neither in the outputs
nor in rejected.csv, or a rejected power line without exit code 5). Prints a
summary and the seeds of the failures, which ``--replay SEED`` runs again with
the console output shown.
"""

from __future__ import annotations

import argparse
import collections
import random
import subprocess
import sys
import tempfile
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests.fuzz_scenarios import check_outcome, make_case  # noqa: E402


def one(seed: int, timeout_s: float, show: bool = False) -> tuple[int, str, list[str]]:
    """Run case ``seed``; return (seed, outcome, problems)."""
    with tempfile.TemporaryDirectory(prefix="corridor-fuzz-") as tmp:
        case = make_case(Path(tmp), random.Random(seed))
        try:
            proc = subprocess.run([sys.executable, "-m", "corridor", "run",
                                   str(case.config_path), "-q"], cwd=tmp,
                                  capture_output=True, text=True, timeout=timeout_s)
        except subprocess.TimeoutExpired:
            return seed, "hang", [f"no exit within {timeout_s} s"]
        if show:
            print(proc.stderr)
        if proc.returncode == 3:
            return seed, "internal error", [proc.stderr.strip()[-300:]]
        problems = check_outcome(case, proc.returncode)
        return seed, ("lost" if problems else f"exit {proc.returncode}"), problems


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=3000)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--timeout-s", type=float, default=120.0)
    ap.add_argument("--replay", type=int, default=None)
    a = ap.parse_args()
    if a.replay is not None:
        print(one(a.replay, a.timeout_s, show=True))
        return
    tally: collections.Counter[str] = collections.Counter()
    failures: list[tuple[int, str, list[str]]] = []
    seeds = range(a.seed, a.seed + a.cases)
    with ThreadPoolExecutor(a.jobs) as pool:
        for k, (seed, outcome, problems) in enumerate(
                pool.map(lambda s: one(s, a.timeout_s), seeds), start=1):
            tally[outcome] += 1
            if problems:
                failures.append((seed, outcome, problems))
            if k % 100 == 0:
                print(f"{k} cases: {dict(tally)}", file=sys.stderr, flush=True)
    print(f"inputs tried: {a.cases}")
    print(f"outcomes: {dict(sorted(tally.items()))}")
    print(f"tracebacks (exit 3): {tally['internal error']}")
    print(f"hangs: {tally['hang']}")
    print(f"features lost or exit code wrong: {tally['lost']}")
    for seed, outcome, problems in failures[:30]:
        print(f"seed {seed}: {outcome}: {problems}")


if __name__ == "__main__":
    main()
