"""Exception family of corridor.

Every error a user can cause is one of these; the CLI turns them into a clear
message and exit code 2. Anything else is an internal error (exit code 3), except
the file system refusing a write (disk full, read-only, no permission), which
:func:`storage_problem` recognises and the CLI reports as exit code 2 too.
"""


class CorridorError(Exception):
    """Base class for errors caused by the user's config or input."""


class ConfigError(CorridorError, ValueError):
    """The run configuration is invalid.

    Parameters
    ----------
    problems : list of str
        Every problem found, each naming the file and key.
    """

    def __init__(self, problems):
        if isinstance(problems, str):
            problems = [problems]
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))


class InputError(CorridorError, ValueError):
    """An input layer cannot be used.

    Parameters
    ----------
    problems : list of str
        Every problem found, each naming the layer, feature id and field.
    """

    def __init__(self, problems):
        if isinstance(problems, str):
            problems = [problems]
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))


class OutputFolderError(CorridorError):
    """The output folder cannot be used without touching files corridor did not write.

    Raised before any computing: the folder holds files and no manifest of
    corridor's (``.corridor-manifest.json``), or the output path names a file,
    or a new output would replace a file corridor did not write.

    Parameters
    ----------
    problems : list of str
        Every problem found, naming the folder and some of its files.
    """

    def __init__(self, problems):
        if isinstance(problems, str):
            problems = [problems]
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))


class StorageError(CorridorError):
    """The file system refused a write or a read: disk full, read-only, no permission.

    Parameters
    ----------
    problems : list of str
        The cause, naming the file or folder where known.
    """

    def __init__(self, problems):
        if isinstance(problems, str):
            problems = [problems]
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))


def _storage_errnos() -> frozenset[int]:
    import errno

    names = ("ENOSPC", "EDQUOT", "EACCES", "EPERM", "EROFS", "EFBIG")
    return frozenset(getattr(errno, n) for n in names if hasattr(errno, n))


#: Messages of libraries (GDAL, SQLite) that report the same causes without an errno.
_STORAGE_TEXTS = ("no space left on device", "database or disk is full", "disk quota exceeded",
                  "read-only file system", "permission denied",
                  "attempt to write a readonly database", "file too large")


def storage_problem(exc: BaseException) -> str | None:
    """A one-line cause when ``exc`` (or what caused it) is a disk-full or permission error.

    Walks the chain of causes (``__cause__``, ``__context__``). An
    ``OSError`` with errno ENOSPC, EDQUOT, EACCES, EPERM, EROFS or EFBIG
    counts, and so does a library error whose text says the same (GDAL and
    SQLite report a full disk as text).

    Returns
    -------
    str or None
        For example ``"No space left on device: /data/out/screening.gpkg"``.
    """
    codes = _storage_errnos()
    seen: set[int] = set()
    cur: BaseException | None = exc
    while cur is not None and id(cur) not in seen:
        seen.add(id(cur))
        if isinstance(cur, StorageError):
            return "; ".join(cur.problems)
        if isinstance(cur, OSError) and cur.errno in codes:
            import os

            where = [str(p) for p in (cur.filename, cur.filename2) if p is not None]
            text = cur.strerror or os.strerror(cur.errno)
            return f"{text}: {' -> '.join(where)}" if where else text
        message = str(cur)
        if any(t in message.lower() for t in _STORAGE_TEXTS):
            return message.strip().splitlines()[0] if message.strip() else type(cur).__name__
        cur = cur.__cause__ or cur.__context__
    return None
