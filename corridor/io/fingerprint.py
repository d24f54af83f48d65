"""Fingerprints of input datasets: every file a dataset is made of, hashed together.

A layer path names a dataset, and a dataset is often more than one file:

Shapefile (and other stem-sharing formats: MapInfo TAB/MIF)
    every file in the same folder whose name has the same stem, compared
    case-insensitively: ``.shp .shx .dbf .prj .cpg .qix .sbn .sbx ...``.
    An edit of the ``.dbf`` alone changes the attributes.
GeoPackage, SQLite, SpatiaLite
    the database file plus its ``-wal``, ``-shm`` and ``-journal`` files.
    While a writer keeps a connection open in WAL mode, committed edits live
    in the ``-wal`` file only (SQLite, "Write-Ahead Logging",
    https://www.sqlite.org/wal.html).
folder datasets (an Esri File Geodatabase ``.gdb``, a folder of shapefiles)
    every file under the folder, sorted by relative path.

Only regular files are opened: a FIFO, a device or a socket is never read
(reading one can block forever); it enters the digest by name and kind only.
"""

from __future__ import annotations

import hashlib
import os
import stat
from pathlib import Path

#: Suffixes (lower case) of formats whose dataset is every file sharing the stem.
STEM_FORMATS = (".shp", ".shx", ".dbf", ".tab", ".mif", ".mid")

#: Suffixes (lower case) of SQLite-based single-file databases.
SQLITE_FORMATS = (".gpkg", ".sqlite", ".db", ".sqlite3", ".spatialite", ".gpkx")

#: Companion files SQLite keeps beside a database (https://www.sqlite.org/tempfiles.html).
SQLITE_COMPANIONS = ("-wal", "-shm", "-journal")

#: Companions that enter the digest. The ``-shm`` file holds no data, only an index
#: of the ``-wal`` file that readers write into too (read marks), so hashing it would
#: see a change each time any program opened the database.
HASHED_COMPANIONS = ("-wal", "-journal")

_BLOCK = 1 << 20


def _is_regular(path: Path) -> bool:
    try:
        return stat.S_ISREG(os.stat(path).st_mode)
    except OSError:
        return False


def dataset_files(path: str | os.PathLike) -> list[Path]:
    """Every file of the dataset at ``path``, main file first where there is one.

    Parameters
    ----------
    path : path-like
        A layer path as the config names it: a file, or a folder dataset.

    Returns
    -------
    list of Path
        For a folder, every file under it (symbolic links to folders are not
        followed), sorted by relative path. For a Shapefile-like file, the
        file and its sidecars of the same stem (case-insensitive), sorted by
        name. For a GeoPackage/SQLite file, the file and the existing
        ``-wal``, ``-shm`` and ``-journal`` files. Otherwise ``[path]``. A
        path that does not exist gives ``[path]``.
    """
    p = Path(path)
    try:
        is_dir = p.is_dir()
    except OSError:
        is_dir = False
    if is_dir:
        found = []
        for root, dirs, files in os.walk(p, followlinks=False):
            dirs.sort()
            for name in files:
                found.append(Path(root) / name)
        return sorted(found, key=lambda f: f.relative_to(p).as_posix())
    suffix = p.suffix.lower()
    out = [p]
    if suffix in STEM_FORMATS:
        stem = p.stem.lower()
        try:
            entries = sorted(p.parent.iterdir(), key=lambda f: f.name)
        except OSError:
            entries = []
        out += [f for f in entries
                if f.name != p.name and f.stem.lower() == stem and f.suffix
                and not _is_dir(f)]
    elif suffix in SQLITE_FORMATS:
        out += [c for c in (p.with_name(p.name + s) for s in SQLITE_COMPANIONS)
                if c.exists() or c.is_symlink()]
    return out


def _is_dir(path: Path) -> bool:
    try:
        return path.is_dir()
    except OSError:
        return False


def file_sha256(path: Path) -> str:
    """SHA-256 of a regular file's bytes; of a marker naming the kind otherwise.

    A missing file hashes as ``missing``, a FIFO, device or socket as
    ``special`` (never opened), so that hashing never blocks or fails.
    """
    h = hashlib.sha256()
    try:
        mode = os.stat(path).st_mode
    except OSError:
        h.update(b"\x00missing")
        return h.hexdigest()
    if not stat.S_ISREG(mode):
        h.update(b"\x00special")
        return h.hexdigest()
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(_BLOCK), b""):
                h.update(block)
    except OSError as exc:
        h = hashlib.sha256(f"\x00unreadable {exc.errno}".encode())
    return h.hexdigest()


def dataset_sha256(path: str | os.PathLike) -> str:
    """One SHA-256 over the names and contents of every file of a dataset.

    For a dataset that is a single regular file this is the SHA-256 of its
    bytes (what ``sha256sum`` prints). Otherwise it is the SHA-256 over, per
    file of :func:`dataset_files` (``-shm`` files excluded, see
    :data:`HASHED_COMPANIONS`; a ``-wal`` or ``-journal`` file of 0 bytes holds no
    change and is left out too), its name relative to the dataset's folder and
    the SHA-256 of its bytes.

    Parameters
    ----------
    path : path-like

    Returns
    -------
    str
        64 hexadecimal digits.
    """
    p = Path(path)
    shm = p.name + "-shm"
    companions = {p.name + s for s in HASHED_COMPANIONS}
    files = [f for f in dataset_files(p)
             if f.name != shm and not (f.name in companions and _size(f) == 0)]
    if len(files) == 1 and files[0] == p and _is_regular(p):
        return file_sha256(p)
    base = p if _is_dir(p) else p.parent
    h = hashlib.sha256()
    h.update(b"corridor-dataset-1\x1e")
    for f in files:
        try:
            name = f.relative_to(base).as_posix()
        except ValueError:
            name = f.name
        h.update(name.encode("utf-8", "surrogateescape"))
        h.update(b"\x1f")
        h.update(file_sha256(f).encode())
        h.update(b"\x1e")
    return h.hexdigest()


def _size(path: Path) -> int | None:
    try:
        return os.stat(path).st_size
    except OSError:
        return None


def dataset_modified(path: str | os.PathLike) -> float | None:
    """Latest modification time [s since the epoch] of the dataset's files, or None."""
    times = []
    for f in dataset_files(path):
        try:
            times.append(os.stat(f).st_mtime)
        except OSError:
            continue
    return max(times) if times else None
