"""One job of the QGIS plugin, run with corridor's own Python (``-m corridor.qgis.engine JOB``).

The job (a JSON file written by the plugin) names the algorithm's mode and
step, the run config, the layers chosen in QGIS (replacing the config's layer
of that role, keeping its field mapping), parameter values, the output folder
and a cancel file. The engine writes a derived config into a temporary folder
(every relative path of the user's config made absolute), runs

- mode ``run``: the whole screening exactly as ``corridor run CONFIG --out
  DIR`` (:func:`corridor.cli.main`), so the outputs equal the CLI's;
- mode ``step``: :func:`corridor.steps.catalog.run_step` into a staging folder
  whose files are moved into the output folder only once the step is done,

and prints JSON lines on stdout: ``{"progress": fraction, "message": text}``,
``{"log": level, "message": text}``, and last ``{"result": {...}}``,
``{"error": {"type", "problems"}}`` or ``{"cancelled": true}``.

Cancellation: when the cancel file appears, the main thread gets a
``KeyboardInterrupt``; ``corridor run`` then discards its staging folder and
releases its lock, a step discards its staging folder: the output folder keeps
the previous outputs untouched.
"""

from __future__ import annotations

import _thread
import json
import logging
import os
import re
import shutil
import sys
import tempfile
import threading
import tomllib
from pathlib import Path

log = logging.getLogger(__name__)

#: Run settings that are paths relative to the config file.
_PATH_SETTINGS = ("output_dir", "arrangements", "cache_dir", "work_dir", "limit_set")
#: Stages of a whole run in the order they log "step NAME ..." (fraction of the bar).
_STAGES = ("read", "expose", "couple", "respond", "assess", "ground", "rank", "tables")
#: Exit codes of the job (the CLI's where it runs a whole screening).
EXIT_CANCELLED = 130


def _emit(obj: dict) -> None:
    sys.stdout.write(json.dumps(obj, default=str) + "\n")
    sys.stdout.flush()


# ------------------------------------------------------------------ TOML writing

_BARE = re.compile(r"^[A-Za-z0-9_-]+$")


def _key(k: str) -> str:
    return k if _BARE.match(k) else json.dumps(k, ensure_ascii=False)


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if v != v:
            return "nan"
        if v in (float("inf"), float("-inf")):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)  # a valid TOML basic string
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + " }"
    if isinstance(v, list | tuple):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    return json.dumps(str(v))  # dates and times


def _is_table_array(v) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def toml_text(data: dict) -> str:
    """``data`` (as :func:`tomllib.load` returns it) as TOML text."""
    lines: list[str] = []

    def table(d: dict, prefix: str) -> None:
        for k, v in d.items():
            if not isinstance(v, dict) and not _is_table_array(v):
                lines.append(f"{_key(k)} = {_value(v)}")
        for k, v in d.items():
            name = f"{prefix}.{_key(k)}" if prefix else _key(k)
            if isinstance(v, dict):
                lines.append(f"\n[{name}]")
                table(v, name)
            elif _is_table_array(v):
                for item in v:
                    lines.append(f"\n[[{name}]]")
                    table(item, name)

    table(data, "")
    return "\n".join(lines).lstrip("\n") + "\n"


# ------------------------------------------------------------------ the derived config


def derived_config(job: dict, folder: Path) -> Path:
    """Write the job's config (layers and, for a whole run, parameters applied) into ``folder``.

    Relative paths of the user's config are made absolute, so the derived file
    may live anywhere; the layers chosen in QGIS replace the config's layer of
    the same role (``assets``: the i-th chosen layer replaces the i-th
    ``[[layers.assets]]`` table), keeping its fields, kind and CRS.
    """
    from corridor.errors import ConfigError

    src = Path(job["config"]).resolve()
    with open(src, "rb") as fh:
        try:
            raw = tomllib.load(fh)
        except tomllib.TOMLDecodeError as exc:
            raise ConfigError(f"{src.name}: not valid TOML: {exc}") from None
    base = src.parent
    run = raw.setdefault("run", {})
    if not isinstance(run, dict):
        raise ConfigError(f"{src.name}: run: expected a table")
    for key in _PATH_SETTINGS:
        value = run.get(key)
        if not isinstance(value, str) or value in ("", "auto"):
            continue
        if key == "limit_set" and not (base / value).exists():
            continue  # a limit-set name, not a path
        run[key] = str((base / value).resolve())
    beside = base / "arrangements.toml"
    if "arrangements" not in run and beside.is_file():  # else corridor's shipped examples
        run["arrangements"] = str(beside.resolve())
    layers = raw.get("layers", {})
    for tables in layers.values() if isinstance(layers, dict) else ():
        for t in tables if isinstance(tables, list) else [tables]:
            if isinstance(t, dict) and isinstance(t.get("path"), str):
                t["path"] = str((base / t["path"]).resolve())
    chosen = job.get("layers") or {}
    problems = []
    for role, value in chosen.items():
        if value in (None, [], {}):
            continue
        if role == "assets":
            have = layers.get("assets", [])
            have = [have] if isinstance(have, dict) else have
            if len(value) != len(have):
                problems.append(f"parameter assets: {len(value)} layer(s) chosen, but the config"
                                f" {src.name} has {len(have)} [[layers.assets]] table(s); choose"
                                " one layer per table, in the same order, or none")
                continue
            for table, layer in zip(have, value, strict=True):
                _replace_layer(table, layer)
            continue
        if role not in layers:
            problems.append(f"parameter {role}: the config {src.name} has no [layers.{role}]"
                            " table giving its field mapping; add one")
            continue
        _replace_layer(layers[role], value)
    if problems:
        raise ConfigError(problems)
    if job.get("mode") == "run":
        run.update(job.get("params") or {})
    out = folder / src.name
    out.write_text(toml_text(raw), encoding="utf-8")
    return out


def _replace_layer(table: dict, layer: dict) -> None:
    table["path"] = layer["path"]
    if layer.get("layer"):
        table["layer"] = layer["layer"]
    else:
        table.pop("layer", None)


# ------------------------------------------------------------------ running


class _JsonLog(logging.Handler):
    """Warnings as ``{"log": ...}`` lines; a whole run's "step X ..." lines as progress."""

    def emit(self, record: logging.LogRecord) -> None:
        msg = record.getMessage()
        m = re.match(r"step (\w+) \.\.\.$", msg)
        if m and m.group(1) in _STAGES:
            _emit({"progress": (_STAGES.index(m.group(1)) + 0.5) / (len(_STAGES) + 1),
                   "message": m.group(1)})
        if record.levelno >= logging.WARNING:
            _emit({"log": record.levelname, "message": msg})


def _watch(cancel_file: Path, done: threading.Event, interrupted: threading.Event) -> None:
    while not done.wait(0.2):
        if cancel_file.exists():
            interrupted.set()
            _thread.interrupt_main()
            return


def run_job(job: dict) -> int:
    """Run a job; returns the exit code (the CLI's, or 130 when cancelled)."""
    from corridor.errors import CorridorError

    handler = _JsonLog(logging.INFO)
    root = logging.getLogger("corridor")
    root.addHandler(handler)
    root.setLevel(logging.DEBUG)
    done, interrupted = threading.Event(), threading.Event()
    cancel_file = Path(job["cancel_file"]) if job.get("cancel_file") else None
    out_dir = Path(job["out_dir"]).resolve()
    tmp = Path(tempfile.mkdtemp(prefix="corridor-qgis-"))
    staging = None
    try:
        if cancel_file is not None:
            threading.Thread(target=_watch, args=(cancel_file, done, interrupted),
                             daemon=True).start()
        cfg = derived_config(job, tmp)
        _emit({"progress": 0.0, "message": "start"})
        if job["mode"] == "run":
            from corridor.cli import EXIT_INTERNAL, main
            from corridor.config import load_config

            load_config(cfg)  # a bad config: its problems as an error line, before the run
            code = main(["run", str(cfg), "--out", str(out_dir), "-q"])
            done.set()
            if interrupted.is_set() and code == EXIT_INTERNAL:  # the CLI caught the interrupt
                _emit({"cancelled": True})
                return EXIT_CANCELLED
            _emit({"result": {"exit_code": code, "out_dir": str(out_dir),
                              "rejected": _rejected(out_dir)}})
            return code
        from corridor.steps.catalog import run_step

        out_dir.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=".corridor-qgis-", dir=out_dir.parent))

        def progress(fraction, message):
            _emit({"progress": float(fraction), "message": message})

        written = run_step(job["step"], cfg, inputs=job.get("inputs") or None,
                           outputs_dir=staging, params=job.get("params") or None,
                           progress=progress,
                           cancel=lambda: cancel_file is not None and cancel_file.exists())
        done.set()
        moved = {}
        for name, path in written.items():  # layers of a step share one GeoPackage
            target = out_dir / Path(path).name
            if Path(path).exists():
                os.replace(path, target)
            moved[name] = str(target)
        _emit({"result": {"exit_code": 0, "out_dir": str(out_dir), "outputs": moved,
                          "rejected": _rejected(out_dir) if "rejected" in written else []}})
        return 0
    except KeyboardInterrupt:
        _emit({"cancelled": True})
        return EXIT_CANCELLED
    except CorridorError as exc:
        if type(exc).__name__ == "StepCancelled":
            _emit({"cancelled": True})
            return EXIT_CANCELLED
        # LockError and other CorridorErrors carry no problem list: their text is the problem
        problems = [p.replace(str(tmp) + os.sep, "")
                    for p in getattr(exc, "problems", [str(exc)])]
        _emit({"error": {"type": type(exc).__name__, "problems": problems}})
        return 2
    finally:
        done.set()
        root.removeHandler(handler)
        shutil.rmtree(tmp, ignore_errors=True)
        if staging is not None:
            shutil.rmtree(staging, ignore_errors=True)


def _rejected(out_dir: Path) -> list[dict]:
    """Rows of ``rejected.csv`` (layer, feature, field, reason) for the Processing log."""
    path = out_dir / "rejected.csv"
    if not path.exists():
        return []
    from corridor.io.outputs import read_csv

    frame = read_csv(path, dtype=str)
    cols = [c for c in ("layer", "feature_id", "field", "reason", "role") if c in frame]
    return frame[cols].fillna("").to_dict("records")


def main(argv: list[str] | None = None) -> int:
    """``python -m corridor.qgis.engine JOB.json``."""
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) != 1:
        print("usage: python -m corridor.qgis.engine JOB.json", file=sys.stderr)
        return 2
    with open(argv[0], encoding="utf-8") as fh:
        job = json.load(fh)
    return run_job(job)


if __name__ == "__main__":
    sys.exit(main())
