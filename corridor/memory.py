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

_trim = None


def _load_trim():
    global _trim
    if _trim is None:
        _trim = False
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
                _trim = False
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
    if not fn:
        return False
    fn(0)
    return True
