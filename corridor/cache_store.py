"""The cache folder of per-asset results: manifest, generations, checksums, lock.

Storage side of :mod:`corridor.cache` (layout and guarantees in its docstring):
:class:`Cache` owns a folder through its manifest, writes one generation per
run and checks each asset's rows against their count and checksum
(:func:`asset_checksums`) when reading them; :func:`locked` holds the folder's
lock. The names are importable from :mod:`corridor.cache` too.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import logging
import os
import re
import secrets
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from corridor import __version__
from corridor.partitions import read_table, table_file_name, write_table

log = logging.getLogger(__name__)

#: Version of the cache layout; a cache of another format is recomputed.
FORMAT = 2

__all__ = ["CHECKSUM", "DESKTOP_FILES", "FORMAT", "MARKER", "MARKER_KEY", "Cache",
           "asset_checksums", "locked"]


#: The cache's manifest, the only file corridor writes at the top of a cache folder.
MARKER = "corridor-cache.json"
#: Key of the manifest that marks a folder as corridor's cache (value: :data:`FORMAT`).
MARKER_KEY = "corridor_cache"
#: How per-asset checksums are made; a cache made another way is recomputed.
CHECKSUM = f"rows-v2-pandas-{pd.__version__}"
#: Files a desktop's file manager leaves in any folder it shows: a folder holding only
#: these counts as empty (they are never deleted).
DESKTOP_FILES = frozenset({".DS_Store", "Thumbs.db", "desktop.ini", ".directory"})
_GEN_NAME = re.compile(r"^g[0-9a-f]+-\d+(-\d+)?$")
_LEGACY_TMP = re.compile(r"^index\.json\.tmp-\d+$")
_MANIFEST_TMP = re.compile(rf"^\.{re.escape(MARKER)}\.tmp-\d+-[0-9a-f]+$")


def _plain_name(name) -> bool:
    """A file or folder name with no path in it (what the manifest may list)."""
    return (isinstance(name, str) and name not in ("", ".", "..") and "/" not in name
            and "\\" not in name and "\x00" not in name)


_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_S30, _S27, _S31 = np.uint64(30), np.uint64(27), np.uint64(31)


def _mix64(x: np.ndarray) -> np.ndarray:
    """The SplitMix64 finaliser (Steele, Lea, Flood 2014) on a uint64 array (wraps)."""
    x = x ^ (x >> _S30)
    x = x * _M1
    x = x ^ (x >> _S27)
    x = x * _M2
    return x ^ (x >> _S31)


def _value_hashes(s: pd.Series) -> np.ndarray:
    """A 64-bit hash of each value of a column (uint64)."""
    if isinstance(s.dtype, gpd.array.GeometryDtype):
        wkb = shapely.to_wkb(np.asarray(s.array, dtype=object), output_dimension=3)
        return pd.util.hash_array(np.asarray(wkb, dtype=object))
    if isinstance(s.dtype, np.dtype) and s.dtype.kind in "fiub":
        v = s.to_numpy()
        if v.dtype.itemsize != 8:
            v = v.astype(np.float64 if v.dtype.kind == "f" else np.int64)
        return _mix64(np.ascontiguousarray(v).view(np.uint64))
    return pd.util.hash_pandas_object(s, index=False).to_numpy(np.uint64)


def _row_hashes(frame: pd.DataFrame) -> np.ndarray:
    """A 64-bit hash of each row: every value, in column order (uint64)."""
    acc = np.zeros(len(frame), np.uint64)
    for i in range(frame.shape[1]):
        salt = np.uint64((0x9E3779B97F4A7C15 * (i + 1)) % (1 << 64))
        acc = _mix64(acc ^ (_value_hashes(frame.iloc[:, i]) + salt))
    return acc


def asset_checksums(frame: pd.DataFrame) -> dict[str, tuple[int, str]]:
    """Row count and checksum of each asset's rows of a table, by asset id (as str).

    The checksum is a SHA-256 (first 32 hex digits) over the column names and
    dtypes and a 64-bit hash of each of the asset's rows (every value), in row
    order: a changed value, type, row or row order changes it.
    """
    if frame is None or len(frame) == 0:
        return {}
    header = "\x1f".join(f"{c}:{frame[c].dtype}" for c in frame.columns).encode()
    rows_h = _row_hashes(frame)
    codes, uniques = pd.factorize(frame["asset_id"].astype(str).to_numpy(dtype=object))
    order = np.argsort(codes, kind="stable")
    bounds = np.searchsorted(codes[order], np.arange(len(uniques) + 1))
    sorted_h = rows_h[order]
    out = {}
    for k, aid in enumerate(uniques):
        h = hashlib.sha256(header)
        h.update(sorted_h[bounds[k]:bounds[k + 1]].tobytes())
        out[str(aid)] = (int(bounds[k + 1] - bounds[k]), h.hexdigest()[:32])
    return out


def _check_meta(meta) -> bool:
    return (isinstance(meta, dict) and _plain_name(meta.get("file"))
            and isinstance(meta.get("geo"), bool)
            and isinstance(meta.get("dtypes"), dict)
            and all(isinstance(k, str) and isinstance(v, str)
                    for k, v in meta["dtypes"].items())
            and isinstance(meta.get("columns"), list)
            and all(isinstance(c, str) for c in meta["columns"]))


def _check_entry(entry) -> bool:
    return (isinstance(entry, dict) and isinstance(entry.get("key"), str)
            and isinstance(entry.get("tables"), dict)
            and all(isinstance(k, str) and isinstance(v, list) and len(v) == 2
                    and isinstance(v[0], int) and not isinstance(v[0], bool)
                    and isinstance(v[1], str) for k, v in entry["tables"].items()))


class Cache:
    """A cache folder of per-asset results, owned by corridor through its manifest.

    The folder holds :data:`MARKER`, a JSON manifest naming the current
    generation and every file and folder the cache wrote; corridor deletes or
    replaces nothing else. A folder that exists and holds files but no
    manifest is not corridor's: it is not used (``usable`` is False, with a
    warning naming it and some of its files), and the run goes on without a
    cache. A folder in the layout of the previous cache format (``index.json``
    and generation folders of Parquet files only) is taken over.

    Parameters
    ----------
    folder : Path
    """

    def __init__(self, folder: Path):
        self.folder = Path(folder)
        self.manifest_path = self.folder / MARKER
        self.usable = True
        self.owned: dict[str, list[str] | None] = {}
        self.generation: str | None = None
        self.index: dict = {}
        try:
            self._open()
        except OSError as exc:
            self.usable = False
            log.warning("cache folder %s cannot be read (%s); running without the cache",
                        self.folder, exc)
            return
        if self.usable:
            self.index = self._load_index()

    # - ownership -
    def _open(self) -> None:
        if not self.folder.exists() and not self.folder.is_symlink():
            return
        if not self.folder.is_dir():
            self.usable = False
            log.warning("cache_dir %s is not a folder; running without the cache", self.folder)
            return
        if self.manifest_path.exists():
            self._read_manifest()
            return
        entries = sorted(p.name for p in self.folder.iterdir())
        if not [e for e in entries if e not in DESKTOP_FILES]:
            return  # empty (or only a file manager's view settings): taken, never touched
        legacy = self._legacy_layout(entries)
        if legacy is not None:
            self.owned = legacy
            log.info("cache %s is in an older format: taken over and recomputed", self.folder)
            return
        self.usable = False
        shown = ", ".join(entries[:5]) + (f" and {len(entries) - 5} more"
                                          if len(entries) > 5 else "")
        log.warning("cache folder %s holds files corridor did not write (%s) and no %s:"
                    " it is not used and nothing in it is touched; the run goes on without"
                    " a cache (set run.cache_dir to an empty or new folder)",
                    self.folder, shown, MARKER)

    def _read_manifest(self) -> None:
        try:
            data = json.loads(self.manifest_path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            log.warning("cache manifest %s unreadable (%s); starting the cache anew (files it"
                        " does not list are left in place)", self.manifest_path, exc)
            return
        if not isinstance(data, dict) or MARKER_KEY not in data:
            log.warning("cache manifest %s is damaged; starting the cache anew (files it"
                        " does not list are left in place)", self.manifest_path)
            return
        owned = data.get("owned")
        damaged = not isinstance(owned, dict)
        for name, files in (owned.items() if isinstance(owned, dict) else ()):
            if not _plain_name(name) or name == MARKER:
                damaged = True
            elif files is None:
                self.owned[name] = None
            elif isinstance(files, list):
                kept = [f for f in files if _plain_name(f)]
                self.owned[name] = kept
                damaged |= len(kept) != len(files)
            else:
                damaged = True
        gen = data.get("generation")
        if data.get(MARKER_KEY) != FORMAT:
            log.info("cache %s has another format; recomputing every asset", self.folder)
        elif gen is not None and not (isinstance(gen, str) and isinstance(self.owned.get(gen),
                                                                          list)):
            damaged = True
        else:
            self.generation = gen
        if damaged:
            log.warning("cache manifest %s is damaged (wrong types or entries); recomputing"
                        " every asset (files it does not list are left in place)",
                        self.manifest_path)
            self.generation = None

    def _legacy_layout(self, entries: list[str]) -> dict | None:
        """Owned entries of a cache of format 1 (no manifest), or None when not one."""
        owned: dict[str, list[str] | None] = {}
        for name in entries:
            p = self.folder / name
            if p.is_symlink():
                return None
            if name == "index.json" and p.is_file():
                try:
                    idx = json.loads(p.read_text(encoding="utf-8"))
                except (OSError, ValueError):
                    return None
                if not isinstance(idx, dict) or idx.get("format") != 1:
                    return None
                owned[name] = None
            elif _LEGACY_TMP.match(name) and p.is_file():
                owned[name] = None
            elif _GEN_NAME.match(name) and p.is_dir():
                files = sorted(f.name for f in p.iterdir())
                if not all(f.endswith(".parquet") and (p / f).is_file() for f in files):
                    return None
                owned[name] = files
            else:
                return None
        return owned if "index.json" in owned else None

    def _write_manifest(self) -> None:
        data = {MARKER_KEY: FORMAT, "written_by": f"corridor {__version__}",
                "about": "corridor's cache of per-asset results; corridor deletes only what"
                         " this file lists; safe to delete as a whole",
                "generation": self.generation, "owned": self.owned}
        tmp = self.folder / f".{MARKER}.tmp-{os.getpid()}-{secrets.token_hex(4)}"
        fh = open(tmp, "x", encoding="utf-8")  # "x": a new file, never someone else's
        try:
            with fh:
                fh.write(json.dumps(data, indent=1))
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, self.manifest_path)
        except BaseException:
            with contextlib.suppress(OSError):
                tmp.unlink()
            raise

    # - index -
    def _load_index(self) -> dict:
        if self.generation is None:
            return {}
        path = self.folder / self.generation / "index.json"
        try:
            idx = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            log.warning("cache index %s unreadable (%s); recomputing every asset", path, exc)
            return {}
        if not isinstance(idx, dict) or idx.get("format") != FORMAT:
            log.warning("cache %s has another format; recomputing every asset", self.folder)
            return {}
        if idx.get("checksum") != CHECKSUM:
            log.info("cache %s was checked another way (%s); recomputing every asset",
                     self.folder, idx.get("checksum"))
            return {}
        tables, assets = idx.get("tables"), idx.get("assets")
        if (not isinstance(tables, dict) or not isinstance(assets, dict)
                or not all(isinstance(k, str) and _check_meta(m) for k, m in tables.items())
                or not all(isinstance(k, str) and _check_entry(e) for k, e in assets.items())
                or not all(m["file"] in (self.owned.get(self.generation) or [])
                           for m in tables.values())):
            log.warning("cache index %s is damaged (wrong types or entries); recomputing"
                        " every asset", path)
            return {}
        return idx

    @property
    def keys(self) -> dict[str, str]:
        """Cache key of each cached asset, by asset id (as str)."""
        return {a: e["key"] for a, e in self.index.get("assets", {}).items()}

    def load(self, asset_ids: set[str]) -> tuple[dict[str, pd.DataFrame], set[str]] | None:
        """Rows of the given assets of every cached table, checked against the index.

        Returns
        -------
        (tables, failed) or None
            ``failed``: the asset ids whose rows do not match their row count
            and checksum (their rows are left out of ``tables``); None when a
            table cannot be read at all.
        """
        if not asset_ids:
            return {}, set()
        gen = self.folder / str(self.generation)
        assets = self.index.get("assets", {})
        out = {}
        failed: set[str] = set()
        try:
            for name, meta in self.index.get("tables", {}).items():
                frame = read_table(gen / meta["file"], meta)
                if ([str(c) for c in frame.columns] != meta["columns"]
                        or "asset_id" not in frame.columns
                        or {c: str(frame[c].dtype) for c in frame.columns} != meta["dtypes"]):
                    raise ValueError(f"table {name}: columns or types differ from the index")
                aid = frame["asset_id"].astype(str)
                frame = frame[aid.isin(asset_ids).to_numpy()].reset_index(drop=True)
                sums = asset_checksums(frame)
                for a in asset_ids:
                    want = assets.get(a, {}).get("tables", {}).get(name)
                    got = sums.get(a)
                    if (want is None and got is not None) or (
                            want is not None and (got is None or list(got) != list(want))):
                        failed.add(a)
                out[name] = frame
            for a in asset_ids:  # a table the asset has rows in, missing from the index
                if set(assets.get(a, {}).get("tables", {})) - set(out):
                    failed.add(a)
        except Exception as exc:  # noqa: BLE001 - the cache is optional: any failure recomputes
            log.warning("cache %s unreadable (%s: %s); recomputing every asset", self.folder,
                        type(exc).__name__, exc)
            return None
        if failed:
            shown = ", ".join(sorted(failed)[:10]) + (" ..." if len(failed) > 10 else "")
            log.warning("cache %s: the cached rows of %d asset(s) do not match their row counts"
                        " or checksums (%s); those assets are recomputed", self.folder,
                        len(failed), shown)
            for name, frame in out.items():
                keep = ~frame["asset_id"].astype(str).isin(failed).to_numpy()
                if not keep.all():
                    out[name] = frame[keep].reset_index(drop=True)
        return out, failed

    # - writing -
    def store(self, keys: pd.DataFrame, tables: dict[str, pd.DataFrame]) -> bool:
        """Write a new generation with ``tables`` (all assets) and switch to it.

        Never fails the run: a cache that cannot be written (read-only,
        disk full, permission) logs a warning and returns False.
        """
        if not self.usable:
            return False
        try:
            self._store(keys, tables)
        except Exception as exc:  # noqa: BLE001 - the cache is optional
            log.warning("cache %s not written (%s: %s); the results are complete, the next"
                        " run recomputes what is missing", self.folder, type(exc).__name__, exc)
            log.debug("cache write failure", exc_info=True)
            return False
        return True

    def _store(self, keys: pd.DataFrame, tables: dict[str, pd.DataFrame]) -> None:
        existed = self.folder.exists()
        self.folder.mkdir(parents=True, exist_ok=True)
        if existed and not self.manifest_path.exists() and not self.owned:
            leftover = [p.name for p in self.folder.iterdir() if p.name not in DESKTOP_FILES]
            if leftover:  # something appeared since the folder was checked
                raise OSError(f"folder holds files corridor did not write: {leftover[:5]}")
        gen = f"g{int(time.time() * 1000):x}-{os.getpid()}"
        n = 0
        while (self.folder / gen).exists() or (self.folder / gen).is_symlink() \
                or gen in self.owned:
            n += 1
            gen = f"g{int(time.time() * 1000):x}-{os.getpid()}-{n}"
        files = {name: table_file_name(name) for name in tables}
        self.owned[gen] = ["index.json", *files.values()]
        self._write_manifest()  # the new folder is listed before it exists
        gdir = self.folder / gen
        gdir.mkdir()
        metas = {}
        sums: dict[str, dict] = {}
        for name, frame in tables.items():
            metas[name] = {"file": files[name], **write_table(frame, gdir / files[name])}
            for aid, (count, digest) in asset_checksums(frame).items():
                sums.setdefault(aid, {})[name] = [count, digest]
        ids = keys["asset_id"].astype(str).tolist()
        index = {"format": FORMAT, "corridor": __version__, "checksum": CHECKSUM,
                 "written_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                 "tables": metas,
                 "assets": {a: {"key": str(k), "tables": sums.get(a, {})}
                            for a, k in zip(ids, keys["key"], strict=True)}}
        with open(gdir / "index.json", "x", encoding="utf-8") as fh:
            fh.write(json.dumps(index))
            fh.flush()
            os.fsync(fh.fileno())
        self.generation = gen
        self._write_manifest()  # the switch: atomic
        self.index = index
        self._prune()

    def _prune(self) -> None:
        """Delete the owned files of older generations, and own leftover manifest copies."""
        for name, files in list(self.owned.items()):
            if name == self.generation:
                continue
            p = self.folder / name
            if files is None:  # a plain file of the cache's (a link is removed, not followed)
                if p.is_symlink() or p.is_file():
                    p.unlink(missing_ok=True)
                del self.owned[name]
                continue
            if p.is_symlink() or (p.exists() and not p.is_dir()):
                del self.owned[name]  # not the folder the cache made: left alone
                continue
            for f in files:
                (p / f).unlink(missing_ok=True)
            try:
                p.rmdir()
            except FileNotFoundError:
                pass
            except OSError:
                log.warning("cache %s: folder %s holds files corridor did not write; left in"
                            " place", self.folder, name)
            del self.owned[name]
        for p in self.folder.iterdir():
            if _MANIFEST_TMP.match(p.name) and p.is_file() and not p.is_symlink():
                try:
                    data = json.loads(p.read_text(encoding="utf-8"))
                except (OSError, ValueError):
                    continue
                if isinstance(data, dict) and MARKER_KEY in data:
                    p.unlink(missing_ok=True)  # a manifest copy a killed run left
        self._write_manifest()


@contextlib.contextmanager
def locked(folder: Path):
    """Hold the lock of a cache folder (``<folder>.lock``, :mod:`corridor.lock`).

    Yields the folder, or None when the lock file cannot be written (read-only
    or full disk, no permission): the run then goes on without the cache,
    with a warning. Another live run holding the lock raises
    :class:`corridor.lock.LockError`, as for an output folder.
    """
    from corridor.lock import LockError, OutputLock

    lock = OutputLock(folder)
    try:
        lock.acquire()
    except LockError:
        raise
    except OSError as exc:
        log.warning("cache %s cannot be locked (%s); running without the cache", folder, exc)
        yield None
        return
    try:
        yield folder
    finally:
        try:
            lock.release()
        except OSError as exc:
            log.warning("cache lock %s not removed (%s)", lock.path, exc)
