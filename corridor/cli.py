"""Command line: ``corridor run CONFIG``, ``corridor check CONFIG``.

Exit codes: 0 done; 1 done with exceedances (only with
``--fail-on-exceedance``); 2 bad config or input; 3 internal error (the
traceback goes to the log file, not the console).
"""

from __future__ import annotations

import argparse
import logging
import sys
import traceback
from pathlib import Path

from corridor import __version__
from corridor.errors import CorridorError

EXIT_OK, EXIT_EXCEEDANCE, EXIT_INPUT, EXIT_INTERNAL = 0, 1, 2, 3
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
    level = logging.WARNING if args.quiet else logging.DEBUG if args.verbose else logging.INFO
    handler = logging.StreamHandler(sys.stderr)
    handler.setLevel(level)
    handler.setFormatter(logging.Formatter("corridor: %(levelname)s: %(message)s"))
    root = logging.getLogger("corridor")
    root.setLevel(logging.DEBUG)
    for old in [h for h in root.handlers if getattr(h, "_corridor_console", False)]:
        root.removeHandler(old)
    handler._corridor_console = True
    root.addHandler(handler)


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    _console(args)
    from corridor.config import load_config

    try:
        cfg = load_config(args.config)
        if args.command == "check":
            from corridor.io.layers import read_inputs

            inputs = read_inputs(cfg)
            log.info("config and layers are valid: %s", inputs.counts)
            for row in inputs.rejected.rows:
                log.warning("would reject %s feature %s field %s: %s", row["layer"],
                            row["feature_id"], row["field"], row["reason"])
            return EXIT_OK
        from corridor.runner import publish
        from corridor.steps import asset_stages, run_stages

        run = publish(cfg, args.out, asset_stages(), run_stages())
        out = Path(args.out or cfg.output_dir).resolve()
        log.info("outputs written to %s", out)
        exceed = int(run.counts.get("segments_exceeding", 0))
        if exceed and args.fail_on_exceedance:
            return EXIT_EXCEEDANCE
        return EXIT_OK
    except CorridorError as exc:
        for line in getattr(exc, "problems", [str(exc)]):
            print(f"corridor: error: {line}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("corridor: interrupted; previous outputs left in place", file=sys.stderr)
        return EXIT_INTERNAL
    except Exception:  # the CLI boundary: anything else is an internal error
        log_path = Path.cwd() / "corridor-crash.log"
        log_path.write_text(traceback.format_exc(), encoding="utf-8")
        print(f"corridor: internal error; traceback written to {log_path}", file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
