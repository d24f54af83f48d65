"""Running a screening end to end and publishing its outputs.

One run at a time per output folder (:mod:`corridor.lock`). corridor owns
only the files it wrote in the output folder, listed in the folder's
manifest (:mod:`corridor.owned`): an existing folder holding other files and
no manifest, or an output path that is a file, is refused before any
computing (exit 2). Outputs and the run's log (``corridor.log``) are written
into a marked staging folder inside the output folder and moved into place
file by file (each rename atomic) through a publish journal, only when
complete; no folder is renamed, so the output folder may be a mount point.

A crashed, killed (SIGKILL included) or failed run leaves the previous
outputs intact, or, when killed after the journal was written, the next run
finishes the publish first. Files corridor did not write are never deleted,
moved or overwritten.

A failure before publishing keeps its log beside the output folder as
``<name>.last-error.log``.
"""

from __future__ import annotations

import logging
import os
import shutil
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from corridor import owned as owned_mod
from corridor.config import Config
from corridor.errors import CorridorError, StorageError, storage_problem
from corridor.io.outputs import SAFETY_CAUTION, write_csv, write_json, write_layer
from corridor.lock import LockError, OutputLock
from corridor.pipeline import Run, finalize, output_paths, versions

log = logging.getLogger(__name__)

LOG_NAME = "corridor.log"
LOG_FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"


def _input_files(cfg: Config) -> list[Path]:
    """The input datasets of a run (config, arrangements, every layer path), once each.

    A path names a dataset, which may be several files (Shapefile sidecars,
    GeoPackage ``-wal``) or a folder: :mod:`corridor.io.fingerprint` hashes them all.
    """
    paths = [cfg.path, cfg.arrangements_path, cfg.power_lines.path]
    paths += [a.path for a in cfg.assets]
    paths += [s.path for s in (cfg.soil, cfg.grounds, cfg.towers) if s is not None]
    seen: list[Path] = []
    for p in paths:
        if p not in seen:
            seen.append(p)
    return seen


def pause_for_test(point: str) -> None:
    """Test hook: sleep at a named point when ``CORRIDOR_TEST_PAUSE_AT`` names it.

    ``CORRIDOR_TEST_PAUSE_AT`` is a comma list of points (``compute``, ``write``,
    ``publish``: before the journal, ``move``: after each file moved into place);
    ``CORRIDOR_TEST_PAUSE_FILE``, if set, is created on arrival so a
    test knows the run is there; ``CORRIDOR_TEST_PAUSE_S`` is the sleep [s]
    (default 60).
    """
    points = os.environ.get("CORRIDOR_TEST_PAUSE_AT", "")
    if point not in [p.strip() for p in points.split(",") if p.strip()]:
        return
    marker = os.environ.get("CORRIDOR_TEST_PAUSE_FILE")
    if marker:
        Path(marker).write_text(point, encoding="utf-8")
    time.sleep(float(os.environ.get("CORRIDOR_TEST_PAUSE_S", "60")))


def cache_folder(cfg: Config, out_dir: Path) -> Path | None:
    """The cache folder of a run (``run.cache_dir``), or None for no cache."""
    value = str(cfg.run.get("cache_dir", "auto"))
    if value == "":
        return None
    if value == "auto":
        return out_dir.parent / f"{out_dir.name}.cache"
    return (cfg.path.parent / value).resolve()


#: Outputs that depend only on the per-asset results and the inputs: a run whose
#: inputs are all unchanged since the previous run may reuse them as they are.
REUSABLE_OUTPUTS = ("screening.gpkg", "exposures.csv", "rejected.csv", "grounding_sites.csv")


def input_records(cfg: Config) -> list[dict]:
    """Path, SHA-256 and modification time of every input dataset of a run.

    ``sha256`` is :func:`corridor.io.fingerprint.dataset_sha256` (for a
    single-file dataset, the SHA-256 of its bytes); ``modified_utc`` is the
    latest modification time of the dataset's files; ``files`` counts them.
    """
    from corridor.io.fingerprint import dataset_files, dataset_modified, dataset_sha256

    out = []
    for p in _input_files(cfg):
        mtime = dataset_modified(p)
        out.append({"path": str(p), "sha256": dataset_sha256(p),
                    "modified_utc": (datetime.fromtimestamp(mtime, UTC)
                                     .isoformat(timespec="seconds") if mtime is not None
                                     else ""),
                    "files": len(dataset_files(p))})
    return out


def _write_gpkg(run: Run, path: Path) -> None:
    """Every layer of ``screening.gpkg``, then its styles and field descriptions."""
    from corridor.io.styles import apply_styles

    write_layer(run.exposure_table, path, "exposures")
    write_layer(run.segment_table, path, "segments")
    pause_for_test("write")
    layers = ["exposures", "segments"]
    for name, table in run.extra_tables.items():
        if hasattr(table, "geometry") and name.startswith("layer:"):
            write_layer(table, path, name.split(":", 1)[1])
            layers.append(name.split(":", 1)[1])
    apply_styles(path, layers, review_threshold=getattr(run.limit_set, "review_threshold", 0.5))


def write_outputs(run: Run, out_dir: Path, previous: dict | None = None,
                  reuse_from: Path | None = None,
                  reuse_names: set[str] | None = None) -> dict[str, Path]:
    """Write every output of a finished run into ``out_dir``.

    The GeoPackage, the other formats, the CSV files and the report, then
    ``run.json`` (with the write and report times) last. The layers are
    written one after the other on this thread: pyogrio holds the GIL while
    GDAL inserts rows, so a second thread would not overlap the report with
    them (measured: the report took 6x longer beside a GeoPackage write).

    Parameters
    ----------
    previous : dict, optional
        The previous run's run.json, for the report's change section.
    reuse_from : Path, optional
        The previous output folder, when every input is unchanged since then:
        its layer files are copied instead of written again (same bytes as a
        fresh write would give in content; much faster for large runs).
    reuse_names : set of str, optional
        The files of ``reuse_from`` that corridor wrote (its manifest); only
        these are copied. None: every file of the names corridor writes.
    """
    from corridor.io.formats import write_extra_formats
    from corridor.report import write_report

    out_dir.mkdir(parents=True, exist_ok=True)
    paths = output_paths(out_dir)
    t0 = time.perf_counter()
    formats = list(run.config.run.get("output_formats", ["gpkg"]))
    records = input_records(run.config)
    reused = False
    def ours(name: str) -> bool:
        return reuse_names is None or name in reuse_names

    if reuse_from is not None and all((reuse_from / n).exists() and ours(n)
                                      for n in REUSABLE_OUTPUTS):
        for name in REUSABLE_OUTPUTS:
            shutil.copy2(reuse_from / name, out_dir / name)
        for fmt_file in sorted(reuse_from.iterdir()):
            if fmt_file.suffix in (".fgb", ".parquet") and ours(fmt_file.name):
                shutil.copy2(fmt_file, out_dir / fmt_file.name)
        reused = True
        log.info("inputs unchanged since the previous run: its layers are reused")
        pause_for_test("write")
    else:
        _write_gpkg(run, paths["gpkg"])
        write_extra_formats(run, out_dir, formats)
        write_csv(run.exposure_table.drop(columns="geometry"), paths["exposures_csv"])
        write_csv(run.inputs.rejected.frame(), paths["rejected_csv"])
    for name, table in run.extra_tables.items():
        if name.startswith("csv:"):
            target = out_dir / name.split(":", 1)[1]
            if not (reused and target.name in REUSABLE_OUTPUTS):
                write_csv(pd.DataFrame(table.drop(columns="geometry", errors="ignore")),
                          target)
            paths[target.stem] = target
    run.timings_s["write"] = round(time.perf_counter() - t0, 4)
    t1 = time.perf_counter()
    paths["report"] = write_report(run, out_dir, previous, inputs=records)
    run.timings_s["report"] = round(time.perf_counter() - t1, 4)
    run.counts["outputs_reused"] = int(reused)
    record = {
        "caution": SAFETY_CAUTION,
        "finished_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "config_file": str(run.config.path),
        "inputs": records,
        "resolved_config": dict(run.config.resolved),
        "versions": versions(),
        "crs": run.inputs.crs.to_string(),
        "counts": run.counts,
        "timings_s": run.timings_s,
        "warnings": run.inputs.warnings[:1000],
    }
    record.update(run.extra_tables.get("json", {}))
    write_json(record, paths["run_json"])
    return paths


def inputs_unchanged(run: Run, previous_record: dict | None) -> bool:
    """True when every input file, every asset key and the config match the last run."""
    if not previous_record:
        return False
    if run.counts.get("assets_recomputed", 1) != 0:
        return False
    try:
        before = {(d["path"], d["sha256"]) for d in previous_record.get("inputs", [])}
    except (TypeError, KeyError):
        return False
    from corridor.io.fingerprint import dataset_sha256

    now = {(str(p), dataset_sha256(p)) for p in _input_files(run.config)}
    state = run.extra_tables.get("json", {}).get("inputs_state")
    return (before == now and state is not None
            and previous_record.get("inputs_state") == state
            and previous_record.get("versions", {}).get("corridor") == versions()["corridor"])


# -- publishing and recovery (see corridor.owned) --------------------------------

def recover(out_dir: Path) -> None:
    """Clean up after dead runs (call while holding the lock): :func:`corridor.owned.recover`."""
    owned_mod.recover(out_dir)


def last_error_path(out_dir: Path) -> Path:
    """Where the log of a run that failed before publishing is kept.

    ``<name>.last-error.log`` beside the output folder; in the system's
    temporary folder when the output folder is a file system root.
    """
    out_dir = Path(out_dir)
    if out_dir.parent == out_dir or not out_dir.name:
        return Path(tempfile.gettempdir()) / "corridor.last-error.log"
    return out_dir.parent / f"{out_dir.name}.last-error.log"


# -- the run ------------------------------------------------------------------

#: Fields whose filled-in defaults run.json lists by feature id (safety relevant).
DEFAULT_IDS_LISTED = ("fault_current_start_ka", "fault_current_end_ka", "clearing_time_s",
                      "post_type", "coating_resistance_ohm_m2", "coating_type",
                      "start_termination", "end_termination")


def _row_role(row: dict, cfg: Config, asset_labels: set[str]) -> str:
    role = row.get("role")
    if role:
        return "power_lines" if role == "power_lines" else (
            "assets" if role == "assets" else "other")
    if row.get("layer") == cfg.power_lines.label:
        return "power_lines"
    return "assets" if row.get("layer") in asset_labels else "other"


def rejected_summary(cfg: Config, inputs) -> dict:
    """Rejected features of a run split by role.

    Returns
    -------
    dict
        ``counts``: ``rejected_power_lines``, ``rejected_assets``,
        ``rejected_other`` (features, each counted once); ``power_lines``:
        ``[{"line_id", "field", "reason"}]`` for run.json; ``assets`` and
        ``other``: the rejected rows of those roles.
    """
    asset_labels = {a.label for a in cfg.assets}
    parts: dict[str, list[dict]] = {"power_lines": [], "assets": [], "other": []}
    for row in inputs.rejected.rows:
        parts[_row_role(row, cfg, asset_labels)].append(row)

    def features(rows):
        return len({(r.get("layer"), r.get("feature_id")) for r in rows})

    return {"counts": {"rejected_power_lines": features(parts["power_lines"]),
                       "rejected_assets": features(parts["assets"]),
                       "rejected_other": features(parts["other"])},
            "power_lines": [{"line_id": str(r["feature_id"]), "field": str(r["field"]),
                             "reason": str(r["reason"])} for r in parts["power_lines"]],
            "assets": parts["assets"], "other": parts["other"]}


def log_rejected_lines(lines: list[dict]) -> None:
    """One WARNING per rejected power line: its exposures are not assessed."""
    for r in lines:
        log.warning("power line %s REJECTED (field '%s': %s): the voltages it induces are"
                    " NOT assessed; the results are incomplete", r.get("line_id"),
                    r.get("field"), r.get("reason"))


def defaults_used_record(inputs) -> dict:
    """run.json's ``defaults_used``: field -> count, with ids for the safety-relevant fields."""
    used = getattr(inputs, "defaults_used", None) or {}
    out = {}
    for fld, ids in sorted(used.items()):
        ids = [str(i) for i in ids]
        entry: dict = {"count": len(ids)}
        if fld in DEFAULT_IDS_LISTED:
            entry["ids"] = ids
        out[fld] = entry
    return out


def screen(cfg: Config, out_dir: Path, stages: dict | None = None,
           final_stages: dict | None = None) -> Run:
    """Read, compute (incrementally when a cache is configured), finalize, compare."""
    from corridor import backends, progress
    from corridor import cache as cache_mod
    from corridor import changes as changes_mod
    from corridor.io.layers import read_inputs

    compute_fn = backends.compute_function(cfg, out_dir.parent)
    total = 5
    progress.stage("read", 1, total)
    t0 = time.perf_counter()
    inputs = read_inputs(cfg)
    read_s = round(time.perf_counter() - t0, 4)
    rejected = rejected_summary(cfg, inputs)
    if len(inputs.assets) == 0:
        from corridor.errors import InputError

        raise InputError(["asset layers: no usable asset features; every one was rejected:"]
                         + [f"layer {r['layer']}: feature {r['feature_id']}: field"
                            f" '{r['field']}': {r['reason']}" for r in inputs.rejected.rows])
    pause_for_test("compute")
    progress.stage("compute", 2, total)
    t1 = time.perf_counter()
    keys = cache_mod.asset_keys(cfg, inputs)
    hash_s = round(time.perf_counter() - t1, 4)
    folder = cache_folder(cfg, out_dir)
    if folder is not None:
        with cache_mod.locked(folder) as usable:  # None: cache unusable, warned
            run = backends.incremental_compute(cache_mod, cfg, inputs, stages, usable, keys,
                                               compute_fn)
    else:
        run = compute_fn(cfg, inputs, stages)
        run.counts["assets_recomputed"] = len(inputs.assets)
        run.counts["assets_from_cache"] = 0
    run.timings_s = {"read": read_s, "hash": hash_s, **run.timings_s}
    run.counts.update(rejected["counts"])
    progress.stage("finalize", 3, total)
    finalize(run, final_stages)
    run.counts["assets_recomputed"] = int(run.counts.get("assets_recomputed", 0))
    progress.stage("compare", 4, total)
    state = changes_mod.inputs_state(run, keys)
    previous = changes_mod.read_previous(out_dir)
    frame, summary = changes_mod.compare(run, keys, state, previous,
                                         float(cfg.run.get("change_threshold", 0.1)))
    run.extra_tables["csv:changes.csv"] = frame
    extra_json = dict(run.extra_tables.get("json", {}))
    extra_json["changes"] = summary
    extra_json["inputs_state"] = state
    extra_json["rejected_power_lines"] = rejected["power_lines"]
    extra_json["defaults_used"] = defaults_used_record(inputs)
    run.extra_tables["json"] = extra_json
    progress.stage("write", 5, total)
    return run


class _FileOnly(logging.Filter):
    """Keeps records marked ``file_only`` off the console."""

    def filter(self, record: logging.LogRecord) -> bool:
        return not getattr(record, "file_only", False)


def _fixed_outputs() -> tuple[str, ...]:
    return tuple(sorted(owned_mod.FIXED_OUTPUTS))


def publish(cfg: Config, out_dir: Path | None = None, stages: dict | None = None,
            final_stages: dict | None = None) -> Run:
    """Run a screening and publish its outputs into the output folder.

    Raises
    ------
    corridor.lock.LockError
        Another run holds the output folder.
    corridor.errors.OutputFolderError
        The output path is a file, or an existing folder holds files corridor
        did not write and no manifest of corridor's (nothing is computed).
    corridor.errors.StorageError
        Disk full, read-only folder or no permission (its cause named).
    CorridorError
        Bad config or input (its log is kept as ``<out>.last-error.log``).
    """
    out_dir = Path(out_dir or cfg.output_dir).resolve()
    # read-only look first, so a refused folder gets no lock file or staging folder beside it
    owned_mod.check_output_folder(out_dir)
    lock = OutputLock(out_dir)
    try:
        out_dir.parent.mkdir(parents=True, exist_ok=True)
        lock.acquire()
    except OSError as exc:
        cause = storage_problem(exc)
        if cause is None:
            raise
        raise StorageError(f"output folder {out_dir}: cannot take the lock {lock.path}:"
                           f" {cause}") from exc
    try:
        return _publish_locked(cfg, out_dir, lock, stages, final_stages)
    finally:
        lock.release()


def _publish_locked(cfg: Config, out_dir: Path, lock: OutputLock, stages, final_stages) -> Run:
    root = logging.getLogger("corridor")
    try:
        recover(out_dir)
        owned_before = owned_mod.check_output_folder(out_dir, _fixed_outputs())
        created = not os.path.lexists(out_dir)
        staging = owned_mod.make_staging(out_dir)
    except OSError as exc:
        cause = storage_problem(exc)
        if cause is None:
            raise
        raise StorageError(f"output folder {out_dir}: {cause}") from exc
    handler: logging.Handler | None = logging.FileHandler(staging / LOG_NAME, encoding="utf-8")
    handler.setLevel(logging.DEBUG)
    handler.setFormatter(logging.Formatter(LOG_FORMAT))
    root.addHandler(handler)
    if root.level == logging.NOTSET or root.level > logging.DEBUG:
        root.setLevel(logging.DEBUG)
    published = False
    try:
        log.info("corridor run of %s into %s (PID %d)", cfg.path, out_dir, os.getpid())
        previous = _previous_record(out_dir) if "run.json" in owned_before else None
        fingerprint = input_fingerprint(cfg)
        if _can_reuse_everything(out_dir, previous, fingerprint, owned_before):
            run = reuse_previous_outputs(cfg, out_dir, staging, previous, owned_before)
        else:
            run = screen(cfg, out_dir, stages, final_stages)
            extra = dict(run.extra_tables.get("json", {}))
            extra["input_fingerprint"] = fingerprint
            run.extra_tables["json"] = extra
            reuse = out_dir if inputs_unchanged(run, previous) else None
            write_outputs(run, staging, previous, reuse_from=reuse,
                          reuse_names=set(owned_before))
        log.info("assets recomputed: %d, from cache: %d; outputs complete, publishing",
                 run.counts.get("assets_recomputed", 0),
                 run.counts.get("assets_from_cache", 0))
        if not lock.still_held():
            raise LockError(f"output folder {out_dir}: the lock {lock.path} was removed or"
                            " taken over while this run computed (`corridor unlock`?); its"
                            " outputs are not published")
        # the log file closes before the files move, so the manifest's record of it holds
        root.removeHandler(handler)
        handler.close()
        handler = None
        owned_mod.commit(out_dir, staging, owned_before)
        published = True
        try:
            last_error_path(out_dir).unlink(missing_ok=True)
        except OSError:
            pass
        log.info("outputs published to %s", out_dir)
        return run
    except BaseException as exc:
        cause = storage_problem(exc) if isinstance(exc, Exception) else None
        if isinstance(exc, CorridorError):
            for line in getattr(exc, "problems", [str(exc)]):
                log.error("%s", line, extra={"file_only": True})
        elif isinstance(exc, KeyboardInterrupt):
            log.error("interrupted", extra={"file_only": True})
        elif cause is not None:
            log.error("the file system refused: %s", cause, exc_info=True,
                      extra={"file_only": True})
        else:
            log.error("internal error", exc_info=True, extra={"file_only": True})
        target = None
        if not published:
            if handler is not None:
                handler.flush()
            target = last_error_path(out_dir)
            try:
                shutil.copyfile(staging / LOG_NAME, target)
            except OSError:
                target = None
        if target is not None:
            try:
                exc.corridor_log = target
            except AttributeError:
                pass
        if cause is not None and not isinstance(exc, CorridorError):
            err = StorageError(f"output folder {out_dir}: {cause}")
            err.corridor_log = target
            raise err from exc
        raise
    finally:
        if handler is not None:
            root.removeHandler(handler)
            handler.close()
        if not published and not os.path.lexists(out_dir / owned_mod.JOURNAL):
            # (after the journal, the staged files belong to it: the next run finishes it)
            owned_mod.remove_staging(staging)
            if created:
                try:
                    out_dir.rmdir()  # made by this run and still empty: leave no trace
                except OSError:
                    pass


def input_fingerprint(cfg: Config) -> str:
    """SHA-256 over everything a run's outputs depend on.

    Every input dataset (config, arrangements, layers: every file of each,
    :func:`corridor.io.fingerprint.dataset_sha256`) and limit-set file by
    path and content, corridor's version and source files, and the installed
    plugins. Equal fingerprints give equal outputs.
    """
    import hashlib

    from corridor import __version__
    from corridor.cache import _limit_files, code_fingerprint
    from corridor.io.fingerprint import dataset_sha256
    from corridor.registry import registry

    h = hashlib.sha256()
    for p in [*_input_files(cfg), *_limit_files(cfg)]:
        h.update(str(p).encode("utf-8", "surrogateescape"))
        h.update(dataset_sha256(p).encode())
    h.update(__version__.encode())
    h.update(code_fingerprint().encode())
    h.update(registry.fingerprint().encode())
    return h.hexdigest()


#: Files a run with unchanged inputs copies from the previous run as they are.
REUSED_WHOLE = (*REUSABLE_OUTPUTS, "report.html")


def _can_reuse_everything(out_dir: Path, previous: dict | None, fingerprint: str,
                          owned: dict | None = None) -> bool:
    return bool(previous and previous.get("input_fingerprint") == fingerprint
                and all((out_dir / n).exists() and (owned is None or n in owned)
                        for n in REUSED_WHOLE))


def reuse_previous_outputs(cfg: Config, out_dir: Path, tmp: Path, previous: dict,
                           owned: dict | None = None) -> Run:
    """Publish the previous outputs again when no input changed at all.

    Nothing is read or computed: the layers, CSVs and report are copied, the
    report's change section and ``changes.csv`` say that nothing changed, and
    run.json records the new run (same results, new time).
    """
    import re

    from corridor.changes import COLUMNS

    t0 = time.perf_counter()
    pause_for_test("compute")
    for name in REUSED_WHOLE:
        shutil.copy2(out_dir / name, tmp / name)
    pause_for_test("write")
    for f in sorted(out_dir.iterdir()):
        if f.suffix in (".fgb", ".parquet") and (owned is None or f.name in owned):
            shutil.copy2(f, tmp / f.name)
    when = previous.get("finished_utc", "?")
    html = (tmp / "report.html").read_text(encoding="utf-8")
    html = re.sub(r'<div id="changes">.*?</div>',
                  '<div id="changes"><h3>Change since the last run</h3>'
                  f"<p>Previous run finished {when}. No input changed since; the results"
                  " are those of that run.</p></div>", html, count=1, flags=re.S)
    (tmp / "report.html").write_text(html, encoding="utf-8")
    write_csv(pd.DataFrame(columns=COLUMNS), tmp / "changes.csv")
    record = dict(previous)
    counts = dict(record.get("counts", {}))
    counts.update({"assets_recomputed": 0, "outputs_reused": 1,
                   "assets_from_cache": int(counts.get("assets", 0))})
    record.update({
        "finished_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "counts": counts,
        "timings_s": {"reuse": round(time.perf_counter() - t0, 4)},
        "changes": {"unchanged_inputs": True, "previous_finished_utc": when, "rows": 0},
    })
    write_json(record, tmp / "run.json")
    log.info("no input changed since the run of %s: its outputs are published again", when)
    run = Run(cfg)
    run.counts = counts
    run.timings_s = record["timings_s"]
    lines = list(record.get("rejected_power_lines") or [])
    run.extra_tables["json"] = {"rejected_power_lines": lines,
                                "defaults_used": record.get("defaults_used", {})}
    log_rejected_lines(lines)
    return run


def _previous_record(out_dir: Path) -> dict | None:
    import json

    try:
        return json.loads((out_dir / "run.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def run_and_publish(cfg: Config, out_dir: Path | None = None) -> Run:
    """:func:`publish` with the standard stages."""
    from corridor.steps import asset_stages, run_stages

    return publish(cfg, out_dir, asset_stages(), run_stages())
