"""One run at a time per output folder: a lock file beside the folder.

The lock is ``<out>.lock``, created with ``O_CREAT | O_EXCL`` (atomic on
local file systems) and holding JSON: PID, host, start time and the
process start tick (so a recycled PID is not mistaken for the holder). A
lock whose holder is gone (same host, PID not alive or started at another
tick) is stale: it is reported with a warning and taken over.
"""

from __future__ import annotations

import json
import logging
import os
import socket
import time
from datetime import UTC, datetime
from pathlib import Path

from corridor.errors import CorridorError

log = logging.getLogger(__name__)

#: A lock file that cannot be parsed and is older than this is stale [s]
#: (the holder died between creating and writing it).
UNREADABLE_STALE_S = 30.0


class LockError(CorridorError):
    """Another run holds the output folder's lock."""

    def __init__(self, message: str):
        self.problems = [message]
        super().__init__(message)


def lock_path(out_dir: Path) -> Path:
    """The lock file of an output folder: ``<parent>/<name>.lock``."""
    out_dir = Path(out_dir)
    return out_dir.parent / f"{out_dir.name}.lock"


def _start_tick(pid: int) -> str | None:
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
    if start_tick is not None:
        now = _start_tick(pid)
        if now is not None and now != start_tick:
            return False
    return True


class OutputLock:
    """Exclusive lock of an output folder, as a context manager.

    Parameters
    ----------
    out_dir : Path
        The output folder; the lock file goes beside it.

    Raises
    ------
    LockError
        When a live run holds the lock.
    """

    def __init__(self, out_dir: Path):
        self.path = lock_path(out_dir)
        self.out_dir = Path(out_dir)
        self.held = False

    def _record(self) -> dict:
        return {"pid": os.getpid(), "host": socket.gethostname(),
                "started_utc": datetime.now(UTC).isoformat(timespec="seconds"),
                "start_tick": _start_tick(os.getpid()), "out_dir": str(self.out_dir)}

    def _try_create(self) -> bool:
        try:
            fd = os.open(self.path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            return False
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            json.dump(self._record(), fh)
            fh.flush()
            os.fsync(fh.fileno())
        return True

    def _holder(self) -> dict | None:
        try:
            return json.loads(self.path.read_text(encoding="utf-8"))
        except FileNotFoundError:
            return {}
        except (OSError, ValueError):
            return None

    def acquire(self) -> None:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        for _ in range(3):
            if self._try_create():
                self.held = True
                return
            holder = self._holder()
            if holder == {}:  # released meanwhile
                continue
            if holder is None:
                try:
                    age = time.time() - self.path.stat().st_mtime
                except FileNotFoundError:
                    continue
                if age < UNREADABLE_STALE_S:
                    raise LockError(f"output folder {self.out_dir} is being locked by another"
                                    f" run (lock file {self.path} is being written)")
                log.warning("stale lock %s (unreadable, %.0f s old) taken over", self.path, age)
                self._remove_stale(None)
                continue
            pid, host = int(holder.get("pid", -1)), str(holder.get("host", "?"))
            since = holder.get("started_utc", "?")
            if host == socket.gethostname() and not pid_alive(pid, holder.get("start_tick")):
                log.warning("stale lock %s: PID %d on host %s (since %s) is not running;"
                            " taken over", self.path, pid, host, since)
                self._remove_stale(holder)
                continue
            raise LockError(f"output folder {self.out_dir} is locked by PID {pid} on host"
                            f" {host} since {since} (lock file {self.path}); another run is"
                            " in progress")
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

    def release(self) -> None:
        if not self.held:
            return
        holder = self._holder()
        if holder and holder.get("pid") == os.getpid():
            self.path.unlink(missing_ok=True)
        self.held = False

    def __enter__(self) -> OutputLock:
        self.acquire()
        return self

    def __exit__(self, *exc) -> bool:
        self.release()
        return False
