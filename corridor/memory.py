"""Handing freed memory back to the operating system between the big steps.

A large run allocates and frees millions of small objects (geometries, strings)
and many mid-sized arrays on several threads. glibc's allocator keeps freed
heap pages in per-thread arenas, so the process's resident size stays near its
high-water mark and later steps stack on top of it. ``malloc_trim`` returns
the free pages; it changes no data.
"""

from __future__ import annotations

import ctypes
import sys
from collections.abc import Callable

#: glibc's ``malloc_trim`` once looked up; None where the C library has none.
_trim: Callable[[int], int] | None = None
_trim_looked_up = False


def _load_trim() -> Callable[[int], int] | None:
    global _trim, _trim_looked_up
    if not _trim_looked_up:
        _trim_looked_up = True
        if sys.platform.startswith("linux"):
            try:
                # the glibc soname; ctypes.util.find_library would fork a helper
                # program from a process that may hold gigabytes
                libc = ctypes.CDLL("libc.so.6")
                fn = libc.malloc_trim
                fn.argtypes = [ctypes.c_size_t]
                fn.restype = ctypes.c_int
                _trim = fn
            except (OSError, AttributeError):  # not glibc (e.g. musl): nothing to do
                _trim = None
    return _trim


def release_free_memory() -> bool:
    """Return the allocator's free pages to the operating system.

    Returns
    -------
    bool
        True where glibc's ``malloc_trim`` is available and was called; False
        elsewhere (the call is then a no-op).
    """
    fn = _load_trim()
    if fn is None:
        return False
    fn(0)
    return True
