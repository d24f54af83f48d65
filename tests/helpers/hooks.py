"""Test-only hooks, patched into production functions by the tests (never shipped).

A run is paused or a worker ended at a named point by wrapping the production
function that runs there; :mod:`tests.helpers.paused_run` applies them in a
subprocess before calling :func:`corridor.cli.main`.
"""

from __future__ import annotations

import functools
import os
import time
from pathlib import Path


def arrive(marker: str, point: str, sleep_s: float) -> None:
    """Create ``marker`` (the test waits for it), then sleep ``sleep_s`` [s]."""
    Path(marker).write_text(point, encoding="utf-8")
    time.sleep(sleep_s)


def pause_before(fn, marker: str, point: str, sleep_s: float):
    """``fn`` that first pauses (:func:`arrive`)."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        arrive(marker, point, sleep_s)
        return fn(*args, **kwargs)

    return wrapper


def end_process_once(marker: str, fn, run):
    """A per-asset stage that, in the first process to call it of all (``marker``
    created exclusively), ends that process at once (``os._exit``) instead of running."""
    try:
        fd = os.open(marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
    except FileExistsError:
        return fn(run)
    os.close(fd)
    os._exit(1)


def killing_stages(stages: dict, marker: str) -> dict:
    """``stages`` whose first stage ends the first worker to run it (:func:`end_process_once`);
    picklable, so Dask workers run it too."""
    out = dict(stages)
    first = next(iter(out))
    out[first] = functools.partial(end_process_once, marker, out[first])
    return out
