"""``python tests/helpers/paused_run.py POINT MARKER SLEEP_S -- <corridor arguments>``.

Runs :func:`corridor.cli.main` with a test hook patched into a production function:

``compute``
    pauses before the per-asset keys are hashed (the inputs are read, nothing computed);
``write``
    pauses before the report is rendered (the layers and CSVs are in the staging folder);
``move``
    pauses after each output file moved from the staging folder into the output
    folder (the publish journal is written by then);
``kill-worker``
    the first process to run a per-asset stage ends at once (``MARKER`` is created;
    Dask workers included).

On arrival at a pause, ``MARKER`` is created and the run sleeps ``SLEEP_S`` [s];
the test then kills it or lets it go on.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from tests.helpers import hooks  # noqa: E402


def patch(point: str, marker: str, sleep_s: float) -> None:
    """Patch the production function that runs at ``point`` (see the module docstring)."""
    if point == "compute":
        from corridor import keys

        keys.asset_keys = hooks.pause_before(keys.asset_keys, marker, point, sleep_s)
    elif point == "write":
        from corridor import report

        report.write_report = hooks.pause_before(report.write_report, marker, point, sleep_s)
    elif point == "move":
        from corridor import owned

        real_replace = os.replace

        def replace(src, dst, *args, **kwargs):
            real_replace(src, dst, *args, **kwargs)
            src, dst = Path(src), Path(dst)
            if src.parent.name.startswith(owned.STAGING_PREFIX) and dst.name != owned.JOURNAL:
                hooks.arrive(marker, point, sleep_s)

        owned.os.replace = replace  # owned moves files with os.replace
    elif point == "kill-worker":
        from corridor import steps

        real = steps.asset_stages
        steps.asset_stages = lambda: hooks.killing_stages(real(), marker)
    else:
        raise SystemExit(f"unknown pause point {point!r}")


if __name__ == "__main__":
    point, marker, sleep_s, sep, *args = sys.argv[1:]
    assert sep == "--", "usage: paused_run.py POINT MARKER SLEEP_S -- <corridor arguments>"
    patch(point, marker, float(sleep_s))
    from corridor.cli import main

    raise SystemExit(main(args))
