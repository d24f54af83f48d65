"""The compiled chain loops still run where numba finds nowhere to cache machine code
(a read-only install run by a user without a writable home: common practice for
services), and still give the closed-form answer.

Closed form (Sunde 1968; docs/methods.md §5): a uniform line of length L, open at both
ends, with a uniform EMF e per metre, carries V(x) = (e/γ)·sinh(γ(x − L/2))/cosh(γL/2).
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]

SCRIPT = """
import json
import numpy as np
from corridor.network.response import ChainBatch, ChainSystem
z, y, n, seg = 5e-5 + 6e-4j, 1e-5 + 2e-6j, 200, 50.0
sol = ChainSystem(ChainBatch.from_arrays(np.full(n, seg), z, y, [0])).solve(
    np.full(n, 0.1 * seg))
v = sol.node_voltage_v
print(json.dumps([v.real.tolist(), v.imag.tolist()]))
"""


def test_chain_solve_runs_and_is_exact_without_a_numba_cache():
    env = dict(os.environ)
    # only the zip-file locator: no place to cache, as on a read-only install
    env["NUMBA_CACHE_LOCATOR_CLASSES"] = "ZipCacheLocator"
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    proc = subprocess.run([sys.executable, "-c", SCRIPT], capture_output=True, text=True,
                          env=env, timeout=300, cwd=ROOT)
    assert proc.returncode == 0, proc.stderr[-2000:]
    re, im = json.loads(proc.stdout.strip().splitlines()[-1])
    v = np.asarray(re) + 1j * np.asarray(im)
    z, y, n, seg = 5e-5 + 6e-4j, 1e-5 + 2e-6j, 200, 50.0
    gamma, length = np.sqrt(z * y), n * seg
    x = np.arange(n + 1) * seg
    want = (0.1 / gamma) * np.sinh(gamma * (x - length / 2)) / np.cosh(gamma * length / 2)
    np.testing.assert_allclose(v, want, rtol=1e-9, atol=1e-12 * np.abs(want).max())
