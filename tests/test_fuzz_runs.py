"""Whole runs on malformed layers: no traceback, no hang, no feature lost (issue: silent failures).

Each example draws a small scenario with :func:`tests.fuzz_scenarios.make_case`
(NULL, mistyped, out-of-range and formula-like attributes; missing and numeric
ids; empty, degenerate and far-away geometries; ground items naming unknown
assets) and runs ``corridor run`` on it in this process. The invariants are
those of :func:`tests.fuzz_scenarios.check_outcome`. A run that takes longer
than ``HANG_S`` is a hang. The long fuzz run (``benchmarks/fuzz_long.py``)
draws thousands of the same scenarios in subprocesses; its figures are in
DEVELOPERS.md.
"""

from __future__ import annotations

import random
import signal
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.fuzz_scenarios import check_outcome, make_case

#: A tiny scenario runs in about a second here; anything near a minute is a hang.
HANG_S = 60


class _Hang(Exception):
    pass


def _alarm(_signum, _frame):
    raise _Hang(f"run did not finish in {HANG_S} s")


@pytest.mark.slow
@settings(max_examples=25, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(rng=st.randoms(use_true_random=False))
def test_malformed_layers_end_cleanly_and_lose_nothing(rng: random.Random, cli):
    with tempfile.TemporaryDirectory() as tmp:
        case = make_case(Path(tmp), rng)
        old = signal.signal(signal.SIGALRM, _alarm)
        signal.alarm(HANG_S)
        try:
            code = cli(["run", str(case.config_path), "-q"])
        finally:
            signal.alarm(0)
            signal.signal(signal.SIGALRM, old)
        problems = check_outcome(case, code)
        assert not problems, problems
