"""Command line: ``corridor run CONFIG``, ``corridor check CONFIG``, ``corridor steps``,
``corridor step NAME CONFIG [--in LAYER=PATH ...] [--out DIR] [--set KEY=VALUE ...]``.

``corridor steps`` lists the named processing steps with their inputs,
outputs and parameters (name, type, unit, default); ``corridor step`` runs one
of them (:func:`corridor.steps.catalog.run_step`): the pipeline up to and
including that step, in memory, writing the step's outputs to ``--out``
(default ``<run.output_dir>/steps``).

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
    ls = sub.add_parser("steps", help="list the processing steps and their parameters")
    ls.add_argument("--json", action="store_true", help="print the declarations as JSON")
    st = sub.add_parser("step", help="run one processing step and write its outputs")
    st.add_argument("name", help="step name (see `corridor steps`)")
    st.add_argument("config", type=Path, help="run configuration (TOML)")
    st.add_argument("--in", dest="inputs", action="append", default=[], metavar="LAYER=PATH",
                    help="start from a saved layer (assess, rank: segments=PATH)")
    st.add_argument("--out", type=Path, default=None,
                    help="output folder (default <run.output_dir>/steps)")
    st.add_argument("--set", dest="settings", action="append", default=[], metavar="KEY=VALUE",
                    help="override a run setting the step takes (see `corridor steps`)")
    for q in (r, c, ls, st):
        q.add_argument("-q", "--quiet", action="store_true", help="warnings and errors only")
        q.add_argument("-v", "--verbose", action="store_true", help="debug messages")
    return p


def _console(args) -> None:
    from corridor import progress
    from corridor.runner import _FileOnly

    level = logging.WARNING if args.quiet else logging.DEBUG if args.verbose else logging.INFO
    progress.set_quiet(args.quiet)
    handler = progress.ConsoleHandler(sys.stderr)
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


def list_steps(as_json: bool = False) -> int:
    """Print every step with its inputs, outputs and parameters."""
    from corridor.steps.catalog import describe

    steps = describe()
    if as_json:
        import json

        print(json.dumps(steps, indent=2, ensure_ascii=False, default=str))
        return EXIT_OK
    for s in steps:
        print(f"{s['name']}: {s['title']}. {s['description']}")
        saved = f" (or --in {', '.join(s['from_saved'])}=PATH)" if s["from_saved"] else ""
        print(f"  inputs: the config's layers{saved}")
        print("  outputs: " + ", ".join(f"{p['name']} ({p['type']})" for p in s["outputs"]))
        print("  parameters:")
        for p in s["parameters"]:
            rng = f", {p['low']}..{p['high']}" if p["low"] is not None else ""
            print(f"    {p['name']:32s} {p['type']:10s} [{p['unit']}] default"
                  f" {p['default']!r}{rng}")
    return EXIT_OK


def _pairs(items: list[str], flag: str) -> dict[str, str]:
    from corridor.errors import ConfigError

    out = {}
    for item in items:
        key, sep, value = item.partition("=")
        if not sep or not key.strip():
            raise ConfigError(f"{flag} {item!r}: expected KEY=VALUE")
        out[key.strip()] = value
    return out


def run_one_step(args) -> int:
    """``corridor step NAME CONFIG ...``."""
    from corridor.steps.catalog import run_step

    written = run_step(args.name, args.config, inputs=_pairs(args.inputs, "--in"),
                       outputs_dir=args.out, params=_pairs(args.settings, "--set"))
    for name, path in written.items():
        log.info("%s: %s", name, path)
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    _console(args)
    from corridor.config import load_config
    from corridor.lock import LockError

    out = None
    try:
        if args.command == "steps":
            return list_steps(args.json)
        if args.command == "step":
            return run_one_step(args)
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
