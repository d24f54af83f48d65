"""Command line: ``corridor run CONFIG``, ``corridor check CONFIG``, ``corridor steps``,
``corridor step NAME CONFIG [--in LAYER=PATH ...] [--out DIR] [--set KEY=VALUE ...]``,
``corridor unlock CONFIG [--out DIR] [--force]``.

``corridor steps`` lists the named processing steps with their inputs,
outputs and parameters (name, type, unit, default); ``corridor step`` runs one
of them (:func:`corridor.steps.catalog.run_step`): the pipeline up to and
including that step, in memory, writing the step's outputs to ``--out``
(default ``<run.output_dir>/steps``). ``corridor unlock`` prints the holder of
an output folder's lock and removes the lock (refused while the holder runs
on this host, unless ``--force``).

Exit codes
----------
0
    Done (``run``: outputs published; ``check``: config and layers usable,
    rejected features listed as warnings).
1
    Done, and some segment exceeds a limit (only with ``--fail-on-exceedance``).
2
    Bad config or input, or an output folder corridor may not write into (a
    file, or a folder holding files corridor did not write), or the file
    system refused (disk full, read-only, no permission; the cause is
    printed). Every problem is printed, naming file, layer, feature id and
    field; nothing is published, previous outputs stay. ``check``: also when
    the power line layer or an asset layer yields no usable feature.
3
    Internal error: the traceback goes to a log file (``<out>.last-error.log``
    beside the output folder, or ``corridor-crash-<pid>.log`` in the system's
    temporary folder when the output folder is not known), not to the console.
4
    Another run holds the output folder's lock: nothing was done (skipped).
    The message names the PID, host, start time and heartbeat of the holder.
    A lock whose holder is gone (same host) or whose heartbeat is older than
    10 min (any host) is taken over by the next run, so exit 4 on several
    runs in a row means a run is still going or stuck: check the holder and
    use ``corridor unlock``.
5
    ``run``: a power line was rejected (bad attribute or geometry). The
    outputs were published but are incomplete: the voltages that line induces
    were not assessed. Each rejected line is named in a warning, in run.json
    and in the report. ``run.accept_rejected_lines = true`` accepts this on
    purpose (exit code as if no line was rejected). Takes precedence over 1:
    an incomplete result outranks an exceeding one.

Logging goes to stderr (``--quiet``: warnings and errors; ``--verbose``:
debug) and, for ``run``, to ``corridor.log`` in the output folder (always at
debug level). Progress bars are drawn only when stderr is a terminal. A
closed standard output (``corridor steps | head -1``) ends the command
quietly with exit 0, as Unix tools do.
"""

from __future__ import annotations

import argparse
import logging
import sys
import traceback
from pathlib import Path

from corridor import __version__
from corridor.errors import CorridorError, attached_log

EXIT_OK, EXIT_EXCEEDANCE, EXIT_INPUT, EXIT_INTERNAL, EXIT_LOCKED = 0, 1, 2, 3, 4
EXIT_LINE_REJECTED = 5
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
    u = sub.add_parser("unlock", help="print the holder of an output folder's lock and remove"
                                      " the lock")
    u.add_argument("config", type=Path, help="run configuration (TOML)")
    u.add_argument("--out", type=Path, default=None, help="output folder (overrides the config)")
    u.add_argument("--force", action="store_true",
                   help="also when the holder is a running process on this host")
    qp = sub.add_parser("qgis-plugin", help="build the QGIS Processing plugin zip")
    qp.add_argument("--zip", required=True, type=Path, help="zip file to write")
    qp.add_argument("--python", default=None,
                    help="Python the plugin runs corridor with (default: this one)")
    cal = sub.add_parser("calibrate", help="fit coating and soil factors to the [readings] and"
                                           " write the calibration file")
    cal.add_argument("config", type=Path, help="run configuration (TOML) with [readings]")
    cal.add_argument("--out", type=Path, default=None,
                     help="calibration file (default [readings] calibration_path)")
    for q in (r, c, ls, st, u, qp, cal):
        q.add_argument("-q", "--quiet", action="store_true", help="warnings and errors only")
        q.add_argument("-v", "--verbose", action="store_true", help="debug messages")
    return p


def _console(args) -> None:
    from corridor import progress
    from corridor.runner import FileOnly

    level = logging.WARNING if args.quiet else logging.DEBUG if args.verbose else logging.INFO
    progress.set_quiet(args.quiet)
    handler = progress.ConsoleHandler(sys.stderr)
    handler.setLevel(level)
    handler.setFormatter(logging.Formatter("corridor: %(levelname)s: %(message)s"))
    handler.addFilter(FileOnly())
    root = logging.getLogger("corridor")
    root.setLevel(logging.DEBUG)
    # a second call (tests, an embedding program) replaces the console handler of the first
    for old in [h for h in root.handlers if isinstance(h, progress.ConsoleHandler)]:
        root.removeHandler(old)
    root.addHandler(handler)


def check(cfg) -> int:
    """Validate layers and the limit set without computing; list every problem.

    Prints a plain-text summary (usable features per layer, rejected
    features) on standard output. Exit 2 when a problem is found, or when the
    power line layer or an asset layer yields no usable feature.
    """
    from corridor.errors import InputError
    from corridor.io.layers import read_inputs

    problems: list[str] = []
    inputs = None
    try:
        inputs = read_inputs(cfg)
    except InputError as exc:
        problems.extend(exc.problems)
    try:
        from corridor.steps import load_config_limit_set

        load_config_limit_set(cfg)
    except CorridorError as exc:
        problems.extend(getattr(exc, "problems", [str(exc)]))
    empty: list[str] = []
    if inputs is not None:
        from corridor.pipeline import side_input_problems

        problems.extend(side_input_problems(cfg, inputs))  # series, readings, polygon ids
        for row in inputs.rejected.rows:
            log.warning("would reject layer %s feature %s field %s: %s", row["layer"],
                        row["feature_id"], row["field"], row["reason"])
        summary = _usable_summary(cfg, inputs)
        print("corridor check: " + str(cfg.path))
        for label, n_usable, n_rejected in summary:
            print(f"  {label}: {n_usable} usable, {n_rejected} rejected")
            if n_usable == 0 and (label.startswith("power lines") or label.startswith("assets")):
                empty.append(label)
        print(f"  rejected features in all: {len(inputs.rejected.rows)}")
        for label in empty:
            log.warning("%s: no usable feature; a run would screen nothing from it", label)
        from corridor.pipeline import rejected_summary

        lines = rejected_summary(cfg, inputs)["power_lines"]
        if lines and not cfg.run.accept_rejected_lines:
            log.warning("%d power line(s) would be rejected: a run would publish incomplete"
                        " results and exit %d", len(lines), EXIT_LINE_REJECTED)
    if problems:
        for line in problems:
            print(f"corridor: error: {line}", file=sys.stderr)
        return EXIT_INPUT
    if empty:
        return EXIT_INPUT
    print("  config and layers are usable")
    return EXIT_OK


def _usable_summary(cfg, inputs) -> list[tuple[str, int, int]]:
    """(layer description, usable features, rejected features) per configured layer."""
    rejected: dict[str, set] = {}
    for row in inputs.rejected.rows:
        rejected.setdefault(row["layer"], set()).add(row["feature_id"])

    def n_rej(label: str) -> int:
        return len(rejected.get(label, ()))

    out = [(f"power lines ({cfg.power_lines.label})", len(inputs.lines),
            n_rej(cfg.power_lines.label))]
    has_source = "source_layer" in inputs.assets.columns
    for src in cfg.assets:
        n = (int((inputs.assets["source_layer"] == src.label).sum()) if has_source
             else len(inputs.assets) if len(cfg.assets) == 1 else -1)
        out.append((f"assets ({src.label})", n, n_rej(src.label)))
    for role, name in (("soil", "soil"), ("grounds", "grounds"), ("towers", "towers"),
                       ("substations", "substations")):
        src, frame = getattr(cfg, role), getattr(inputs, role)
        if src is not None:
            out.append((f"{name} ({src.label})", 0 if frame is None else len(frame),
                        n_rej(src.label)))
    return out


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


def unlock(cfg, out: Path | None, force: bool) -> int:
    """``corridor unlock CONFIG``: print the lock's holder, then remove the lock."""
    from corridor.lock import break_lock

    folder = Path(out or cfg.output_dir).resolve()
    text, removed = break_lock(folder, force=force)
    print(text)
    if removed:
        print(f"lock of {folder} removed")
    return EXIT_OK


def run_exit_code(run, fail_on_exceedance: bool) -> int:
    """Exit code of a published run: 5 (a power line rejected) before 1 (exceedance)."""
    rejected = int(run.counts.get("rejected_power_lines", 0) or 0)
    if rejected:
        if run.config.run.accept_rejected_lines:
            log.warning("%d power line(s) rejected; accepted by run.accept_rejected_lines:"
                        " the results are incomplete for them", rejected)
        else:
            log.warning("%d power line(s) rejected: the outputs are published but incomplete"
                        " (exit %d; set run.accept_rejected_lines = true to accept this)",
                        rejected, EXIT_LINE_REJECTED)
            return EXIT_LINE_REJECTED
    if int(run.counts.get("segments_exceeding", 0) or 0) and fail_on_exceedance:
        return EXIT_EXCEEDANCE
    return EXIT_OK


def crash_log_path(out: Path | None) -> Path:
    """Where an internal error's traceback goes: beside the output folder, else the temp folder.

    Never the working folder or the file system root.
    """
    import os
    import tempfile

    if out is not None:
        from corridor.runner import last_error_path

        return last_error_path(out)
    return Path(tempfile.gettempdir()) / f"corridor-crash-{os.getpid()}.log"


def _write_crash_log(out: Path | None, text: str) -> Path | None:
    first = crash_log_path(out)
    fallback = crash_log_path(None)
    for where in dict.fromkeys([first, fallback]):
        try:
            where.write_text(text, encoding="utf-8")
            return where
        except OSError:
            continue
    return None


def _quiet_stdout() -> None:
    """After a broken pipe: point stdout at the null device so the exit flush stays quiet."""
    import os

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
    except (OSError, ValueError, AttributeError):
        pass


def _flushed(code: int) -> int:
    """Flush stdout inside the command, so a closed pipe is met here, not at exit."""
    sys.stdout.flush()
    return code


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    _console(args)
    from corridor.config import load_config
    from corridor.errors import storage_problem
    from corridor.lock import LockError

    out = None
    try:
        if args.command == "steps":
            return _flushed(list_steps(args.json))
        if args.command == "step":
            return run_one_step(args)
        if args.command == "qgis-plugin":
            from corridor.qgis.build import main as build_plugin

            return build_plugin(["--zip", str(args.zip)]
                                + (["--python", args.python] if args.python else []))
        cfg = load_config(args.config)
        if args.command == "check":
            return _flushed(check(cfg))
        if args.command == "unlock":
            return _flushed(unlock(cfg, args.out, args.force))
        if args.command == "calibrate":
            from corridor.reconcile.run import calibrate

            calibrate(cfg, args.out)
            return EXIT_OK
        from corridor.runner import publish
        from corridor.steps import asset_stages, run_stages

        out = Path(args.out or cfg.output_dir).resolve()
        run = publish(cfg, out, asset_stages(), run_stages())
        from corridor.runner import published_files

        for what, path in published_files(out):
            log.info("  %s: %s", what, path)
        return run_exit_code(run, args.fail_on_exceedance)
    except BrokenPipeError:
        _quiet_stdout()
        return EXIT_OK
    except LockError as exc:
        print(f"corridor: error: {exc}", file=sys.stderr)
        return EXIT_LOCKED
    except CorridorError as exc:
        for line in getattr(exc, "problems", [str(exc)]):
            print(f"corridor: error: {line}", file=sys.stderr)
        where = attached_log(exc)
        if where is not None:
            print(f"corridor: log of the failed run: {where}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("corridor: interrupted; previous outputs left in place", file=sys.stderr)
        return EXIT_INTERNAL
    except Exception as exc:  # the CLI boundary: anything else is an internal error
        cause = storage_problem(exc)
        if cause is not None:  # disk full, read-only, no permission: the user's to fix
            print(f"corridor: error: the file system refused: {cause}", file=sys.stderr)
            print("corridor: nothing was published; previous outputs left in place",
                  file=sys.stderr)
            return EXIT_INPUT
        where = attached_log(exc)
        if where is None:
            where = _write_crash_log(out, traceback.format_exc())
        print(f"corridor: internal error ({type(exc).__name__}); previous outputs left in"
              f" place; traceback in {where}", file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
