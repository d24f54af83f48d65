"""The output folder: corridor replaces only the files it wrote, one atomic rename each.

corridor keeps a manifest in the output folder, ``.corridor-manifest.json``,
listing the files it wrote there (name, SHA-256, size, modification time)
and the time of the run. A run

1. refuses, before any computing, an output path that is a file, and an
   existing folder that holds files but no manifest (the user's folder:
   ``output_dir = "."`` beside the config, ``--out`` onto a documents
   folder). An empty folder is fine. A folder of an older corridor (a
   corridor ``run.json`` and only corridor's file names) is taken over;
2. writes every output into a staging folder inside the output folder,
   ``.corridor-staging-<pid>/``, marked by a ``.corridor-staging`` file;
3. fsyncs the staged files and writes a publish journal,
   ``.corridor-journal.json`` (written in the staging folder, then renamed
   into place: atomic), listing the files to move in and the files of the
   previous run that the new one no longer writes;
4. renames each staged file into place (``rename(2)`` replaces a file
   atomically), removes the listed old files, renames the new manifest into
   place, and removes the journal and the staging folder.

No folder is ever renamed, so the output folder may be a mount point. A file
the manifest does not list is never deleted, moved or overwritten: files the
user adds to an output folder stay, and a new output whose name is taken by
such a file stops the run (exit 2) before anything is replaced. An old
output the new run no longer writes is removed only if it is unchanged since
corridor wrote it (same size and modification time); otherwise it is left
and dropped from the manifest.

After a kill (SIGKILL included) the folder holds either the previous outputs
unchanged (a kill before step 3) or a journal; the next run, holding the
lock, finishes the journal (:func:`recover`), so the outputs are then the
complete new ones. :func:`recover` removes only staging folders carrying
corridor's marker (and empty ones of that name).
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import socket
from datetime import UTC, datetime
from pathlib import Path

from corridor.errors import OutputFolderError

log = logging.getLogger(__name__)

MANIFEST = ".corridor-manifest.json"
JOURNAL = ".corridor-journal.json"
STAGING_PREFIX = ".corridor-staging-"
STAGING_MARKER = ".corridor-staging"
#: Files written by an older corridor (before the manifest), taken over when
#: the folder's run.json is corridor's and nothing else is in the folder.
LEGACY_NAMES = frozenset({"screening.gpkg", "exposures.csv", "rejected.csv",
                          "grounding_sites.csv", "changes.csv", "report.html", "run.json",
                          "corridor.log"})
LEGACY_LAYERS = frozenset({"exposures", "segments", "hazards", "assets", "sites"})
#: Outputs every run writes: a foreign file under one of these names in an
#: owned folder stops the run before computing.
FIXED_OUTPUTS = LEGACY_NAMES
#: How many foreign names a refusal lists.
SHOWN = 5


# -- small file helpers ---------------------------------------------------------

def fsync_file(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _write_json_synced(data: dict, path: Path) -> None:
    with open(path, "w", encoding="utf-8") as fh:
        json.dump(data, fh, indent=1)
        fh.write("\n")
        fh.flush()
        os.fsync(fh.fileno())


def _sha256_and_sync(path: Path) -> str:
    import hashlib

    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
        os.fsync(fh.fileno())
    return h.hexdigest()


def _unchanged(path: Path, record: dict) -> bool:
    """Whether ``path`` is a regular file with the size and mtime the manifest recorded."""
    try:
        st = os.lstat(path)
    except OSError:
        return False
    import stat as stat_mod

    return (stat_mod.S_ISREG(st.st_mode) and st.st_size == record.get("size")
            and st.st_mtime_ns == record.get("mtime_ns"))


# -- reading the folder ---------------------------------------------------------

def read_manifest(out_dir: Path) -> dict | None:
    """The manifest of an output folder; None when there is none.

    Raises
    ------
    OutputFolderError
        The manifest exists but cannot be read (corridor then cannot tell
        its files from the user's).
    """
    path = Path(out_dir) / MANIFEST
    if not os.path.lexists(path):
        return None
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        files = data["files"]
        if not isinstance(files, dict) or not all(isinstance(v, dict) for v in files.values()):
            raise ValueError("'files' is not a table of files")
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise OutputFolderError(
            f"output folder {out_dir}: corridor's manifest {MANIFEST} cannot be read ({exc});"
            " corridor cannot tell its files from others. Move the folder's files you want to"
            " keep elsewhere and delete the manifest, or choose another output folder") from None
    return data


def owned_files(out_dir: Path) -> dict[str, dict]:
    """Name -> manifest record of every file corridor wrote in ``out_dir`` ({} for none)."""
    manifest = read_manifest(out_dir)
    return dict(manifest["files"]) if manifest else {}


def _is_marked_staging(path: Path) -> bool:
    return (path.name.startswith(STAGING_PREFIX) and path.is_dir() and not path.is_symlink()
            and (path / STAGING_MARKER).is_file())


def _internal(entry: Path) -> bool:
    """corridor's bookkeeping entries: manifest, journal, staging folders of its name."""
    if entry.name in (MANIFEST, JOURNAL):
        return True
    if entry.name.startswith(STAGING_PREFIX) and entry.is_dir() and not entry.is_symlink():
        return _is_marked_staging(entry) or not any(entry.iterdir())
    return False


def _steps_folder(entry: Path) -> bool:
    """``steps/``: the default output folder of ``corridor step``, holding step records."""
    if entry.name != "steps" or not entry.is_dir() or entry.is_symlink():
        return False
    if (entry / MANIFEST).is_file():
        return True
    for record in entry.glob("*.json"):
        try:
            data = json.loads(record.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        if isinstance(data, dict) and data.get("step") == record.stem and "versions" in data:
            return True
    return False


def _legacy_name(name: str) -> bool:
    if name in LEGACY_NAMES:
        return True
    stem, _, suffix = name.rpartition(".")
    return suffix in ("fgb", "parquet") and stem in LEGACY_LAYERS


def _legacy_run(out_dir: Path) -> bool:
    try:
        data = json.loads((out_dir / "run.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return (isinstance(data, dict) and "caution" in data
            and isinstance(data.get("versions"), dict) and "corridor" in data["versions"])


def check_output_folder(out_dir: Path, expected: tuple[str, ...] = ()) -> dict[str, dict]:
    """Make sure a run may publish into ``out_dir``; return the files corridor owns there.

    Parameters
    ----------
    out_dir : Path
        The resolved output folder (it need not exist).
    expected : tuple of str
        Names the run will write; one taken by a file corridor did not write
        is refused.

    Returns
    -------
    dict
        Name -> record of the files corridor wrote there ({} for a new or
        empty folder). A folder of an older corridor gets records made from
        its files as they are.

    Raises
    ------
    OutputFolderError
        The path is a file or a file system root, or the folder holds files
        corridor did not write and no manifest, or an expected name is taken.
    """
    out_dir = Path(out_dir)
    if out_dir.parent == out_dir:
        raise OutputFolderError(f"output folder {out_dir} is a file system root; choose a"
                                " folder of its own for corridor's outputs")
    if not os.path.lexists(out_dir):
        return {}
    if not out_dir.is_dir():
        raise OutputFolderError(f"output folder {out_dir} is an existing file, not a folder;"
                                " nothing was written. Choose a folder path (new, empty, or"
                                " one corridor wrote)")
    manifest = read_manifest(out_dir)
    if manifest is None and os.path.lexists(out_dir / JOURNAL):
        return {}  # an interrupted first publish: recover() finishes it under the lock
    entries = sorted(e for e in out_dir.iterdir() if not _internal(e))
    if manifest is None:
        foreign = [e for e in entries if not _steps_folder(e)]
        if not foreign:
            return {}
        if _legacy_run(out_dir) and all(e.is_file() and not e.is_symlink()
                                        and _legacy_name(e.name) for e in foreign):
            log.info("output folder %s was written by an older corridor (no manifest);"
                     " its %d files are taken over as corridor's", out_dir, len(foreign))
            records = {}
            for e in foreign:
                st = e.stat()
                records[e.name] = {"size": st.st_size, "mtime_ns": st.st_mtime_ns}
            return records
        shown = ", ".join(e.name + ("/" if e.is_dir() else "") for e in foreign[:SHOWN])
        more = f" and {len(foreign) - SHOWN} more" if len(foreign) > SHOWN else ""
        raise OutputFolderError(
            f"output folder {out_dir} already holds files corridor did not write ({shown}"
            f"{more}) and no corridor manifest ({MANIFEST}); corridor never replaces or"
            " deletes files it did not write, so nothing was computed or written. Choose a"
            " new or empty folder (run.output_dir or --out)")
    owned = dict(manifest["files"])
    taken = [n for n in expected if n not in owned and os.path.lexists(out_dir / n)]
    if taken:
        raise OutputFolderError(_taken_message(out_dir, taken))
    return owned


def _taken_message(out_dir: Path, taken: list[str]) -> str:
    return (f"output folder {out_dir}: {', '.join(taken[:SHOWN])}"
            f"{' ...' if len(taken) > SHOWN else ''} not written by corridor (not in its"
            f" manifest {MANIFEST}) but named like an output of this run; corridor never"
            " overwrites such files, so nothing was published. Rename or move them")


# -- staging --------------------------------------------------------------------

def staging_path(out_dir: Path) -> Path:
    return Path(out_dir) / f"{STAGING_PREFIX}{os.getpid()}"


def make_staging(out_dir: Path) -> Path:
    """Create the (marked) staging folder of this process inside ``out_dir``."""
    from corridor.lock import process_start_tick

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    path = staging_path(out_dir)
    if os.path.lexists(path):  # left by an earlier run in this same process
        remove_staging(path)
    path.mkdir()
    marker = {"pid": os.getpid(), "host": socket.gethostname(),
              "start_tick": process_start_tick(os.getpid()),
              "created_utc": datetime.now(UTC).isoformat(timespec="seconds")}
    _write_json_synced(marker, path / STAGING_MARKER)
    return path


def remove_staging(path: Path) -> bool:
    """Remove a staging folder if it carries corridor's marker (or is empty)."""
    path = Path(path)
    if _is_marked_staging(path):
        shutil.rmtree(path, ignore_errors=True)
        return not os.path.lexists(path)
    try:
        path.rmdir()  # only when empty: an empty folder loses nothing
        return True
    except OSError:
        return False


# -- publishing -----------------------------------------------------------------

def commit(out_dir: Path, staging: Path, owned_before: dict[str, dict]) -> dict:
    """Publish every file of ``staging`` into ``out_dir`` (see the module docstring).

    Parameters
    ----------
    out_dir : Path
        The output folder (holding ``staging``).
    staging : Path
        The marked staging folder with the complete outputs.
    owned_before : dict
        The files corridor owned in ``out_dir`` before this run
        (:func:`check_output_folder`).

    Returns
    -------
    dict
        The new manifest.

    Raises
    ------
    OutputFolderError
        A staged name is taken by a file corridor did not write (nothing is
        replaced then).
    """
    out_dir, staging = Path(out_dir), Path(staging)
    names = sorted(p.name for p in staging.iterdir()
                   if p.name not in (STAGING_MARKER, MANIFEST, JOURNAL) and p.is_file())
    taken = [n for n in names if n not in owned_before and os.path.lexists(out_dir / n)]
    taken += [n for n in names if n in owned_before and (out_dir / n).is_dir()]
    if taken:
        raise OutputFolderError(_taken_message(out_dir, taken))
    when = datetime.now(UTC).isoformat(timespec="seconds")
    records = {}
    for n in names:
        sha = _sha256_and_sync(staging / n)
        st = (staging / n).stat()
        records[n] = {"sha256": sha, "size": st.st_size, "mtime_ns": st.st_mtime_ns}
    from corridor import __version__

    manifest = {"written_by": "corridor", "corridor_version": __version__, "run_utc": when,
                "note": "files corridor wrote in this folder; it replaces or removes only"
                        " these, and never other files", "files": records}
    _write_json_synced(manifest, staging / MANIFEST)
    journal = {"staging": staging.name, "run_utc": when, "move": names,
               "replace": {n: owned_before[n] for n in names if n in owned_before},
               "remove": {n: r for n, r in owned_before.items() if n not in records}}
    _write_json_synced(journal, staging / "journal.json")
    fsync_dir(staging)
    os.replace(staging / "journal.json", out_dir / JOURNAL)  # the commit point
    fsync_dir(out_dir)
    roll_forward(out_dir, journal)
    return manifest


def roll_forward(out_dir: Path, journal: dict) -> None:
    """Finish a committed publish; safe to repeat after a kill at any point."""
    out_dir = Path(out_dir)
    staging = out_dir / str(journal.get("staging", ""))
    inside = staging.parent == out_dir and staging.name.startswith(STAGING_PREFIX)
    replace = journal.get("replace", {}) or {}
    for n in journal.get("move", []):
        src = staging / n
        if not inside or Path(n).name != n or not src.is_file():
            continue  # moved already (or not a name of this folder)
        dst = out_dir / n
        if n in replace and os.path.lexists(dst) and not _unchanged(dst, replace[n]):
            log.warning("%s was changed since corridor wrote it; replaced by the new output"
                        " (files listed in %s are corridor's; edit copies of them)", dst,
                        MANIFEST)
        os.replace(src, dst)
    for n, record in (journal.get("remove", {}) or {}).items():
        p = out_dir / n
        if Path(n).name != n or not os.path.lexists(p):
            continue
        if _unchanged(p, record):
            p.unlink()
            log.info("removed %s: the previous run wrote it and this run does not", p)
        else:
            log.warning("%s was written by an earlier run but changed since; left in place"
                        " and no longer listed as corridor's", p)
    if inside and (staging / MANIFEST).is_file():
        os.replace(staging / MANIFEST, out_dir / MANIFEST)
    fsync_dir(out_dir)
    (out_dir / JOURNAL).unlink(missing_ok=True)
    if inside:
        remove_staging(staging)
    fsync_dir(out_dir)


def recover(out_dir: Path) -> None:
    """Clean up after dead runs (call while holding the lock).

    Finishes a publish journal left by a killed run, then removes staging
    folders of dead runs that carry corridor's marker (and empty folders of
    that name). Nothing else is touched.

    Raises
    ------
    OutputFolderError
        A journal exists but cannot be read.
    """
    from corridor.lock import pid_alive

    out_dir = Path(out_dir)
    if not out_dir.is_dir():
        return
    jpath = out_dir / JOURNAL
    if os.path.lexists(jpath):
        try:
            journal = json.loads(jpath.read_text(encoding="utf-8"))
            if not isinstance(journal, dict):
                raise ValueError("not a table")
        except (OSError, ValueError) as exc:
            raise OutputFolderError(
                f"output folder {out_dir}: corridor's publish journal {JOURNAL} cannot be read"
                f" ({exc}); check the folder's files and delete the journal") from None
        log.warning("output folder %s: finishing the publish of the run of %s, which was"
                    " interrupted", out_dir, journal.get("run_utc", "?"))
        roll_forward(out_dir, journal)
    for entry in sorted(out_dir.iterdir()):
        if not entry.name.startswith(STAGING_PREFIX) or entry.is_symlink() or not entry.is_dir():
            continue
        if _is_marked_staging(entry):
            try:
                marker = json.loads((entry / STAGING_MARKER).read_text(encoding="utf-8"))
            except (OSError, ValueError):
                marker = {}
            marker = marker if isinstance(marker, dict) else {}
            try:
                pid = int(marker.get("pid", -1))
            except (TypeError, ValueError):
                pid = -1
            if (pid != os.getpid() and marker.get("host") == socket.gethostname()
                    and pid_alive(pid, marker.get("start_tick"))):
                continue
        if remove_staging(entry):
            log.info("removed the staging folder %s of a dead run", entry.name)
