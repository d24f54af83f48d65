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
from pathlib import Path

from corridor import owned as owned_mod
from corridor.compute import Run
from corridor.config import Config
from corridor.errors import CorridorError, StorageError, attach_log, storage_problem
from corridor.io.provenance import input_fingerprint, inputs_unchanged
from corridor.io.write import EarlyLayers, write_outputs
from corridor.lock import LockError, OutputLock
from corridor.pipeline import screen

log = logging.getLogger(__name__)

LOG_NAME = "corridor.log"
LOG_FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"


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


class FileOnly(logging.Filter):
    """Keeps records marked ``file_only`` off the console."""

    def filter(self, record: logging.LogRecord) -> bool:
        return not getattr(record, "file_only", False)


class PublishedPaths(logging.Filter):
    """Names the published path of a file instead of its staging path, in every log record.

    Outputs are written into the staging folder and moved, under the same names,
    into the output folder when the run publishes; a message naming
    ``<out>/.corridor-staging-<pid>/report.html`` names ``<out>/report.html``
    instead, where the user finds the file (and where it is once the run ends;
    a run that fails says that nothing was published).
    """

    def __init__(self, staging: Path, out_dir: Path):
        super().__init__()
        self.staging = str(staging)
        self.out_dir = str(out_dir)

    def filter(self, record: logging.LogRecord) -> bool:
        if isinstance(record.msg, str) and (self.staging in record.msg or any(
                isinstance(a, str | os.PathLike) and self.staging in os.fspath(a)
                for a in (record.args if isinstance(record.args, tuple) else ()))):
            record.msg = record.getMessage().replace(self.staging, self.out_dir)
            record.args = ()
        return True


def published_files(out_dir: Path) -> list[tuple[str, Path]]:
    """The main published outputs of a run, ``(what, path)``, for the final summary."""
    out_dir = Path(out_dir)
    wanted = [("report", "report.html"), ("grounding work list", "grounding_sites.csv"),
              ("layers", "screening.gpkg"), ("exposures", "exposures.csv"),
              ("rejected features", "rejected.csv"), ("changes", "changes.csv"),
              ("run record", "run.json"), ("caution", "CAUTION.txt"), ("log", LOG_NAME)]
    return [(what, out_dir / name) for what, name in wanted if (out_dir / name).exists()]


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
    file_handler = logging.FileHandler(staging / LOG_NAME, encoding="utf-8")
    file_handler.setLevel(logging.DEBUG)
    file_handler.setFormatter(logging.Formatter(LOG_FORMAT))
    root.addHandler(file_handler)
    handler: logging.Handler | None = file_handler
    renamer = PublishedPaths(staging, out_dir)
    renamed = list(root.handlers)
    for h in renamed:
        h.addFilter(renamer)
    if root.level == logging.NOTSET or root.level > logging.DEBUG:
        root.setLevel(logging.DEBUG)
    published = False
    early = None
    try:
        log.info("corridor run of %s into %s (PID %d)", cfg.path, out_dir, os.getpid())
        previous = _previous_record(out_dir) if "run.json" in owned_before else None
        fingerprint = input_fingerprint(cfg)
        early = _early_layers(staging, previous, fingerprint, final_stages)
        run = screen(cfg, out_dir, stages, final_stages,
                     ranked=None if early is None else early_start(early))
        extra = run.record
        extra["input_fingerprint"] = fingerprint
        unchanged = bool(previous and previous.get("input_fingerprint") == fingerprint
                         and inputs_unchanged(run, previous))
        if unchanged:  # every asset came from the cache and no input changed
            extra["changes"] = {**extra.get("changes", {}), "unchanged_inputs": True}
        write_outputs(run, staging, previous, reuse_from=out_dir if unchanged else None,
                      reuse_names=set(owned_before), early=early)
        log.info("assets recomputed: %d, from cache: %d; outputs complete, publishing",
                 run.counts.get("assets_recomputed", 0),
                 run.counts.get("assets_from_cache", 0))
        if not lock.still_held():
            raise LockError(f"output folder {out_dir}: the lock {lock.path} was removed or"
                            " taken over while this run computed (`corridor unlock`?); its"
                            " outputs are not published")
        # the log file closes before the files move, so the manifest's record of it holds
        root.removeHandler(file_handler)
        file_handler.close()
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
            attach_log(exc, target)
        if cause is not None and not isinstance(exc, CorridorError):
            err = StorageError(f"output folder {out_dir}: {cause}")
            if target is not None:
                attach_log(err, target)
            raise err from exc
        raise
    finally:
        if early is not None:
            early.cancel()  # an error before the outputs: the segments writer stops too
        for h in renamed:
            h.removeFilter(renamer)
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


def _early_layers(staging: Path, previous: dict | None, fingerprint: str,
                  final_stages: dict | None) -> EarlyLayers | None:
    """The early writer of the segments layer, when this run can use it.

    Not when the previous run had the same inputs (its files are likely copied, not
    written), nor when the stages after ``rank`` are not the standard ones (a stage of
    the caller's may change the segment table; the digest check would then discard
    the early file, after its CPU was spent).
    """
    from corridor.steps import run_stages

    if previous is not None and previous.get("input_fingerprint") == fingerprint:
        return None
    stages = dict(final_stages or {})
    if "rank" not in stages:
        return None
    standard = run_stages()
    later = list(stages)[list(stages).index("rank") + 1:]
    if any(name not in standard or getattr(stages[name], "__code__", None)
           is not getattr(standard[name], "__code__", object()) for name in later):
        return None
    return EarlyLayers(staging / "screening.gpkg")


def early_start(early: EarlyLayers):
    """The ``ranked`` hook of :func:`corridor.compute.finalize` that starts ``early``:
    only when nothing after the ranking would change the segment table (no
    uncertainty bands, which add their columns after the stages)."""

    def ranked(run: Run, later: dict) -> None:
        if "bands" not in run.extra_tables:
            early.start(run)

    return ranked


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
