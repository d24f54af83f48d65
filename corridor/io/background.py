"""One output file written in a forked process while this process does other work.

pyogrio holds the GIL while GDAL inserts rows, so a thread cannot overlap a
large GeoPackage write with the report (measured: the report took 6x longer
beside it). A forked child shares the finished tables with this process page
by page (copy on write: nothing is pickled or copied up front), writes the
file, and sends back only ``None`` or the exception it raised, which
:meth:`BackgroundWrite.wait` raises again here, so a failed write (a full
disk, say) fails the run exactly as a write on this thread would.

Linux only (``fork`` there is the default and well supported, and the child
is told to die with its parent: ``PR_SET_PDEATHSIG``); elsewhere
:func:`start` runs the write at once on this thread.
"""

from __future__ import annotations

import logging
import sys
import time
import traceback
from collections.abc import Callable

log = logging.getLogger(__name__)


def forking_available() -> bool:
    """True where :func:`start` writes in a forked child (Linux with ``fork``)."""
    import multiprocessing

    return sys.platform.startswith("linux") and "fork" in multiprocessing.get_all_start_methods()


def _die_with_parent() -> None:
    """Ask the kernel to kill this (child) process when its parent dies (Linux)."""
    import ctypes
    import signal

    try:
        libc = ctypes.CDLL("libc.so.6", use_errno=True)
        pr_set_pdeathsig = 1
        libc.prctl(pr_set_pdeathsig, int(signal.SIGKILL), 0, 0, 0)
    except (OSError, AttributeError):  # not glibc: the child still ends with its write
        pass


def _child(conn, fn: Callable[..., object], args: tuple) -> None:
    _die_with_parent()
    t0 = time.perf_counter()
    message: object = None
    try:
        fn(*args)
    except BaseException as exc:  # noqa: BLE001 - sent to the parent, raised there
        message = exc
    try:
        conn.send((message, time.perf_counter() - t0))
    except Exception:  # the exception does not pickle: send its text
        text = "".join(traceback.format_exception(message)) if isinstance(
            message, BaseException) else repr(message)
        conn.send((RuntimeError(f"output writer process failed:\n{text}"),
                   time.perf_counter() - t0))
    finally:
        conn.close()


class BackgroundWrite:
    """Handle of a write started by :func:`start`.

    Attributes
    ----------
    seconds : float
        Duration of the write itself [s] once :meth:`wait` returned (in the
        child, or on this thread when it ran inline).
    forked : bool
        True when the write ran in a child process.
    """

    def __init__(self, fn: Callable[..., object], args: tuple, fork: bool):
        self.seconds = 0.0
        self.forked = fork
        self._proc = None
        self._conn = None
        if not fork:
            t0 = time.perf_counter()
            fn(*args)
            self.seconds = time.perf_counter() - t0
            return
        import multiprocessing

        ctx = multiprocessing.get_context("fork")
        receive, send = ctx.Pipe(duplex=False)
        self._proc = ctx.Process(target=_child, args=(send, fn, args), daemon=True,
                                 name="corridor-writer")
        self._proc.start()
        send.close()  # the child holds the sending end: EOF here if it dies
        self._conn = receive

    def wait(self) -> None:
        """Wait for the write to end; raise its exception, if it raised one.

        Raises
        ------
        BaseException
            The exception the write raised in the child.
        RuntimeError
            The child ended without a word (killed, or crashed).
        """
        if self._proc is None or self._conn is None:
            return
        proc, conn = self._proc, self._conn
        try:
            try:
                error, self.seconds = conn.recv()
            except EOFError:
                proc.join()
                raise RuntimeError(f"output writer process ended with exit code"
                                   f" {proc.exitcode} before finishing its file") from None
            proc.join()
        finally:
            conn.close()
            if proc.is_alive():  # interrupted while waiting: the child goes too
                proc.kill()
                proc.join()
            self._proc = self._conn = None
        if error is not None:
            raise error

    def cancel(self) -> None:
        """Stop a write still running (the caller discards its file)."""
        if self._proc is not None and self._proc.is_alive():
            self._proc.kill()
            self._proc.join()
        if self._conn is not None:
            self._conn.close()
        self._proc = self._conn = None


def start(fn: Callable[..., object], *args, fork: bool = True) -> BackgroundWrite:
    """Run ``fn(*args)`` in a forked child (where :func:`forking_available`), else now.

    Parameters
    ----------
    fn : callable
        The write; its return value is ignored.
    *args
        Its arguments; a forked child sees them as they are now (copy on write).
    fork : bool, optional
        False: run the write on this thread now.

    Returns
    -------
    BackgroundWrite
        Call :meth:`BackgroundWrite.wait` before using the file.
    """
    return BackgroundWrite(fn, args, fork and forking_available())
