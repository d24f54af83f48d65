"""Reading TOML files for corridor's configuration, with messages that name the file.

Used by :mod:`corridor.config` (run files) and :mod:`corridor.arrangements`
(tower arrangement files).
"""

from __future__ import annotations

import stat
import tomllib
from pathlib import Path
from typing import Any

from corridor.errors import ConfigError

__all__ = ["read_toml", "section_table", "short_repr"]


def read_toml(path: Path, what: str, name: str | None = None) -> dict:
    """Read a TOML file; every failure is a :class:`ConfigError` naming the file.

    Parameters
    ----------
    path : Path
        The file.
    what : str
        What the file is, for messages (``"config file"``).
    name : str, optional
        How messages name the file (default: the full path).
    """
    name = str(path) if name is None else name
    try:
        mode = path.stat().st_mode
    except FileNotFoundError:
        raise ConfigError(f"{path}: {what} not found") from None
    except (OSError, ValueError) as exc:
        raise ConfigError(f"{path}: {what} cannot be read: {exc}") from None
    if stat.S_ISDIR(mode):
        raise ConfigError(f"{path}: is a folder, expected a TOML file")
    if not stat.S_ISREG(mode):
        raise ConfigError(f"{path}: {what} is not a regular file (a FIFO, device or socket?)")
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{name}: not valid TOML: {exc}") from None
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{name}: not UTF-8 text ({exc}); TOML files are UTF-8: save it"
                          " as UTF-8") from None
    except RecursionError:
        raise ConfigError(f"{name}: not valid TOML for corridor: arrays or tables nested too"
                          " deeply") from None
    except OSError as exc:
        raise ConfigError(f"{path}: {what} cannot be read: {exc}") from None


def section_table(raw: dict, key: str, where: str, problems: list[str]) -> dict:
    """``raw[key]`` when it is a table (or absent: an empty one); else a problem."""
    value = raw.get(key, {})
    if isinstance(value, dict):
        return value
    problems.append(f"{where}: expected a table, got {short_repr(value)}")
    return {}


def short_repr(value: Any, limit: int = 60) -> str:
    """``repr(value)``, cut to ``limit`` characters for a message."""
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."
