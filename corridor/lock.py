"""One run at a time per output folder: a lock file beside the folder.

The lock is ``<out>.lock``, created with ``O_CREAT | O_EXCL`` (atomic on
local file systems) and holding JSON: PID, host, start time and the
process start tick (so a recycled PID is not mistaken for the holder).

While a run holds the lock, a daemon thread refreshes the lock file's
modification time every :data:`HEARTBEAT_S` seconds (the heartbeat). A lock
is stale, reported with a warning and taken over, when

- its holder ran on this host and that process is gone (PID not running, or
  running but started at another tick), or
- its heartbeat is older than :data:`STALE_AFTER_S` (10 min), whatever the
  host: the holder was killed on another machine or in a container (an
  OOM kill, a lost node) and cannot refresh it. Hosts sharing an output
  folder need clocks that agree to well within that age (NTP), or
- it is empty or unreadable and older than :data:`UNREADABLE_STALE_S`
  (its writer died between creating and writing it, or the disk was full).

``corridor unlock CONFIG`` (:func:`break_lock`) removes a lock by hand after
printing its holder.
"""

from __future__ import annotations

import json
import logging
import os
import socket
import threading
import time
from datetime import UTC, datetime
from pathlib import Path

from corridor.errors import CorridorError

log = logging.getLogger(__name__)

#: A lock file that cannot be parsed (empty, half written) and is older than
#: this is stale [s]: a holder writes its few bytes right after creating it.
UNREADABLE_STALE_S = 5.0
#: How often a holder refreshes its lock file's modification time [s].
HEARTBEAT_S = 30.0
#: A lock whose heartbeat is older than this is stale, on any host [s].
STALE_AFTER_S = 600.0


class LockError(CorridorError):
    """Another run holds the output folder's lock."""

    def __init__(self, message: str):
        self.problems = [message]
        super().__init__(message)


def lock_path(out_dir: Path) -> Path:
    """The lock file of an output folder: ``<parent>/<name>.lock``."""
    out_dir = Path(out_dir)
    return out_dir.parent / f"{out_dir.name}.lock"


def process_start_tick(pid: int) -> str | None:
    """Start time of a process in clock ticks since boot (Linux ``/proc``), else None."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as fh:
            text = fh.read()
        return text.rsplit(")", 1)[1].split()[19]
    except (OSError, IndexError):
        return None


def pid_alive(pid: int, start_tick: str | None = None) -> bool:
    """Whether process ``pid`` runs on this host (and, if given, started at ``start_tick``)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OverflowError:
        return False
    if start_tick is not None:
        now = process_start_tick(pid)
        if now is not None and now != start_tick:
            return False
    return True


def read_holder(path: Path) -> dict | None:
    """The lock file's record; ``{}`` when there is no lock file, None when unreadable."""
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        return {}
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) and data else None


def heartbeat_age_s(path: Path) -> float | None:
    """Seconds since the lock file was last refreshed; None when it is gone."""
    try:
        return max(0.0, time.time() - Path(path).stat().st_mtime)
    except OSError:
        return None


def describe_holder(holder: dict | None, age_s: float | None) -> str:
    """``PID 123 on host h since 2026-01-01T01:30:00+00:00, heartbeat 12 s ago``."""
    if not holder:
        text = "an unreadable or empty lock record"
    else:
        text = (f"PID {holder.get('pid', '?')} on host {holder.get('host', '?')} since"
                f" {holder.get('started_utc', '?')}")
    if age_s is not None:
        text += f", heartbeat {age_s:.0f} s ago"
    return text


def _holder_pid(holder: dict) -> int:
    try:
        return int(holder.get("pid", -1))
    except (TypeError, ValueError):
        return -1


class OutputLock:
    """Exclusive lock of an output folder, as a context manager.

    Parameters
    ----------
    out_dir : Path
        The output folder; the lock file goes beside it.
    heartbeat_s : float, optional
        Interval of the heartbeat [s] (default :data:`HEARTBEAT_S`).

    Raises
    ------
    LockError
        When a live run holds the lock.
    OSError
        When the lock file cannot be written (disk full, no permission); a
        half-written lock file is removed first.
    """

    def __init__(self, out_dir: Path, heartbeat_s: float = HEARTBEAT_S):
        self.path = lock_path(out_dir)
        self.out_dir = Path(out_dir)
        self.held = False
        self.heartbeat_s = float(heartbeat_s)
        self._ino: int | None = None
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def _record(self) -> dict:
        return {"pid": os.getpid(), "host": socket.gethostname(),
                "started_utc": datetime.now(UTC).isoformat(timespec="seconds"),
                "start_tick": process_start_tick(os.getpid()), "out_dir": str(self.out_dir),
                "heartbeat_s": self.heartbeat_s}

    def _try_create(self) -> bool:
        try:
            fd = os.open(self.path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            return False
        try:
            self._ino = os.fstat(fd).st_ino
            fh = os.fdopen(fd, "w", encoding="utf-8")
        except BaseException:
            os.close(fd)
            self._unlink_own()
            raise
        try:
            with fh:
                json.dump(self._record(), fh)
                fh.flush()
                os.fsync(fh.fileno())
        except BaseException:
            # disk full or interrupted: never leave an empty lock behind to block later runs
            self._unlink_own()
            raise
        return True

    def _unlink_own(self) -> None:
        try:
            if self._ino is None or self.path.stat().st_ino == self._ino:
                self.path.unlink()
        except OSError:
            pass

    def _holder(self) -> dict | None:
        return read_holder(self.path)

    def acquire(self) -> None:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        for _ in range(3):
            if self._try_create():
                self.held = True
                self._start_heartbeat()
                return
            holder = self._holder()
            if holder == {}:  # released meanwhile
                continue
            age = heartbeat_age_s(self.path)
            if age is None:
                continue
            if holder is None:
                if age < UNREADABLE_STALE_S:
                    raise LockError(f"output folder {self.out_dir} is being locked by another"
                                    f" run (lock file {self.path} is being written)")
                log.warning("stale lock %s (empty or unreadable, %.0f s old) taken over",
                            self.path, age)
                self._remove_stale(None)
                continue
            pid, host = _holder_pid(holder), str(holder.get("host", "?"))
            since = holder.get("started_utc", "?")
            if host == socket.gethostname() and not pid_alive(pid, holder.get("start_tick")):
                log.warning("stale lock %s: PID %d on host %s (since %s) is not running;"
                            " taken over", self.path, pid, host, since)
                self._remove_stale(holder)
                continue
            if age > STALE_AFTER_S:
                log.warning("stale lock %s: PID %d on host %s (since %s) has not refreshed"
                            " it for %.0f min (limit %.0f min); taken over", self.path, pid,
                            host, since, age / 60.0, STALE_AFTER_S / 60.0)
                self._remove_stale(holder)
                continue
            raise LockError(f"output folder {self.out_dir} is locked by PID {pid} on host"
                            f" {host} since {since} (lock file {self.path}, heartbeat"
                            f" {age:.0f} s ago); another run is in progress. Nothing was done"
                            " (skipped). A lock whose heartbeat is older than"
                            f" {STALE_AFTER_S / 60.0:.0f} min is taken over by the next run;"
                            " `corridor unlock CONFIG` breaks it by hand")
        raise LockError(f"output folder {self.out_dir}: could not take the lock {self.path}")

    def _remove_stale(self, seen: dict | None) -> None:
        # re-read just before removing: another run may have taken the stale lock over
        # in between, and its fresh lock must not be removed
        if self._holder() != seen:
            return
        try:
            self.path.unlink()
        except FileNotFoundError:
            pass

    # -- heartbeat ----------------------------------------------------------
    def _start_heartbeat(self) -> None:
        if self.heartbeat_s <= 0:
            return
        self._stop.clear()
        self._thread = threading.Thread(target=self._beat, name=f"corridor-lock:{self.path.name}",
                                        daemon=True)
        self._thread.start()

    def _beat(self) -> None:
        while not self._stop.wait(self.heartbeat_s):
            if not self.still_held():
                log.warning("lock file %s was removed or replaced while this run held it"
                            " (`corridor unlock`?); this run will not publish", self.path)
                return
            try:
                os.utime(self.path)
            except OSError as exc:  # a full or read-only disk: keep trying
                log.debug("heartbeat of %s failed: %s", self.path, exc)

    def still_held(self) -> bool:
        """Whether the lock file is still the one this object created."""
        if not self.held:
            return False
        try:
            return self._ino is None or self.path.stat().st_ino == self._ino
        except OSError:
            return False

    def release(self) -> None:
        if not self.held:
            return
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=5.0)
            self._thread = None
        if self.still_held():
            holder = self._holder()
            if holder is None or _holder_pid(holder or {}) == os.getpid():
                self.path.unlink(missing_ok=True)
        self.held = False

    def __enter__(self) -> OutputLock:
        self.acquire()
        return self

    def __exit__(self, *exc) -> bool:
        self.release()
        return False


def break_lock(out_dir: Path, force: bool = False) -> tuple[str, bool]:
    """Remove the lock of an output folder (``corridor unlock``).

    Parameters
    ----------
    out_dir : Path
        The output folder.
    force : bool
        Also remove a lock whose holder is a running process on this host.

    Returns
    -------
    (str, bool)
        A description of the holder (or of no lock) and whether a lock was removed.

    Raises
    ------
    LockError
        The holder runs on this host and ``force`` is false.
    """
    path = lock_path(Path(out_dir))
    if not os.path.lexists(path):
        return f"no lock file {path}: nothing to do", False
    holder = read_holder(path)
    age = heartbeat_age_s(path)
    text = f"lock file {path}: held by {describe_holder(holder, age)}"
    if (holder and not force and str(holder.get("host")) == socket.gethostname()
            and pid_alive(_holder_pid(holder), holder.get("start_tick"))):
        raise LockError(f"{text}; that process is running on this host: stop it first, or"
                        " pass --force")
    path.unlink(missing_ok=True)
    return text, True
