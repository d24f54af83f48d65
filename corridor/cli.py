"""Command line: ``corridor run CONFIG``, ``corridor check CONFIG``.

Exit codes
----------
0
    Done (``run``: outputs published; ``check``: config and layers usable,
    rejected features listed as warnings).
1
    Done, and some segment exceeds a limit (only with ``--fail-on-exceedance``).
2
    Bad config or input: every problem is printed, naming file, layer,
    feature id and field; nothing is published, previous outputs stay.
3
    Internal error: the traceback goes to the log file (``<out>.last-error.log``
    beside the output folder, or ``corridor-crash.log`` in the working folder
    when it happens before the output folder is known), not to the console.
4
    Another run holds the output folder's lock: nothing was done. The message
    names the PID, host and start time of the holder. A scheduler can treat
    this as "skipped" rather than as a failure to fix.

Logging goes to stderr (``--quiet``: warnings and errors; ``--verbose``:
debug) and, for ``run``, to ``corridor.log`` in the output folder (always at
debug level). Progress bars are drawn only when stderr is a terminal.
"""

from __future__ import annotations

import argparse
import logging
import sys
import traceback
from pathlib import Path

from corridor import __version__
from corridor.errors import CorridorError

EXIT_OK, EXIT_EXCEEDANCE, EXIT_INPUT, EXIT_INTERNAL, EXIT_LOCKED = 0, 1, 2, 3, 4
log = logging.getLogger("corridor")


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="corridor",
        description="Screen the voltages HV AC power lines put on fences, rails, pipelines and"
                    " telecom cables in their corridors. Screening estimates for planning only.")
    p.add_argument("--version", action="version", version=f"corridor {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    r = sub.add_parser("run", help="run a screening")
    r.add_argument("config", type=Path, help="run configuration (TOML)")
    r.add_argument("--out", type=Path, default=None, help="output folder (overrides the config)")
    r.add_argument("--fail-on-exceedance", action="store_true",
                   help="exit 1 when any segment exceeds a limit")
    c = sub.add_parser("check", help="validate config and layers without computing")
    c.add_argument("config", type=Path)
    for q in (r, c):
        q.add_argument("-q", "--quiet", action="store_true", help="warnings and errors only")
        q.add_argument("-v", "--verbose", action="store_true", help="debug messages")
    return p


def _console(args) -> None:
    from corridor import progress
    from corridor.runner import _FileOnly

    level = logging.WARNING if args.quiet else logging.DEBUG if args.verbose else logging.INFO
    progress.set_quiet(args.quiet)
    handler = logging.StreamHandler(sys.stderr)
    handler.setLevel(level)
    handler.setFormatter(logging.Formatter("corridor: %(levelname)s: %(message)s"))
    handler.addFilter(_FileOnly())
    root = logging.getLogger("corridor")
    root.setLevel(logging.DEBUG)
    for old in [h for h in root.handlers if getattr(h, "_corridor_console", False)]:
        root.removeHandler(old)
    handler._corridor_console = True
    root.addHandler(handler)


def check(cfg) -> int:
    """Validate layers and the limit set without computing; list every problem."""
    from corridor.errors import InputError
    from corridor.io.layers import read_inputs

    problems: list[str] = []
    inputs = None
    try:
        inputs = read_inputs(cfg)
    except InputError as exc:
        problems.extend(exc.problems)
    try:
        from corridor.limits.limit_sets import load_limit_set
        from corridor.steps import LIMITS_DIR

        load_limit_set(cfg.run["limit_set"], dict(cfg.limit_overrides) or None,
                       search_dir=LIMITS_DIR)
    except CorridorError as exc:
        problems.extend(getattr(exc, "problems", [str(exc)]))
    if inputs is not None:
        for row in inputs.rejected.rows:
            log.warning("would reject layer %s feature %s field %s: %s", row["layer"],
                        row["feature_id"], row["field"], row["reason"])
        log.info("%d features would be rejected", len(inputs.rejected.rows))
    if problems:
        for line in problems:
            print(f"corridor: error: {line}", file=sys.stderr)
        return EXIT_INPUT
    log.info("config and layers are usable: %s", inputs.counts)
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    _console(args)
    from corridor.config import load_config
    from corridor.lock import LockError

    out = None
    try:
        cfg = load_config(args.config)
        if args.command == "check":
            return check(cfg)
        from corridor.runner import publish
        from corridor.steps import asset_stages, run_stages

        out = Path(args.out or cfg.output_dir).resolve()
        run = publish(cfg, out, asset_stages(), run_stages())
        log.info("outputs written to %s", out)
        exceed = int(run.counts.get("segments_exceeding", 0))
        if exceed and args.fail_on_exceedance:
            return EXIT_EXCEEDANCE
        return EXIT_OK
    except LockError as exc:
        print(f"corridor: error: {exc}", file=sys.stderr)
        return EXIT_LOCKED
    except CorridorError as exc:
        for line in getattr(exc, "problems", [str(exc)]):
            print(f"corridor: error: {line}", file=sys.stderr)
        where = getattr(exc, "corridor_log", None)
        if where is not None:
            print(f"corridor: log of the failed run: {where}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("corridor: interrupted; previous outputs left in place", file=sys.stderr)
        return EXIT_INTERNAL
    except Exception as exc:  # the CLI boundary: anything else is an internal error
        where = getattr(exc, "corridor_log", None)
        if where is None:
            where = Path.cwd() / "corridor-crash.log"
            try:
                where.write_text(traceback.format_exc(), encoding="utf-8")
            except OSError:
                where = None
        print(f"corridor: internal error ({type(exc).__name__}); previous outputs left in"
              f" place; traceback in {where}", file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
